package server

import (
	"math"
	"strings"

	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// normalizeTarget returns a copy of t without its output-only fields.
func normalizeTarget(t *nightloomv1.Target) *nightloomv1.Target {
	c := proto.Clone(t).(*nightloomv1.Target)
	c.Id, c.CreateTime, c.UpdateTime = "", nil, nil
	return c
}

// checkTarget validates a target (target.proto ranges) and, when the ranges
// hold, builds it for the ephemeris so that what the domain refuses (e.g. a
// hyperbola faster than light) is refused here too.
func checkTarget(v *violations, path string, t *nightloomv1.Target) *constraints.Target {
	if t == nil {
		v.add(path, "is required")
		return nil
	}
	n := len(v.list)
	text(v, path+".name", t.GetName(), 1, MaxNameBytes)
	switch pos := t.GetPosition().(type) {
	case *nightloomv1.Target_Fixed:
		f := pos.Fixed
		if f == nil {
			v.add(path+".fixed", "is required")
			break
		}
		checkCatalogueID(v, path+".fixed", f)
		halfOpen(v, path+".fixed.ra_deg", f.GetRaDeg(), 0, 360)
		rangeCheck(v, path+".fixed.dec_deg", f.GetDecDeg(), -90, 90)
		if pm := f.GetProperMotion(); pm != nil {
			rangeCheck(v, path+".fixed.proper_motion.ra_cos_dec_mas_per_yr", pm.GetRaCosDecMasPerYr(), -1e5, 1e5)
			rangeCheck(v, path+".fixed.proper_motion.dec_mas_per_yr", pm.GetDecMasPerYr(), -1e5, 1e5)
			rangeCheck(v, path+".fixed.proper_motion.epoch_julian_year", pm.GetEpochJulianYear(), 1900, 2200)
		}
	case *nightloomv1.Target_Orbit:
		o := pos.Orbit
		if o == nil {
			v.add(path+".orbit", "is required")
			break
		}
		p := path + ".orbit"
		positiveUpTo(v, p+".perihelion_distance_au", o.GetPerihelionDistanceAu(), 1000)
		rangeCheck(v, p+".eccentricity", o.GetEccentricity(), 0, 100)
		rangeCheck(v, p+".inclination_deg", o.GetInclinationDeg(), 0, 180)
		halfOpen(v, p+".ascending_node_deg", o.GetAscendingNodeDeg(), 0, 360)
		halfOpen(v, p+".perihelion_argument_deg", o.GetPerihelionArgumentDeg(), 0, 360)
		instant(v, p+".perihelion_time_tt", o.GetPerihelionTimeTt(), true)
		switch law := o.GetMagnitudeLaw().(type) {
		case *nightloomv1.OrbitElements_Comet:
			rangeCheck(v, p+".comet.m1", law.Comet.GetM1(), -10, 30)
			rangeCheck(v, p+".comet.k1", law.Comet.GetK1(), 0, 50)
		case *nightloomv1.OrbitElements_Asteroid:
			rangeCheck(v, p+".asteroid.h", law.Asteroid.GetH(), -5, 35)
			rangeCheck(v, p+".asteroid.g", law.Asteroid.GetG(), -0.5, 1.5)
		}
	case *nightloomv1.Target_Body:
		if pos.Body == nil {
			v.add(path+".body", "is required")
			break
		}
		if _, err := ephem.ParseBody(pos.Body.GetName()); err != nil {
			v.add(path+".body.name", "unknown body %q; want one of %s", pos.Body.GetName(), strings.Join(ephem.BodyNames(), ", "))
		}
	default:
		v.add(path+".position", "exactly one of fixed, orbit or body is required")
	}
	if len(v.list) > n {
		return nil
	}
	ct, err := targetModel(t)
	if err != nil {
		field := path + ".fixed"
		switch {
		case t.GetOrbit() != nil:
			field = path + ".orbit"
		case t.GetBody() != nil:
			field = path + ".body"
		}
		v.add(field, "%v", err)
		return nil
	}
	return ct
}

// targetKind is the store's kind of a target. The store's "orbit" kind
// means a moving target: a body (planet or Moon) is stored under it too, so
// that the schema needs no change for it.
func targetKind(t *nightloomv1.Target) string {
	if t.GetOrbit() != nil || t.GetBody() != nil {
		return store.KindOrbit
	}
	return store.KindFixed
}

// julianYearDays is the length of the Julian year in days.
const julianYearDays = 365.25

// targetModel builds the domain target of a validated target.
//
// A fixed target's catalogue place at epoch E is carried to J2000.0, the
// epoch ephem.Star expects, so that ephem.Star.Direction (linear motion in
// the tangent plane at J2000.0) gives back the catalogue place at E: a
// first guess moves the place back along the tangent plane at E, and a few
// fixed-point corrections remove the second-order difference between the
// two tangent planes (our construction).
func targetModel(t *nightloomv1.Target) (*constraints.Target, error) {
	if f := t.GetFixed(); f != nil {
		ra, dec := f.GetRaDeg(), f.GetDecDeg()
		var pmRA, pmDec float64
		if pm := f.GetProperMotion(); pm != nil {
			pmRA, pmDec = pm.GetRaCosDecMasPerYr(), pm.GetDecMasPerYr()
			if years := pm.GetEpochJulianYear() - 2000; years != 0 && (pmRA != 0 || pmDec != 0) {
				var err error
				if ra, dec, err = placeAtJ2000(ra, dec, pmRA, pmDec, years); err != nil {
					return nil, err
				}
			}
		}
		s, err := ephem.NewStar(ra, dec, pmRA, pmDec)
		if err != nil {
			return nil, err
		}
		return &constraints.Target{Name: t.GetName(), Star: &s}, nil
	}
	if b := t.GetBody(); b != nil {
		body, err := ephem.ParseBody(b.GetName())
		if err != nil {
			return nil, err
		}
		m, err := ephem.NewBody(body)
		if err != nil {
			return nil, err
		}
		return &constraints.Target{Name: t.GetName(), Orbit: m}, nil
	}
	o := t.GetOrbit()
	el := ephem.Orbit{
		QAU: o.GetPerihelionDistanceAu(), E: o.GetEccentricity(),
		IncDeg: o.GetInclinationDeg(), NodeDeg: o.GetAscendingNodeDeg(), PeriDeg: o.GetPerihelionArgumentDeg(),
		// The Timestamp spells a TT reading (target.proto).
		PerihelionTT: ephem.JDFromLabel(o.GetPerihelionTimeTt().AsTime()),
	}
	switch law := o.GetMagnitudeLaw().(type) {
	case *nightloomv1.OrbitElements_Comet:
		el.Law, el.M1, el.K1 = ephem.MagComet, law.Comet.GetM1(), law.Comet.GetK1()
	case *nightloomv1.OrbitElements_Asteroid:
		el.Law, el.H, el.G = ephem.MagAsteroid, law.Asteroid.GetH(), law.Asteroid.GetG()
	}
	c, err := ephem.NewConic(el)
	if err != nil {
		return nil, err
	}
	return &constraints.Target{Name: t.GetName(), Orbit: c}, nil
}

// placeAtJ2000 returns the J2000.0 place (deg) of a star that is at raDeg,
// decDeg years Julian years after J2000.0 (TT) under ephem.Star's motion.
func placeAtJ2000(raDeg, decDeg, pmRA, pmDec, years float64) (float64, float64, error) {
	sph := func(ra, dec float64) ephem.Vec3 {
		sa, ca := math.Sincos(ra * ephem.Deg2Rad)
		sd, cd := math.Sincos(dec * ephem.Deg2Rad)
		return ephem.Vec3{cd * ca, cd * sa, sd}
	}
	deg := func(u ephem.Vec3) (float64, float64) {
		lon, lat, _ := ephem.VecToSpherical(u)
		ra := lon * ephem.Rad2Deg
		if ra >= 360 {
			ra -= 360
		}
		return ra, lat * ephem.Rad2Deg
	}
	want := sph(raDeg, decDeg)
	sa, ca := math.Sincos(raDeg * ephem.Deg2Rad)
	sd, cd := math.Sincos(decDeg * ephem.Deg2Rad)
	eRA := ephem.Vec3{-sa, ca, 0}
	eDec := ephem.Vec3{-sd * ca, -sd * sa, cd}
	k := -ephem.Arcsec2Rad / 1000 * years
	guess := want.Add(eRA.Scale(pmRA * k)).Add(eDec.Scale(pmDec * k)).Unit()
	tt := ephem.JD{Hi: ephem.J2000 + years*julianYearDays}
	for i := 0; i < 4; i++ {
		ra, dec := deg(guess)
		s, err := ephem.NewStar(ra, dec, pmRA, pmDec)
		if err != nil {
			return 0, 0, err
		}
		guess = guess.Add(want.Sub(s.Direction(tt))).Unit()
	}
	ra, dec := deg(guess)
	return ra, dec, nil
}
