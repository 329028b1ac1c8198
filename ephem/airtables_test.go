package ephem

import (
	"math"
	"testing"
)

// TestAirTables: AirTables gives RefractionFast's and AirmassSin's values
// bit for bit below 90 deg (it is the same arithmetic with the air factor
// hoisted; no outside reference: those two are checked against Refraction
// and Airmass by TestRefractionFast and TestAirmassTable), within 1e-15
// at 90 deg, and no refraction without air.
func TestAirTables(t *testing.T) {
	const zenithTol = 1e-15 // rad or airmass, the 90 deg entry against the formula
	for _, air := range []struct{ p, tc float64 }{{1010, 10}, {620, -15}, {1040, 35}, {0, 10}} {
		o, err := NewObserver(30, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		if err := o.SetAir(air.p, air.tc); err != nil {
			t.Fatal(err)
		}
		a := o.AirTables()
		for i := -20000; i <= 180000; i++ {
			h := float64(i) / 2000 // deg, -10 .. 90 every 1.8 arcsec
			alt := h * Deg2Rad
			got, want := a.Refraction(alt), o.RefractionFast(alt)
			if h < 90 && got != want || math.Abs(got-want) > zenithTol {
				t.Fatalf("air %v: Refraction(%v deg) = %v, RefractionFast %v", air, h, got, want)
			}
			s := math.Sin(alt)
			gx, wx := a.AirmassSin(s, h), AirmassSin(s, h)
			if h < 90 && gx != wx && !(math.IsInf(gx, 1) && math.IsInf(wx, 1)) || math.Abs(gx-wx) > zenithTol {
				t.Fatalf("air %v: AirmassSin(%v deg) = %v, want %v", air, h, gx, wx)
			}
		}
	}
}
