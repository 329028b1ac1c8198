package constraints

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// Set is a block's constraint set. Zero values mean "no limit" where a zero
// limit would make no sense (MaxAirmass, MaxAltDeg, MaxHourAngleDeg,
// MaxMoonIllum, MinSkyMag, FaintestMag, MaxTrailPixels); the other fields
// are limits as given. The site's solar-avoidance floor applies on top,
// whatever MinSolarElongDeg says.
type Set struct {
	MaxAirmass       float64 // >= 1; 0 = none
	MinAltDeg        float64 // apparent altitude floor (above the horizon profile too)
	MaxAltDeg        float64 // apparent altitude ceiling (e.g. to avoid the zenith); 0 = none
	MinMoonSepDeg    float64
	MaxMoonIllum     float64 // illuminated fraction (0, 1]; 0 = none
	MoonIllumWhenUp  bool    // apply MaxMoonIllum only while the Moon is above the horizon
	MinSolarElongDeg float64
	Darkness         Dark
	// MinSkyMag is the brightest acceptable sky at the target, V
	// mag/arcsec^2 (steps with a smaller, brighter value fail); 0 = none.
	MinSkyMag float64
	// FaintestMag is the faintest acceptable predicted magnitude of an orbit
	// target including extinction; 0 = none.
	FaintestMag float64
	// LocalStart and LocalEnd bound a window of local clock time (offsets
	// from local midnight in the site's zone); the window may wrap through
	// midnight. Both zero = none.
	LocalStart, LocalEnd time.Duration
	// Earliest and Latest bound the dates the block may run (zero = none).
	Earliest, Latest time.Time
	MaxHourAngleDeg  float64 // |HA| limit; 0 = none
	// MaxTrailPixels is the longest trail one exposure of a moving target
	// may leave, in pixels; 0 means DefaultMaxTrailPixels.
	MaxTrailPixels float64
	// AvoidFlipZone forbids steps inside the site's meridian-flip zone.
	AvoidFlipZone bool
}

// DefaultMaxTrailPixels is the trailing limit when a block sets none
// (common practice, no source: under ~1.5 px a trail hides in the seeing).
const DefaultMaxTrailPixels = 1.5

// ErrSet reports an invalid constraint set; the message names the field.
var ErrSet = errors.New("constraints: invalid constraint set")

func finite(xs ...float64) bool {
	for _, x := range xs {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// Validate checks ranges and names the first bad field.
func (c *Set) Validate() error {
	bad := func(field string, v any, want string) error {
		return fmt.Errorf("%w: %s = %v, want %s", ErrSet, field, v, want)
	}
	if !finite(c.MaxAirmass, c.MinAltDeg, c.MaxAltDeg, c.MinMoonSepDeg, c.MaxMoonIllum, c.MinSolarElongDeg,
		c.MinSkyMag, c.FaintestMag, c.MaxHourAngleDeg, c.MaxTrailPixels) {
		return fmt.Errorf("%w: a limit is not a finite number", ErrSet)
	}
	switch {
	case c.MaxAirmass != 0 && !(c.MaxAirmass >= 1 && c.MaxAirmass <= 40):
		return bad("max_airmass", c.MaxAirmass, "0 (none) or [1, 40]")
	case !(c.MinAltDeg >= -5 && c.MinAltDeg < 90):
		return bad("min_alt_deg", c.MinAltDeg, "[-5, 90)")
	case c.MaxAltDeg != 0 && !(c.MaxAltDeg > c.MinAltDeg && c.MaxAltDeg <= 90):
		return bad("max_alt_deg", c.MaxAltDeg, "0 (none) or (min_alt_deg, 90]")
	case !(c.MinMoonSepDeg >= 0 && c.MinMoonSepDeg <= 180):
		return bad("min_moon_sep_deg", c.MinMoonSepDeg, "[0, 180]")
	case !(c.MaxMoonIllum >= 0 && c.MaxMoonIllum <= 1):
		return bad("max_moon_illumination", c.MaxMoonIllum, "[0, 1]")
	case !(c.MinSolarElongDeg >= 0 && c.MinSolarElongDeg <= 180):
		return bad("min_solar_elongation_deg", c.MinSolarElongDeg, "[0, 180]")
	case c.Darkness > DarkAstronomical:
		return bad("darkness", c.Darkness, "a known darkness level")
	case c.MinSkyMag != 0 && !(c.MinSkyMag >= 10 && c.MinSkyMag <= 25):
		return bad("min_sky_mag", c.MinSkyMag, "0 (none) or [10, 25] V mag/arcsec^2")
	case !(c.FaintestMag >= -30 && c.FaintestMag <= 35):
		return bad("faintest_mag", c.FaintestMag, "[-30, 35]")
	case !(c.LocalStart >= 0 && c.LocalStart < 24*time.Hour):
		return bad("local_start", c.LocalStart, "[0, 24h)")
	case !(c.LocalEnd >= 0 && c.LocalEnd < 24*time.Hour):
		return bad("local_end", c.LocalEnd, "[0, 24h)")
	case !c.Earliest.IsZero() && !c.Latest.IsZero() && c.Latest.Before(c.Earliest):
		return bad("latest", c.Latest, "not before earliest")
	case !(c.MaxHourAngleDeg >= 0 && c.MaxHourAngleDeg <= 180):
		return bad("max_hour_angle_deg", c.MaxHourAngleDeg, "0 (none) or (0, 180]")
	case !(c.MaxTrailPixels >= 0 && c.MaxTrailPixels <= 1000):
		return bad("max_trail_pixels", c.MaxTrailPixels, "0 (default) or (0, 1000]")
	}
	return nil
}
