package constraints

import (
	"errors"
	"fmt"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// MountKind is the mechanical type of a telescope mount.
type MountKind uint8

// Mount kinds. Only german equatorial mounts flip at the meridian.
const (
	GermanEquatorial MountKind = iota
	ForkEquatorial
	AltAzimuth
)

func (m MountKind) String() string {
	switch m {
	case GermanEquatorial:
		return "german equatorial"
	case ForkEquatorial:
		return "fork equatorial"
	case AltAzimuth:
		return "alt-azimuth"
	}
	return "unknown"
}

// Solar-avoidance floor limits (degrees of elongation from the Sun).
const (
	DefaultSolarFloorDeg = 15.0
	MinSolarFloorDeg     = 5.0
)

// Site defaults that are common practice, with no published source.
const (
	DefaultZenithSkyMag = 21.6 // V mag/arcsec^2, a dark rural site
	DefaultExtinctionV  = 0.2  // mag per airmass, a fair continental site
)

// Site is what constraint evaluation needs to know about a telescope's
// place: where it is, what it sees, how dark its sky is and what its mount
// does at the meridian. The overhead model (slew rates and the like) lives
// in the scheduler.
type Site struct {
	Observer ephem.Observer
	Location *time.Location // IANA zone for local-time windows (nil = UTC)
	Horizon  Horizon
	Sky      SkyParams
	// SolarFloorDeg is the hard solar-avoidance floor: no block may point
	// closer to the Sun, whatever it asks. At least MinSolarFloorDeg.
	SolarFloorDeg float64
	Mount         MountKind
	// FlipStartHADeg and FlipEndHADeg bound the meridian-flip zone in hour
	// angle (degrees; east negative): a german equatorial mount tracking
	// from the east must flip before the hour angle passes FlipEndHADeg and
	// may flip once it passes FlipStartHADeg. Zero values mean a flip
	// exactly at the meridian.
	FlipStartHADeg, FlipEndHADeg float64
	// PixelScaleArcsec is the camera's pixel scale, for trailing limits
	// (0 = no trailing check).
	PixelScaleArcsec float64
}

// ErrSite reports an invalid site parameter.
var ErrSite = errors.New("constraints: invalid site")

// Validate checks the site's own parameters (the observer is checked when
// it is made).
func (s *Site) Validate() error {
	switch {
	case !(s.SolarFloorDeg >= MinSolarFloorDeg && s.SolarFloorDeg <= 90):
		return fmt.Errorf("%w: solar-avoidance floor %v deg outside [%v, 90]", ErrSite, s.SolarFloorDeg, MinSolarFloorDeg)
	case !(s.Sky.ZenithMag >= 14 && s.Sky.ZenithMag <= 23):
		return fmt.Errorf("%w: zenith sky brightness %v outside [14, 23] V mag/arcsec^2", ErrSite, s.Sky.ZenithMag)
	case !(s.Sky.ExtinctionV >= 0 && s.Sky.ExtinctionV <= 2):
		return fmt.Errorf("%w: V extinction %v outside [0, 2] mag/airmass", ErrSite, s.Sky.ExtinctionV)
	case !(s.FlipStartHADeg >= -30 && s.FlipStartHADeg <= s.FlipEndHADeg && s.FlipEndHADeg <= 30):
		return fmt.Errorf("%w: flip zone [%v, %v] deg of hour angle must satisfy -30 <= start <= end <= 30", ErrSite,
			s.FlipStartHADeg, s.FlipEndHADeg)
	case !(s.PixelScaleArcsec >= 0 && s.PixelScaleArcsec <= 100):
		return fmt.Errorf("%w: pixel scale %v outside [0, 100] arcsec", ErrSite, s.PixelScaleArcsec)
	}
	return nil
}

// NewSite returns a site at the observer with the defaults: empty horizon
// profile, dark sky of DefaultZenithSkyMag, DefaultExtinctionV, a 15 deg
// solar-avoidance floor, a german equatorial mount flipping at the
// meridian, UTC local time.
func NewSite(o ephem.Observer) *Site {
	return &Site{Observer: o, Location: time.UTC,
		Sky:           SkyParams{ZenithMag: DefaultZenithSkyMag, ExtinctionV: DefaultExtinctionV},
		SolarFloorDeg: DefaultSolarFloorDeg}
}
