package server

import (
	"fmt"
	"math"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
	"github.com/nightloom/nightloom/scheduler"
)

// Site defaults applied on create (site.proto).
const (
	defaultTemperatureC = 10.0
	defaultZenithSky    = constraints.DefaultZenithSkyMag // 21.6 V mag/arcsec^2, common practice
	defaultSolarFloor   = constraints.DefaultSolarFloorDeg
	// maxSolarFloorDeg is the constraint evaluator's upper limit on the
	// solar-avoidance floor (constraints.Site.Validate), tighter than the
	// 180 deg that site.proto allows.
	maxSolarFloorDeg = 90.0
	// domainMinAltDeg is the lowest horizon or altitude limit the constraint
	// evaluator takes (constraints.NewHorizon, Set.Validate); lower values,
	// which site.proto allows down to -10 deg, are raised to it. Nothing
	// between -10 and -5 deg is observable anyway.
	domainMinAltDeg = -5.0
)

// isaPressureHPa is the International Standard Atmosphere (ISO 2533:1975)
// pressure at a height: 1013.25 (1 - 2.25577e-5 h)^5.25588 hPa.
func isaPressureHPa(elevationM float64) float64 {
	return 1013.25 * math.Pow(1-2.25577e-5*elevationM, 5.25588)
}

// normalizeSite returns a copy of s with the output-only fields cleared and
// the create defaults filled in (site.proto).
func normalizeSite(s *nightloomv1.Site) *nightloomv1.Site {
	c := proto.Clone(s).(*nightloomv1.Site)
	c.Id, c.CreateTime, c.UpdateTime = "", nil, nil
	if c.PressureHpa == nil && finite(c.ElevationM) && c.ElevationM >= -500 && c.ElevationM <= 9000 {
		c.PressureHpa = proto.Float64(isaPressureHPa(c.ElevationM))
	}
	if c.TemperatureC == nil {
		c.TemperatureC = proto.Float64(defaultTemperatureC)
	}
	if c.ZenithSkyBrightnessVMagArcsec2 == nil {
		c.ZenithSkyBrightnessVMagArcsec2 = proto.Float64(defaultZenithSky)
	}
	if c.SolarAvoidanceDeg == nil {
		c.SolarAvoidanceDeg = proto.Float64(defaultSolarFloor)
	}
	return c
}

// checkSite validates a normalized site (site.proto ranges).
func checkSite(v *violations, path string, s *nightloomv1.Site) {
	if s == nil {
		v.add(path, "is required")
		return
	}
	text(v, path+".name", s.GetName(), 1, MaxNameBytes)
	rangeCheck(v, path+".latitude_deg", s.GetLatitudeDeg(), -90, 90)
	rangeCheck(v, path+".longitude_deg", s.GetLongitudeDeg(), -180, 180)
	rangeCheck(v, path+".elevation_m", s.GetElevationM(), -500, 9000)
	if s.GetTimeZone() == "" {
		v.add(path+".time_zone", "is required")
	} else if _, err := loadZone(s.GetTimeZone()); err != nil {
		v.add(path+".time_zone", "unknown IANA time zone %q", s.GetTimeZone())
	}
	if n := len(s.GetHorizon()); n > MaxHorizonPoints {
		v.add(path+".horizon", "at most %d points, got %d", MaxHorizonPoints, n)
	} else {
		seen := make(map[float64]int, n)
		for i, p := range s.GetHorizon() {
			pp := idx(path+".horizon", i)
			if p == nil {
				v.add(pp, "is required")
				continue
			}
			halfOpen(v, pp+".azimuth_deg", p.GetAzimuthDeg(), 0, 360)
			rangeCheck(v, pp+".altitude_deg", p.GetAltitudeDeg(), -10, 90)
			if j, dup := seen[p.GetAzimuthDeg()]; dup {
				v.add(pp+".azimuth_deg", "azimuth %v is also given by horizon[%d]", p.GetAzimuthDeg(), j)
			}
			seen[p.GetAzimuthDeg()] = i
		}
	}
	if s.PressureHpa != nil {
		rangeCheck(v, path+".pressure_hpa", s.GetPressureHpa(), 0, 1100)
	}
	rangeCheck(v, path+".temperature_c", s.GetTemperatureC(), -80, 60)
	rangeCheck(v, path+".extinction_v", s.GetExtinctionV(), 0, 2)
	rangeCheck(v, path+".zenith_sky_brightness_v_mag_arcsec2", s.GetZenithSkyBrightnessVMagArcsec2(), 16, 23)
	if x := s.GetSolarAvoidanceDeg(); !(x >= 5 && x <= maxSolarFloorDeg) {
		v.add(path+".solar_avoidance_deg", "must be within [5, %v] (the constraint evaluator's limit), got %v", maxSolarFloorDeg, x)
	}
	checkMount(v, path+".mount", s.GetMount())
	checkInstrument(v, path+".instrument", s.GetInstrument())
}

func checkAxis(v *violations, path string, a *nightloomv1.AxisSlew) {
	if a == nil {
		v.add(path, "is required")
		return
	}
	positiveUpTo(v, path+".rate_deg_per_s", a.GetRateDegPerS(), 90)
	rangeCheck(v, path+".acceleration_deg_per_s2", a.GetAccelerationDegPerS2(), 0, 1e4)
}

func checkMount(v *violations, path string, m *nightloomv1.Mount) {
	if m == nil {
		v.add(path, "is required")
		return
	}
	enumKnown(v, path+".kind", int32(m.GetKind()), nightloomv1.MountKind_name, false)
	checkAxis(v, path+".primary_axis", m.GetPrimaryAxis())
	checkAxis(v, path+".secondary_axis", m.GetSecondaryAxis())
	duration(v, path+".settle", m.GetSettle(), 0, 10*time.Minute, 0, false)
	flip := m.GetMeridianFlip()
	switch {
	case m.GetKind() == nightloomv1.MountKind_MOUNT_KIND_GERMAN_EQUATORIAL && flip == nil:
		v.add(path+".meridian_flip", "is required for a german equatorial mount")
	case m.GetKind() != nightloomv1.MountKind_MOUNT_KIND_GERMAN_EQUATORIAL && flip != nil:
		v.add(path+".meridian_flip", "is only for a german equatorial mount")
	case flip != nil:
		duration(v, path+".meridian_flip.duration", flip.GetDuration(), 0, 30*time.Minute, 0, false)
		rangeCheck(v, path+".meridian_flip.min_hour_angle_deg", flip.GetMinHourAngleDeg(), -30, 0)
		rangeCheck(v, path+".meridian_flip.max_hour_angle_deg", flip.GetMaxHourAngleDeg(), 0, 30)
	}
}

func checkInstrument(v *violations, path string, in *nightloomv1.Instrument) {
	if in == nil {
		v.add(path, "is required")
		return
	}
	positiveUpTo(v, path+".pixel_scale_arcsec", in.GetPixelScaleArcsec(), 60)
	rangeCheck(v, path+".aperture_mm", in.GetApertureMm(), 0, MaxApertureMM)
	if n := len(in.GetFilters()); n > MaxFilters {
		v.add(path+".filters", "at most %d filters, got %d", MaxFilters, n)
	} else {
		seen := map[string]int{}
		for i, f := range in.GetFilters() {
			p := idx(path+".filters", i)
			text(v, p, f, 1, MaxFilterBytes)
			if j, dup := seen[f]; dup {
				v.add(p, "filter %q is also filters[%d]", f, j)
			}
			seen[f] = i
		}
	}
	duration(v, path+".filter_change", in.GetFilterChange(), 0, 10*time.Minute, 0, false)
	duration(v, path+".readout", in.GetReadout(), 0, 10*time.Minute, 0, false)
	duration(v, path+".dither", in.GetDither(), 0, 10*time.Minute, 0, false)
	duration(v, path+".acquisition", in.GetAcquisition(), 0, 30*time.Minute, 0, false)
	if f := in.GetFocus(); f != nil {
		every := duration(v, path+".focus.interval", f.GetInterval(), 0, 24*time.Hour, 0, false)
		d := duration(v, path+".focus.duration", f.GetDuration(), 0, 30*time.Minute, 0, false)
		if d == 0 && (every > 0 || f.GetOnFilterChange()) && (f.GetDuration() == nil || f.GetDuration().CheckValid() == nil) {
			v.add(path+".focus.duration", "is required (non-zero) when interval is set or on_filter_change is true")
		}
	}
}

// siteModel is a validated site in the forms the server computes with.
type siteModel struct {
	pb    *nightloomv1.Site
	cons  *constraints.Site
	sched *scheduler.Site // cons with the overhead model
}

// newSiteModel builds the constraint evaluator's view of a validated site.
// An error means the domain refused a value that the API ranges allow; the
// caller reports it as a violation at the site.
func newSiteModel(s *nightloomv1.Site) (*siteModel, error) {
	o, err := ephem.NewObserver(s.GetLatitudeDeg(), s.GetLongitudeDeg(), s.GetElevationM())
	if err != nil {
		return nil, err
	}
	if err := o.SetAir(s.GetPressureHpa(), s.GetTemperatureC()); err != nil {
		return nil, err
	}
	loc, err := loadZone(s.GetTimeZone())
	if err != nil {
		return nil, err
	}
	pts := make([]constraints.HorizonPoint, len(s.GetHorizon()))
	for i, p := range s.GetHorizon() {
		pts[i] = constraints.HorizonPoint{AzDeg: p.GetAzimuthDeg(), AltDeg: math.Max(p.GetAltitudeDeg(), domainMinAltDeg)}
	}
	hz, err := constraints.NewHorizon(pts)
	if err != nil {
		return nil, err
	}
	cs := constraints.NewSite(o)
	cs.Location = loc
	cs.Horizon = hz
	cs.Sky = constraints.SkyParams{ZenithMag: s.GetZenithSkyBrightnessVMagArcsec2(), ExtinctionV: s.GetExtinctionV()}
	cs.SolarFloorDeg = s.GetSolarAvoidanceDeg()
	cs.PixelScaleArcsec = s.GetInstrument().GetPixelScaleArcsec()
	switch s.GetMount().GetKind() {
	case nightloomv1.MountKind_MOUNT_KIND_GERMAN_EQUATORIAL:
		cs.Mount = constraints.GermanEquatorial
		cs.FlipStartHADeg = s.GetMount().GetMeridianFlip().GetMinHourAngleDeg()
		cs.FlipEndHADeg = s.GetMount().GetMeridianFlip().GetMaxHourAngleDeg()
	case nightloomv1.MountKind_MOUNT_KIND_FORK_EQUATORIAL:
		cs.Mount = constraints.ForkEquatorial
	case nightloomv1.MountKind_MOUNT_KIND_ALT_AZIMUTH:
		cs.Mount = constraints.AltAzimuth
	default:
		return nil, fmt.Errorf("server: mount kind %v", s.GetMount().GetKind())
	}
	if err := cs.Validate(); err != nil {
		return nil, err
	}
	sched := &scheduler.Site{Site: cs, Overheads: overheadsOf(s)}
	if err := sched.Overheads.Validate(); err != nil {
		return nil, err
	}
	return &siteModel{pb: s, cons: cs, sched: sched}, nil
}

// loc is the site's time zone.
func (m *siteModel) loc() *time.Location { return m.cons.Location }

// nightWindow is the noon-to-noon window of the night of a date
// (common.proto LocalDate).
func (m *siteModel) nightWindow(d time.Time) (time.Time, time.Time) {
	return ephem.NightWindow(&m.cons.Observer, d.Year(), d.Month(), d.Day())
}

// zoneCache keeps loaded time zones; time.LoadLocation reads the zone
// database each time.
var zoneCache = newSyncMap[string, *time.Location]()

func loadZone(name string) (*time.Location, error) {
	if l, ok := zoneCache.load(name); ok {
		return l, nil
	}
	l, err := time.LoadLocation(name)
	if err != nil {
		return nil, err
	}
	if name == "" || name == "Local" {
		return nil, fmt.Errorf("server: time zone %q is not an IANA name", name)
	}
	zoneCache.store(name, l)
	return l, nil
}
