package server

import (
	"github.com/nightloom/nightloom/constraints"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// pointingOf is the API's pointing of an observation.
func pointingOf(o constraints.Observation) *nightloomv1.Pointing {
	side := nightloomv1.MeridianSide_MERIDIAN_SIDE_WEST
	if o.HADeg < 0 {
		side = nightloomv1.MeridianSide_MERIDIAN_SIDE_EAST
	}
	return &nightloomv1.Pointing{
		RaIcrsDeg: o.RAICRSDeg, DecIcrsDeg: o.DecICRSDeg, RaApparentDeg: o.RADeg, DecApparentDeg: o.DecDeg,
		AltitudeDeg: o.AltDeg, AzimuthDeg: o.AzDeg, HourAngleDeg: o.HADeg, MeridianSide: side,
	}
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
