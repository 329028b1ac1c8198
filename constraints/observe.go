package constraints

import (
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Observation is a target seen from a site at one instant, computed
// directly with ephem (not on a grid): what ephemeris rows, the pointing of
// a run and its predicted conditions report. Angles in degrees.
type Observation struct {
	RAICRSDeg, DecICRSDeg float64 // astrometric (ICRS) place, topocentric
	RADeg, DecDeg         float64 // apparent place of date (true equator and equinox), RA in [0, 360)
	HADeg                 float64 // local apparent hour angle, [-180, 180), east negative
	AltDeg, AzDeg         float64 // apparent (refracted when the site's pressure > 0); azimuth [0, 360) from north through east
	Airmass               float64 // Kasten & Young 1989; +Inf at and below the horizon
	AboveProfile          bool    // at or above the site's horizon profile
	MoonSepDeg, SunSepDeg float64 // topocentric angular distances (SunSep is the solar elongation seen from the site)
	Sky                   float64 // V mag/arcsec^2 at the target; NaN below 0 deg
	SunAltDeg             float64 // geometric, centre
	MoonAltDeg            float64 // topocentric centre, apparent when pressure > 0
	MoonIllum             float64 // geocentric illuminated fraction

	Moving            bool    // an orbit target (the fields below are set)
	RAU, DeltaAU      float64 // heliocentric, geocentric distance
	PhaseDeg          float64
	Magnitude         float64 // outside the atmosphere; NaN without a law
	RateRA, RateDec   float64 // arcsec/min, topocentric apparent (RA*cos(dec), Dec)
	ObservedMagnitude float64 // Magnitude + k X; NaN without a law or below the horizon
}

// Observe computes the observation of target t from site at instant at.
// The sky brightness uses the grid's model (Krisciunas & Schaefer 1991 for
// the Moon, Patat et al. 2006 for twilight; see skybright.go) with the
// topocentric Moon phase, as Grid does.
func Observe(site *Site, t *Target, at time.Time) Observation {
	snap := ephem.Prepare(ephem.NewInstant(at))
	l := snap.Local(&site.Observer)
	var (
		place ephem.Place
		icrs  ephem.Vec3
		o     Observation
	)
	o.Magnitude = math.NaN()
	if t.Star != nil {
		u := t.Star.Direction(snap.TT)
		place, icrs = l.StarPlace(u), u
	} else {
		var topo, geo ephem.View
		place, topo, geo = l.OrbitPlace(t.Orbit)
		icrs = topo.Astrometric
		o.Moving = true
		o.RAU, o.DeltaAU, o.PhaseDeg = geo.RAU, geo.DeltaAU, geo.PhaseRad*ephem.Rad2Deg
		o.Magnitude = geo.Magnitude
		o.RateRA, o.RateDec = topo.RateRA, topo.RateDec
	}
	raI, decI, _ := ephem.VecToSpherical(icrs)
	ha := place.HourAngle * ephem.Rad2Deg
	if ha >= 180 {
		ha -= 360
	}
	o.RAICRSDeg, o.DecICRSDeg = Wrap360(raI*ephem.Rad2Deg), decI*ephem.Rad2Deg
	o.RADeg, o.DecDeg, o.HADeg = Wrap360(place.RA*ephem.Rad2Deg), place.Dec*ephem.Rad2Deg, ha
	o.AltDeg, o.AzDeg = place.AltApparent*ephem.Rad2Deg, Wrap360(place.Az*ephem.Rad2Deg)
	o.Airmass = place.Airmass()
	o.AboveProfile = place.AltApparent >= site.Horizon.AltitudeAt(place.Az)

	sun, moon := l.SunPlace(), l.MoonPlace()
	o.SunAltDeg, o.MoonAltDeg = sun.Alt*ephem.Rad2Deg, moon.AltApparent*ephem.Rad2Deg
	moonSep, sunSep := ephem.Separation(place.OfDate, moon.OfDate), ephem.Separation(place.OfDate, sun.OfDate)
	o.MoonSepDeg, o.SunSepDeg = moonSep*ephem.Rad2Deg, sunSep*ephem.Rad2Deg
	o.MoonIllum, _ = snap.MoonIllumination()
	o.Sky = math.NaN()
	if place.AltApparent >= 0 {
		topoIllum, _ := l.MoonIllumination()
		phase := math.Acos(math.Max(-1, math.Min(1, 2*topoIllum-1)))
		ss := NewSkyStep(site.Sky, sun.Alt, sun.Az, moon.AltApparent, moon.Az, phase, l.MoonOfDate().Norm())
		o.Sky = ss.At(place.AltApparent, place.Az, moonSep, sunSep)
	}
	o.ObservedMagnitude = math.NaN()
	if o.Moving && !math.IsNaN(o.Magnitude) && !math.IsInf(o.Airmass, 0) {
		o.ObservedMagnitude = o.Magnitude + site.Sky.ExtinctionV*o.Airmass
	}
	return o
}

// Wrap360 reduces degrees to [0, 360).
func Wrap360(x float64) float64 {
	x = math.Mod(x, 360)
	if x < 0 {
		x += 360
	}
	if x >= 360 {
		x = 0
	}
	return x
}

// Quality is the quality factor of an observation (the package doc's
// formula, as the grid computes it; the sky term only when the observation
// has a sky brightness), 0 below the horizon.
func Quality(site *Site, o Observation) float64 {
	if math.IsInf(o.Airmass, 0) || math.IsNaN(o.Airmass) {
		return 0
	}
	return quality(o.Airmass, o.Sky, site.Sky.ExtinctionV, site.Sky.ZenithMag, !math.IsNaN(o.Sky))
}
