package constraints

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"github.com/nightloom/nightloom/ephem"
)

// HorizonPoint is one point of a horizon profile: the altitude (degrees) of
// the local horizon (trees, buildings, hills) at an azimuth (degrees from
// north through east).
type HorizonPoint struct {
	AzDeg, AltDeg float64
}

// ErrHorizon reports an invalid horizon profile.
var ErrHorizon = errors.New("constraints: invalid horizon profile")

// Horizon is a site's local horizon: altitude as a piecewise-linear function
// of azimuth through the profile points, wrapping through north. An empty
// profile is the mathematical horizon (altitude 0).
type Horizon struct {
	az, alt []float64 // radians, sorted by azimuth, strictly increasing
	// first[k] is the index of the first point with azimuth >= k/4 deg, so
	// a lookup starts next to its answer instead of searching.
	first []uint16
	// top bounds every interpolated altitude from above (the highest point
	// plus 1e-12 rad for rounding; 0 for an empty profile), so a target
	// above it needs no lookup; bottom bounds them from below (the lowest
	// point less 1e-12 rad; 0 for an empty profile), so a target under it
	// is below the profile without a lookup.
	top, bottom float64
}

// horizonBins is the number of azimuth bins of the lookup index (4 per deg).
const horizonBins = 1440

// MaxHorizonPoints bounds a profile's size.
const MaxHorizonPoints = 720

// NewHorizon validates and sorts a profile. Azimuths must be in [0, 360) and
// distinct, altitudes in [-5, 90).
func NewHorizon(points []HorizonPoint) (Horizon, error) {
	if len(points) > MaxHorizonPoints {
		return Horizon{}, fmt.Errorf("%w: %d points, at most %d", ErrHorizon, len(points), MaxHorizonPoints)
	}
	ps := append([]HorizonPoint(nil), points...)
	for i, p := range ps {
		if !(p.AzDeg >= 0 && p.AzDeg < 360) {
			return Horizon{}, fmt.Errorf("%w: point %d: azimuth %v outside [0, 360)", ErrHorizon, i, p.AzDeg)
		}
		if !(p.AltDeg >= -5 && p.AltDeg < 90) {
			return Horizon{}, fmt.Errorf("%w: point %d: altitude %v outside [-5, 90)", ErrHorizon, i, p.AltDeg)
		}
	}
	sort.Slice(ps, func(i, j int) bool { return ps[i].AzDeg < ps[j].AzDeg })
	h := Horizon{az: make([]float64, len(ps)), alt: make([]float64, len(ps))}
	for i, p := range ps {
		if i > 0 && p.AzDeg == ps[i-1].AzDeg {
			return Horizon{}, fmt.Errorf("%w: azimuth %v given twice", ErrHorizon, p.AzDeg)
		}
		h.az[i], h.alt[i] = p.AzDeg*ephem.Deg2Rad, p.AltDeg*ephem.Deg2Rad
		if i == 0 || h.alt[i] > h.top {
			h.top = h.alt[i]
		}
		if i == 0 || h.alt[i] < h.bottom {
			h.bottom = h.alt[i]
		}
	}
	h.top += 1e-12
	h.bottom -= 1e-12
	if len(ps) > 1 {
		h.first = make([]uint16, horizonBins+1)
		j := 0
		for k := range h.first {
			lo := float64(k) / horizonBins * 2 * math.Pi
			for j < len(h.az) && h.az[j] < lo {
				j++
			}
			h.first[k] = uint16(j)
		}
	}
	return h, nil
}

// Points returns the profile in degrees, sorted by azimuth.
func (h *Horizon) Points() []HorizonPoint {
	out := make([]HorizonPoint, len(h.az))
	for i := range h.az {
		out[i] = HorizonPoint{h.az[i] * ephem.Rad2Deg, h.alt[i] * ephem.Rad2Deg}
	}
	return out
}

// AltitudeAt returns the horizon altitude (radians) at azimuth az (radians),
// interpolating linearly in azimuth between neighbouring points and across
// north between the last and the first point.
func (h *Horizon) AltitudeAt(az float64) float64 {
	n := len(h.az)
	switch n {
	case 0:
		return 0
	case 1:
		return h.alt[0]
	}
	if az < 0 || az >= 2*math.Pi {
		az = ephem.NormAngle(az) // tracks hold [0, 2pi) already
	}
	// First index with h.az[i] >= az: start from the bin's first point.
	i := n
	if h.first != nil {
		k := int(az / (2 * math.Pi) * horizonBins)
		if k >= horizonBins {
			k = horizonBins - 1
		}
		i = int(h.first[k])
		for i < n && h.az[i] < az {
			i++
		}
	} else {
		i = sort.SearchFloat64s(h.az, az)
	}
	var a0, a1, v0, v1 float64
	switch {
	case i < n && h.az[i] == az:
		return h.alt[i]
	case i == 0 || i == n: // between the last point and the first, across north
		a0, v0 = h.az[n-1], h.alt[n-1]
		a1, v1 = h.az[0]+2*math.Pi, h.alt[0]
		if i == 0 {
			az += 2 * math.Pi
		}
	default:
		a0, v0, a1, v1 = h.az[i-1], h.alt[i-1], h.az[i], h.alt[i]
	}
	return v0 + (v1-v0)*(az-a0)/(a1-a0)
}
