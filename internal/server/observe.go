package server

import (
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// observation is a target seen from a site at one instant, computed
// directly with ephem (not on a grid): what Ephemeris rows, assignment
// pointings and predicted conditions report.
type observation struct {
	pointing     *nightloomv1.Pointing
	altDeg       float64 // apparent when the site's pressure is above zero
	azDeg        float64
	airmass      float64 // Kasten & Young 1989; +Inf at and below the horizon
	aboveProfile bool
	moonSepDeg   float64 // topocentric
	sunSepDeg    float64 // topocentric (solar elongation from the site)
	sky          float64 // V mag/arcsec^2 at the target; NaN below 0 deg
	sunAltDeg    float64 // geometric, centre
	moonAltDeg   float64 // topocentric centre, apparent when pressure > 0
	moonIllum    float64 // geocentric illuminated fraction

	moving            bool
	rAU, deltaAU      float64 // heliocentric, geocentric distance
	phaseDeg          float64
	magnitude         float64 // outside the atmosphere; NaN without a law
	rateRA, rateDec   float64 // arcsec/min, topocentric apparent
	observedMagnitude float64 // magnitude + k X; NaN without a law or below the horizon
}

// observe computes the observation of target t from site at instant at.
func observe(site *constraints.Site, t *constraints.Target, at time.Time) observation {
	snap := ephem.Prepare(ephem.NewInstant(at))
	l := snap.Local(&site.Observer)
	var (
		place ephem.Place
		icrs  ephem.Vec3
		o     observation
	)
	if t.Star != nil {
		u := t.Star.Direction(snap.TT)
		place, icrs = l.StarPlace(u), u
	} else {
		var topo, geo ephem.View
		place, topo, geo = l.OrbitPlace(t.Orbit)
		icrs = topo.Astrometric
		o.moving = true
		o.rAU, o.deltaAU, o.phaseDeg = geo.RAU, geo.DeltaAU, geo.PhaseRad*ephem.Rad2Deg
		o.magnitude = geo.Magnitude
		o.rateRA, o.rateDec = topo.RateRA, topo.RateDec
	}
	raI, decI, _ := ephem.VecToSpherical(icrs)
	ha := place.HourAngle * ephem.Rad2Deg
	if ha >= 180 {
		ha -= 360
	}
	side := nightloomv1.MeridianSide_MERIDIAN_SIDE_WEST
	if ha < 0 {
		side = nightloomv1.MeridianSide_MERIDIAN_SIDE_EAST
	}
	o.altDeg, o.azDeg = place.AltApparent*ephem.Rad2Deg, place.Az*ephem.Rad2Deg
	o.pointing = &nightloomv1.Pointing{
		RaIcrsDeg: wrap360(raI * ephem.Rad2Deg), DecIcrsDeg: decI * ephem.Rad2Deg,
		RaApparentDeg: wrap360(place.RA * ephem.Rad2Deg), DecApparentDeg: place.Dec * ephem.Rad2Deg,
		AltitudeDeg: o.altDeg, AzimuthDeg: wrap360(o.azDeg), HourAngleDeg: ha, MeridianSide: side,
	}
	o.airmass = place.Airmass()
	o.aboveProfile = place.AltApparent >= site.Horizon.AltitudeAt(place.Az)

	sun, moon := l.SunPlace(), l.MoonPlace()
	o.sunAltDeg, o.moonAltDeg = sun.Alt*ephem.Rad2Deg, moon.AltApparent*ephem.Rad2Deg
	moonSep, sunSep := ephem.Separation(place.OfDate, moon.OfDate), ephem.Separation(place.OfDate, sun.OfDate)
	o.moonSepDeg, o.sunSepDeg = moonSep*ephem.Rad2Deg, sunSep*ephem.Rad2Deg
	o.moonIllum, _ = snap.MoonIllumination()
	o.sky = math.NaN()
	if place.AltApparent >= 0 {
		// The sky model's inputs as constraints.Grid computes them.
		topoIllum, _ := l.MoonIllumination()
		phase := math.Acos(math.Max(-1, math.Min(1, 2*topoIllum-1)))
		ss := constraints.NewSkyStep(site.Sky, sun.Alt, sun.Az, moon.AltApparent, moon.Az, phase, l.MoonOfDate().Norm())
		o.sky = ss.At(place.AltApparent, place.Az, moonSep, sunSep)
	}
	o.observedMagnitude = math.NaN()
	if o.moving && !math.IsNaN(o.magnitude) && !math.IsInf(o.airmass, 0) {
		o.observedMagnitude = o.magnitude + site.Sky.ExtinctionV*o.airmass
	}
	return o
}

// wrap360 reduces degrees to [0, 360).
func wrap360(x float64) float64 {
	x = math.Mod(x, 360)
	if x < 0 {
		x += 360
	}
	if x >= 360 {
		x = 0
	}
	return x
}

// darknessLevel classifies the Sun's geometric altitude (common.proto
// DarknessLevel; thresholds of constraints.DarknessAt).
func darknessLevel(sunAltDeg float64) nightloomv1.DarknessLevel {
	switch constraints.DarknessAt(sunAltDeg) {
	case constraints.Day:
		return nightloomv1.DarknessLevel_DARKNESS_LEVEL_DAY
	case constraints.CivilTwilight:
		return nightloomv1.DarknessLevel_DARKNESS_LEVEL_CIVIL_TWILIGHT
	case constraints.NauticalTwilight:
		return nightloomv1.DarknessLevel_DARKNESS_LEVEL_NAUTICAL_TWILIGHT
	case constraints.AstronomicalTwilight:
		return nightloomv1.DarknessLevel_DARKNESS_LEVEL_ASTRONOMICAL_TWILIGHT
	default:
		return nightloomv1.DarknessLevel_DARKNESS_LEVEL_NIGHT
	}
}

// reasonProto maps the constraint evaluator's reasons to the API's.
func reasonProto(r constraints.Reason) nightloomv1.Reason {
	switch r {
	case constraints.ReasonDate:
		return nightloomv1.Reason_REASON_DATE_WINDOW
	case constraints.ReasonLocalTime:
		return nightloomv1.Reason_REASON_LOCAL_TIME_WINDOW
	case constraints.ReasonClosure:
		return nightloomv1.Reason_REASON_CLOSURE
	case constraints.ReasonDaylight:
		return nightloomv1.Reason_REASON_TOO_BRIGHT_TWILIGHT
	case constraints.ReasonBelowHorizon:
		return nightloomv1.Reason_REASON_BELOW_HORIZON_PROFILE
	case constraints.ReasonAltitudeLow:
		return nightloomv1.Reason_REASON_ALTITUDE_LOW
	case constraints.ReasonAltitudeHigh:
		return nightloomv1.Reason_REASON_ALTITUDE_HIGH
	case constraints.ReasonAirmass:
		return nightloomv1.Reason_REASON_AIRMASS
	case constraints.ReasonHourAngle:
		return nightloomv1.Reason_REASON_HOUR_ANGLE
	case constraints.ReasonSolarAvoidance:
		return nightloomv1.Reason_REASON_SOLAR_AVOIDANCE
	case constraints.ReasonSolarElongation:
		return nightloomv1.Reason_REASON_SOLAR_ELONGATION
	case constraints.ReasonMoonSeparation:
		return nightloomv1.Reason_REASON_MOON_SEPARATION
	case constraints.ReasonMoonIllumination:
		return nightloomv1.Reason_REASON_MOON_ILLUMINATION
	case constraints.ReasonSkyBrightness:
		return nightloomv1.Reason_REASON_SKY_BRIGHTNESS
	case constraints.ReasonTooFaint:
		return nightloomv1.Reason_REASON_TOO_FAINT
	case constraints.ReasonTrailing:
		return nightloomv1.Reason_REASON_TRAILING
	case constraints.ReasonFlipZone:
		return nightloomv1.Reason_REASON_MERIDIAN_FLIP_ZONE
	}
	return nightloomv1.Reason_REASON_UNSPECIFIED
}

// reasonText is a short human phrase for a reason.
func reasonText(r constraints.Reason) string { return r.String() }
