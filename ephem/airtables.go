package ephem

import "math"

// AirTables is RefractionFast and AirmassSin for a loop over many altitudes
// at one observer (the night grid): the pressure-temperature factor is
// computed once instead of at every call, and both lookups are small enough
// for the compiler to inline, so the loop makes no call (in Go's register
// ABI every call spills the loop's live floating-point values). Below 90
// deg the results equal RefractionFast's and AirmassSin's bit for bit;
// above it they use the 90 deg entry (within 1e-15 of them; TestAirTables).
type AirTables struct {
	scale float64   // (P/1010)(283/(273+T)); 0 without refraction
	refr  []float64 // refrTable
	ky    []float64 // kyTable
	inf   float64   // +Inf, what AirmassSin returns at and below the horizon
}

// AirTables returns the observer's tables (its air as it is now: build them
// again after SetAir).
func (o *Observer) AirTables() AirTables {
	a := AirTables{refr: refrTable, ky: kyTable[:], inf: math.Inf(1)}
	if o.PressureHPa > 0 {
		a.scale = o.airScale()
	}
	return a
}

// Refraction is Observer.RefractionFast(alt) (radians).
func (a *AirTables) Refraction(alt float64) float64 {
	h := alt * Rad2Deg
	if h <= -5 {
		return 0
	}
	x := (h + 5) * refrFine
	if h >= 5 {
		if h >= 90 {
			h = 90
		}
		x = 10*refrFine + (h-5)*refrCoarse
	}
	i := int(x)
	f := x - float64(i)
	return a.scale * (a.refr[i] + f*(a.refr[i+1]-a.refr[i]))
}

// AirmassSin is the package's AirmassSin(sinAlt, altDeg).
func (a *AirTables) AirmassSin(sinAlt, altDeg float64) float64 {
	if !(altDeg > 0) {
		return a.inf
	}
	if altDeg >= 90 {
		altDeg = 90
	}
	x := altDeg * kyPerDeg
	i := int(x)
	f := x - float64(i)
	return 1 / (sinAlt + a.ky[i] + f*(a.ky[i+1]-a.ky[i]))
}
