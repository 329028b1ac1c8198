package main

// Safety checks made beside the devices, with the domain's own ephemerides,
// before every slew: the plan is not trusted alone.

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

const deg = math.Pi / 180

// siteSky is what the executor needs of its site for its checks.
type siteSky struct {
	obs      ephem.Observer
	horizon  constraints.Horizon
	floorDeg float64 // solar-avoidance floor
	loc      *time.Location
}

func newSiteSky(s *pb.Site) (*siteSky, error) {
	o, err := ephem.NewObserver(s.GetLatitudeDeg(), s.GetLongitudeDeg(), s.GetElevationM())
	if err != nil {
		return nil, err
	}
	if s.PressureHpa != nil {
		temp := 10.0 // deg C, common practice when unset, no source
		if s.TemperatureC != nil {
			temp = s.GetTemperatureC()
		}
		if err := o.SetAir(s.GetPressureHpa(), temp); err != nil {
			return nil, err
		}
	}
	var pts []constraints.HorizonPoint
	for _, h := range s.GetHorizon() {
		pts = append(pts, constraints.HorizonPoint{AzDeg: h.GetAzimuthDeg(), AltDeg: h.GetAltitudeDeg()})
	}
	hz, err := constraints.NewHorizon(pts)
	if err != nil {
		return nil, err
	}
	floor := constraints.DefaultSolarFloorDeg
	if s.SolarAvoidanceDeg != nil {
		floor = max(s.GetSolarAvoidanceDeg(), constraints.MinSolarFloorDeg)
	}
	loc, err := time.LoadLocation(s.GetTimeZone())
	if err != nil {
		loc = time.UTC
	}
	return &siteSky{obs: o, horizon: hz, floorDeg: floor, loc: loc}, nil
}

// Refusals of a slew.
var (
	errSunTooClose  = errors.New("closer to the Sun than the site's solar-avoidance floor")
	errBelowHorizon = errors.New("below the site's horizon profile")
	errNoPointing   = errors.New("the assignment has no pointing")
)

// look is where an apparent place of date stands at one instant.
type look struct {
	altDeg, azDeg float64 // apparent altitude when the site has air, else geometric
	sunSepDeg     float64 // separation from the topocentric apparent Sun
	sunAltDeg     float64 // the Sun's altitude
	horizonDeg    float64 // the horizon profile's altitude at azDeg
	airmass       float64 // Kasten & Young (ephem.Airmass)
	haDeg         float64 // local apparent hour angle
}

// lookAt places apparent (true equator and equinox of date, topocentric)
// right ascension and declination in degrees at t. Sun: the domain's
// ephem.Local.SunOfDate (VSOP87 Earth, aberration; see ephem/snapshot.go).
func (s *siteSky) lookAt(t time.Time, raDeg, decDeg float64) look {
	snap := ephem.Prepare(ephem.NewInstant(t))
	l := snap.Local(&s.obs)
	v := ephem.SphericalToVec(raDeg*deg, decDeg*deg)
	alt, az := l.HorizontalOfDate(v)
	altApp := l.ApparentAlt(alt)
	sun := l.SunPlace()
	return look{
		altDeg: altApp / deg, azDeg: az / deg,
		sunSepDeg: ephem.Separation(v, l.SunOfDate()) / deg, sunAltDeg: sun.AltApparent / deg,
		horizonDeg: s.horizon.AltitudeAt(az) / deg, airmass: ephem.Airmass(altApp),
		haDeg: l.HourAngle(v) / deg,
	}
}

// sunAltDeg returns the Sun's altitude at t in degrees.
func (s *siteSky) sunAltDeg(t time.Time) float64 {
	snap := ephem.Prepare(ephem.NewInstant(t))
	l := snap.Local(&s.obs)
	return l.SunPlace().AltApparent / deg
}

// horizontal converts an apparent place of date to altitude and azimuth in
// degrees at t (for the telescope's state sent to NextAssignment).
func (s *siteSky) horizontal(t time.Time, raDeg, decDeg float64) (altDeg, azDeg float64) {
	lk := s.lookAt(t, raDeg, decDeg)
	return lk.altDeg, lk.azDeg
}

// pointingAt is the apparent place of an assignment's target at t: the
// pointing at start moved by the non-sidereal rate for moving targets.
func pointingAt(a *pb.Assignment, t time.Time) (raDeg, decDeg float64, err error) {
	p := a.GetPointing()
	if p == nil {
		return 0, 0, errNoPointing
	}
	raDeg, decDeg = p.GetRaApparentDeg(), p.GetDecApparentDeg()
	if r := a.GetRate(); r != nil && a.GetStart() != nil {
		dtMin := t.Sub(a.GetStart().AsTime()).Minutes()
		decDeg += r.GetDecArcsecPerMin() * dtMin / 3600
		if c := math.Cos(p.GetDecApparentDeg() * deg); c > 1e-6 {
			raDeg += r.GetRaCosDecArcsecPerMin() / c * dtMin / 3600
		}
		raDeg = math.Mod(raDeg+360, 360)
		decDeg = max(-90, min(90, decDeg))
	}
	return raDeg, decDeg, nil
}

// checkSlew refuses a pointing that is too close to the Sun or below the
// horizon profile at any of the instants given (the slew's start and the
// run's start and end).
func (s *siteSky) checkSlew(a *pb.Assignment, at ...time.Time) error {
	for _, t := range at {
		ra, dec, err := pointingAt(a, t)
		if err != nil {
			return err
		}
		lk := s.lookAt(t, ra, dec)
		if lk.sunSepDeg < s.floorDeg {
			return fmt.Errorf("%w: %.1f deg from the Sun at %s, floor %.1f deg", errSunTooClose, lk.sunSepDeg, t.Format(time.RFC3339), s.floorDeg)
		}
		if lk.altDeg < max(lk.horizonDeg, 0) {
			return fmt.Errorf("%w: altitude %.1f deg at azimuth %.1f deg at %s, horizon %.1f deg", errBelowHorizon,
				lk.altDeg, lk.azDeg, t.Format(time.RFC3339), max(lk.horizonDeg, 0))
		}
	}
	return nil
}

// nightOf is the local date of the evening a night starts on: the folder
// name for its files (a morning before noon belongs to the previous
// evening).
func (s *siteSky) nightOf(t time.Time) string {
	return t.In(s.loc).Add(-12 * time.Hour).Format("2006-01-02")
}
