package chart

// Conversion of API messages to the domain packages, for the curves the
// client and the web pages draw (plan charts). Only what the curves need is taken: the
// place, the air for refraction, the horizon profile, the time zone and the
// target's position. The daemon has its own, complete conversion.

import (
	"fmt"
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// ISAPressureHPa is the International Standard Atmosphere (ISO 2533)
// pressure at a height, the default the API documents for an unset
// Site.pressure_hpa: 1013.25 (1 - 2.25577e-5 h)^5.25588 hPa.
func ISAPressureHPa(heightM float64) float64 {
	return 1013.25 * math.Pow(1-2.25577e-5*heightM, 5.25588)
}

// SiteFromProto converts a site for charting.
func SiteFromProto(s *pb.Site) (*constraints.Site, error) {
	o, err := ephem.NewObserver(s.GetLatitudeDeg(), s.GetLongitudeDeg(), s.GetElevationM())
	if err != nil {
		return nil, fmt.Errorf("site %s: %w", s.GetId(), err)
	}
	p := ISAPressureHPa(s.GetElevationM())
	if s.PressureHpa != nil {
		p = s.GetPressureHpa()
	}
	t := 10.0
	if s.TemperatureC != nil {
		t = s.GetTemperatureC()
	}
	if err := o.SetAir(p, t); err != nil {
		return nil, fmt.Errorf("site %s: %w", s.GetId(), err)
	}
	cs := constraints.NewSite(o)
	pts := make([]constraints.HorizonPoint, len(s.GetHorizon()))
	for i, h := range s.GetHorizon() {
		// The constraints package keeps profile altitudes at -5 deg or
		// more; lower points do not change a chart whose axis starts at 0.
		pts[i] = constraints.HorizonPoint{AzDeg: h.GetAzimuthDeg(), AltDeg: math.Max(h.GetAltitudeDeg(), -5)}
	}
	if cs.Horizon, err = constraints.NewHorizon(pts); err != nil {
		return nil, fmt.Errorf("site %s: %w", s.GetId(), err)
	}
	if cs.Location, err = time.LoadLocation(s.GetTimeZone()); err != nil {
		return nil, fmt.Errorf("site %s: time zone %q: %w", s.GetId(), s.GetTimeZone(), err)
	}
	return cs, nil
}

// TargetFromProto converts a target for charting.
func TargetFromProto(t *pb.Target) (*constraints.Target, error) {
	switch p := t.GetPosition().(type) {
	case *pb.Target_Fixed:
		ra, dec := p.Fixed.GetRaDeg(), p.Fixed.GetDecDeg()
		var pmRA, pmDec float64
		if pm := p.Fixed.GetProperMotion(); pm != nil {
			pmRA, pmDec = pm.GetRaCosDecMasPerYr(), pm.GetDecMasPerYr()
			// ephem.Star takes its place at epoch J2000.0: carry a place of
			// another epoch back linearly (the same linear model the star
			// moves by).
			dt := pm.GetEpochJulianYear() - 2000
			dec -= pmDec * dt / 3.6e6
			if c := math.Cos(dec * ephem.Deg2Rad); c > 1e-9 {
				ra -= pmRA * dt / 3.6e6 / c
			}
			ra = math.Mod(ra+360, 360)
			dec = math.Max(-90, math.Min(90, dec))
		}
		st, err := ephem.NewStar(ra, dec, pmRA, pmDec)
		if err != nil {
			return nil, fmt.Errorf("target %s: %w", t.GetId(), err)
		}
		return &constraints.Target{Name: t.GetName(), Star: &st}, nil
	case *pb.Target_Orbit:
		o := p.Orbit
		el := ephem.Orbit{QAU: o.GetPerihelionDistanceAu(), E: o.GetEccentricity(), IncDeg: o.GetInclinationDeg(),
			NodeDeg: o.GetAscendingNodeDeg(), PeriDeg: o.GetPerihelionArgumentDeg(),
			PerihelionTT: ephem.JDFromLabel(o.GetPerihelionTimeTt().AsTime())}
		switch m := o.GetMagnitudeLaw().(type) {
		case *pb.OrbitElements_Comet:
			el.Law, el.M1, el.K1 = ephem.MagComet, m.Comet.GetM1(), m.Comet.GetK1()
		case *pb.OrbitElements_Asteroid:
			el.Law, el.H, el.G = ephem.MagAsteroid, m.Asteroid.GetH(), m.Asteroid.GetG()
		}
		c, err := ephem.NewConic(el)
		if err != nil {
			return nil, fmt.Errorf("target %s: %w", t.GetId(), err)
		}
		return &constraints.Target{Name: t.GetName(), Orbit: c}, nil
	case *pb.Target_Body:
		b, err := ephem.ParseBody(p.Body.GetName())
		if err != nil {
			return nil, fmt.Errorf("target %s: %w", t.GetId(), err)
		}
		m, err := ephem.NewBody(b)
		if err != nil {
			return nil, fmt.Errorf("target %s: %w", t.GetId(), err)
		}
		return &constraints.Target{Name: t.GetName(), Orbit: m}, nil
	}
	return nil, fmt.Errorf("target %s has no position", t.GetId())
}
