package constraints

import (
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Darkness is the state of the sky set by the Sun's geometric altitude h
// (centre, degrees): Day h > -0.8333, CivilTwilight -6 < h <= -0.8333,
// NauticalTwilight -12 < h <= -6, AstronomicalTwilight -18 < h <= -12,
// Night h <= -18. Thresholds as in ephem (Explanatory Supplement 3rd ed.,
// sec. 15.4).
type Darkness uint8

// Darkness levels, from brightest to darkest.
const (
	Day Darkness = iota
	CivilTwilight
	NauticalTwilight
	AstronomicalTwilight
	Night
)

var darknessNames = [...]string{"day", "civil twilight", "nautical twilight", "astronomical twilight", "night"}

func (d Darkness) String() string {
	if int(d) < len(darknessNames) {
		return darknessNames[d]
	}
	return "unknown"
}

// DarknessAt classifies a Sun geometric altitude in degrees.
func DarknessAt(sunAltDeg float64) Darkness {
	switch {
	case sunAltDeg > ephem.SunriseAltDeg:
		return Day
	case sunAltDeg > ephem.CivilAltDeg:
		return CivilTwilight
	case sunAltDeg > ephem.NauticalAltDeg:
		return NauticalTwilight
	case sunAltDeg > ephem.AstronomicalAltDeg:
		return AstronomicalTwilight
	default:
		return Night
	}
}

// Dark is how dark a block needs the sky: the twilight that must have ended.
// DarkSunset: the Sun's centre below -0.8333 deg; DarkCivil: civil twilight
// over (Sun below -6 deg); DarkNautical: below -12 deg; DarkAstronomical:
// below -18 deg. nightloom never observes in daylight, so DarkSunset is the
// weakest requirement.
type Dark uint8

// Darkness requirements.
const (
	DarkSunset Dark = iota
	DarkCivil
	DarkNautical
	DarkAstronomical
)

// Allows reports whether the sky state d satisfies the requirement.
func (r Dark) Allows(d Darkness) bool { return int(d) >= int(r)+1 }

// Reason says why a step is not observable. Evaluation reports the FIRST
// failing check, in the order of the constants below, so that a user is
// told the most basic cause ("below the horizon profile") before the
// finer ones ("sky too bright").
type Reason uint8

// Reasons, in evaluation order.
const (
	OK                     Reason = iota // observable
	ReasonDate                           // outside the block's earliest/latest dates
	ReasonLocalTime                      // outside the block's local-time window
	ReasonClosure                        // the site is closed (weather, maintenance)
	ReasonDaylight                       // the Sun is too high for the required darkness
	ReasonBelowHorizon                   // below the horizon profile (or the mathematical horizon)
	ReasonAltitudeLow                    // below the block's minimum altitude
	ReasonAltitudeHigh                   // above the block's maximum altitude
	ReasonAirmass                        // airmass above the block's maximum
	ReasonHourAngle                      // |hour angle| above the block's maximum
	ReasonSolarAvoidance                 // closer to the Sun than the site's hard floor
	ReasonSolarElongation                // closer to the Sun than the block allows
	ReasonMoonSeparation                 // closer to the Moon than the block allows
	ReasonMoonIllumination               // the Moon is more illuminated than the block allows
	ReasonSkyBrightness                  // the sky at the target is brighter than the block allows
	ReasonTooFaint                       // the target (with extinction) is fainter than the block's limit
	ReasonTrailing                       // one exposure would trail more than the block allows
	ReasonFlipZone                       // inside the meridian-flip zone, which the block avoids
	numReasons
)

var reasonNames = [...]string{
	"ok", "date window", "local-time window", "site closed", "sky not dark enough",
	"below the horizon profile", "below minimum altitude", "above maximum altitude", "airmass too high",
	"hour angle too large", "inside the solar-avoidance floor", "too close to the Sun", "Moon too close",
	"Moon too bright", "sky too bright", "target too faint", "exposure would trail", "inside the meridian-flip zone",
}

func (r Reason) String() string {
	if int(r) < len(reasonNames) {
		return reasonNames[r]
	}
	return "unknown"
}

// NumReasons is the number of Reason values, for tables indexed by reason.
const NumReasons = int(numReasons)

// Window is a contiguous run of observable steps [Start, End) (indices).
type Window struct{ Start, End int }

// Len returns the number of steps in w.
func (w Window) Len() int { return w.End - w.Start }

// Span is a run of steps sharing one reason, with its instants, for "why
// not" explanations.
type Span struct {
	Reason     Reason
	Start, End int       // step indices, End exclusive
	From, To   time.Time // instants of Start and End
}
