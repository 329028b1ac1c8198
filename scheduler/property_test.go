package scheduler_test

// The property test of issue 10: random nights are planned with Solve and
// every assignment is re-checked directly with package ephem (never with
// constraints.Grid, Track or Evaluate, which are what is being tested), at
// every 10 s inside each run and exactly at its ends, against the block's
// constraint set and the site's solar-avoidance floor; every slew is
// checked against an independently written trapezoidal time.
//
// The checks state the promise of issue 10 ("a plan that holds at every
// second"), not the behaviour of the code when the test was written.
//
// Switch: the slew part needs the per-axis accelerations that issue 10 adds
// to scheduler.Overheads (Axis1AccelDegS2, Axis2AccelDegS2). They are set
// by reflection (setAccel) so this file compiles before and after they
// land. Until they exist the test skips unless NIGHTLOOM_PROPERTY=1 is set
// (then it runs and reports what today's scheduler breaks, including every
// slew that ignores acceleration); once they exist it always runs.

import (
	"bufio"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"
	_ "time/tzdata" // IANA zones without the system's database

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/scheduler"
)

// Tolerances of the property test (issue 10, "Done when").
const (
	// propAngleTol: no angular constraint may be broken by more than 1
	// arcsec ...
	propAngleTolArcsec = 1.0
	// propTimeTol: ... unless the breach lasts at most 1 s (an edge found
	// to 1 s by root finding).
	propTimeTol = time.Second
	// propFloorTolArcsec: the solar-avoidance floor has no time tolerance
	// and only a numerical one.
	propFloorTolArcsec = 0.1
	// propMagTol: sky brightness and magnitude limits, in magnitudes
	// (the model's own table of f(rho) differs from the formula by 1e-5).
	propMagTol = 1e-3
	// propIllumTol: Moon illuminated fraction (1e-6 is ~0.2 arcsec of phase
	// angle at half Moon).
	propIllumTol = 1e-6
	// propRateTol: trailing limit, arcsec per minute of apparent motion.
	propRateTol = 1e-3
	// propSlewTol: a slew may be shorter than the trapezoid time by at most
	// this (positions of the plan are sampled on its grid).
	propSlewTol = time.Second
	// propSample is the sampling interval inside runs.
	propSample = 10 * time.Second
	// propBisect is the resolution of a breach's edges.
	propBisect = 50 * time.Millisecond
	// moonSkipAltDeg: a Moon more than 0.5 deg below the horizon does not
	// count for the minimum Moon separation (constraints' documented rule).
	moonSkipAltDeg = 0.5
)

// siderealArcsecPerS is the rate of a fixed target's hour angle (one
// sidereal day per 360 deg).
const siderealArcsecPerS = 15.041

// propNights is the number of random nights (issue 10 asks for at least
// 200); short mode runs propNightsShort.
const (
	propNights      = 200
	propNightsShort = 40
	propSeedBase    = 1000
	// propIterations of Solve's search: fixed, so plans do not depend on
	// the machine's speed.
	propIterations = 150
)

// setAccel sets the overhead model's per-axis accelerations when the
// scheduler has them (fields added by issue 10) and reports whether it
// could. Replace with plain assignments once the fields have landed.
func setAccel(o *scheduler.Overheads, a1, a2 float64) bool {
	v := reflect.ValueOf(o).Elem()
	f1, f2 := v.FieldByName("Axis1AccelDegS2"), v.FieldByName("Axis2AccelDegS2")
	if !f1.IsValid() || !f2.IsValid() || f1.Kind() != reflect.Float64 || f2.Kind() != reflect.Float64 {
		return false
	}
	f1.SetFloat(a1)
	f2.SetFloat(a2)
	return true
}

// propNight is one random night: a site, its grid, blocks and closures,
// plus what the checks need kept apart from the scheduler's own types
// (the horizon profile as given, the mount's accelerations).
type propNight struct {
	seed     uint64
	site     *scheduler.Site
	loc      *time.Location
	horizon  []constraints.HorizonPoint // sorted by azimuth
	accel    [2]float64                 // deg/s^2 per axis; 0 = constant rate
	grid     *constraints.Grid
	blocks   []scheduler.Block
	closures []scheduler.Closure
	orbits   map[string]ephem.Orbit // elements of the orbit targets, by block ID
}

// zoneByOffset lists IANA zones by standard offset (hours), so that a
// site's local clock roughly follows its longitude.
var zoneByOffset = []struct {
	h    float64
	name string
}{{-10, "Pacific/Honolulu"}, {-9, "America/Anchorage"}, {-8, "America/Los_Angeles"}, {-7, "America/Denver"},
	{-6, "America/Chicago"}, {-5, "America/New_York"}, {-4, "America/Santiago"}, {-3.5, "America/St_Johns"},
	{-3, "America/Sao_Paulo"}, {-2, "Atlantic/South_Georgia"}, {-1, "Atlantic/Azores"}, {0, "Europe/London"},
	{1, "Europe/Berlin"}, {2, "Europe/Athens"}, {3, "Europe/Moscow"}, {4, "Asia/Dubai"}, {5, "Asia/Karachi"},
	{5.5, "Asia/Kolkata"}, {6, "Asia/Dhaka"}, {7, "Asia/Bangkok"}, {8, "Asia/Shanghai"}, {9, "Asia/Tokyo"},
	{10, "Australia/Sydney"}, {11, "Pacific/Noumea"}, {12, "Pacific/Auckland"}, {13, "Pacific/Tongatapu"}}

func zoneFor(lonDeg float64) string {
	best, bd := "UTC", math.Inf(1)
	for _, z := range zoneByOffset {
		d := math.Abs(math.Remainder(lonDeg/15-z.h, 24))
		if d < bd {
			best, bd = z.name, d
		}
	}
	return best
}

func uniform(rng *rand.Rand, lo, hi float64) float64 { return lo + (hi-lo)*rng.Float64() }

// genNight makes the random night of a seed. Sites that have no night on
// the drawn date (polar day) are drawn again.
func genNight(seed uint64) (*propNight, error) {
	rng := rand.New(rand.NewPCG(seed, 0x70726f7065727479))
	for attempt := 0; attempt < 50; attempt++ {
		nt, err := tryNight(rng, seed)
		if err == nil {
			return nt, nil
		}
		if attempt == 49 {
			return nil, err
		}
	}
	return nil, nil
}

func tryNight(rng *rand.Rand, seed uint64) (*propNight, error) {
	lat, lon := uniform(rng, -70, 70), uniform(rng, -180, 180)
	elev := uniform(rng, 0, 3000)
	obs, err := ephem.NewObserver(lat, lon, elev)
	if err != nil {
		return nil, err
	}
	pressure := 1013.25 * math.Exp(-elev/8400)
	if rng.Float64() < 0.1 {
		pressure = 0 // geometric altitudes
	}
	if err := obs.SetAir(pressure, uniform(rng, -15, 25)); err != nil {
		return nil, err
	}
	cs := constraints.NewSite(obs)
	loc, err := time.LoadLocation(zoneFor(lon))
	if err != nil {
		return nil, err
	}
	cs.Location = loc
	var hz []constraints.HorizonPoint
	if n := rng.IntN(9); n > 0 {
		used := map[float64]bool{}
		for len(hz) < n {
			az := math.Round(uniform(rng, 0, 360)*10) / 10
			if az >= 360 || used[az] {
				continue
			}
			used[az] = true
			hz = append(hz, constraints.HorizonPoint{AzDeg: az, AltDeg: math.Round(uniform(rng, -2, 25)*10) / 10})
		}
	}
	sort.Slice(hz, func(i, j int) bool { return hz[i].AzDeg < hz[j].AzDeg })
	if cs.Horizon, err = constraints.NewHorizon(hz); err != nil {
		return nil, err
	}
	cs.SolarFloorDeg = math.Round(uniform(rng, constraints.MinSolarFloorDeg, 25)*10) / 10
	switch u := rng.Float64(); {
	case u < 0.5:
		cs.Mount = constraints.GermanEquatorial
		if rng.Float64() < 0.7 {
			cs.FlipStartHADeg = uniform(rng, -8, 2)
			cs.FlipEndHADeg = cs.FlipStartHADeg + uniform(rng, 0, 12)
		}
	case u < 0.85:
		cs.Mount = constraints.AltAzimuth
	default:
		cs.Mount = constraints.ForkEquatorial
	}
	cs.PixelScaleArcsec = uniform(rng, 0.5, 3)
	cs.Sky = constraints.SkyParams{ZenithMag: uniform(rng, 19, 22), ExtinctionV: uniform(rng, 0.1, 0.4)}
	sec := func(lo, hi float64) time.Duration { return time.Duration(uniform(rng, lo, hi) * float64(time.Second)) }
	oh := scheduler.Overheads{Axis1RateDegS: uniform(rng, 1, 6), Axis2RateDegS: uniform(rng, 1, 6),
		Settle: sec(2, 10), Acquisition: sec(0, 40), FilterChange: sec(0, 15), Readout: sec(1, 6),
		Dither: sec(0, 10), Focus: sec(0, 90), FocusOnFilterChange: rng.Float64() < 0.5, Flip: sec(60, 180)}
	if rng.Float64() < 0.5 {
		oh.FocusEvery = time.Hour
	}
	site := &scheduler.Site{Site: cs, Overheads: oh}
	nt := &propNight{seed: seed, site: site, loc: loc, horizon: hz, orbits: map[string]ephem.Orbit{}}
	if rng.Float64() < 0.85 {
		nt.accel = [2]float64{uniform(rng, 0.3, 4), uniform(rng, 0.3, 4)}
	}
	if os.Getenv("NIGHTLOOM_PROPERTY_NOACCEL") != "" {
		// Diagnosis: constant-rate mounts only, to tell a slew's distance
		// from its acceleration.
		nt.accel = [2]float64{}
	}
	setAccel(&site.Overheads, nt.accel[0], nt.accel[1])

	day := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC).AddDate(0, 0, rng.IntN(6*365))
	// The weakest darkness first: the grid starts there.
	// Bright-twilight nights are drawn more often: comets close to the
	// Sun are seen only then.
	weak := constraints.Dark([]int{0, 0, 0, 1, 1, 1, 2, 3}[rng.IntN(8)])
	ds, de, ok := scheduler.NightBounds(&obs, day.Year(), day.Month(), day.Day(), weak)
	if !ok {
		return nil, fmt.Errorf("no %v night", weak)
	}
	mid := ds.Add(de.Sub(ds) / 2)
	snap := ephem.Prepare(ephem.NewInstant(mid))
	lstMid := snap.Local(&obs).LAST * ephem.Rad2Deg

	nFixed := 4 + rng.IntN(8)
	var blocks []scheduler.Block
	for i := 0; i < nFixed; i++ {
		ra := math.Mod(lstMid+uniform(rng, -100, 100)+720, 360)
		dlo, dhi := math.Max(-89, lat-80), math.Min(89, lat+80)
		dec := math.Asin(uniform(rng, math.Sin(dlo*ephem.Deg2Rad), math.Sin(dhi*ephem.Deg2Rad))) * ephem.Rad2Deg
		st, err := ephem.NewStar(ra, dec, uniform(rng, -50, 50), uniform(rng, -50, 50))
		if err != nil {
			return nil, err
		}
		blocks = append(blocks, randBlock(rng, fmt.Sprintf("F%d", i), &constraints.Target{Name: "fixed", Star: &st}, weak, ds, de, loc, false))
	}
	for c := 0; c < 1+rng.IntN(3); c++ {
		cn, el := propComet(rng, nt, ds, de)
		if cn == nil {
			continue
		}
		nt.orbits[fmt.Sprintf("C%d", c)] = el
		b := randBlock(rng, fmt.Sprintf("C%d", c), &constraints.Target{Name: "comet", Orbit: cn}, weak, ds, de, loc, true)
		// Comets are urgent and short-lived: high priority, short runs.
		b.Priority, b.MinRun = uniform(rng, 8, 10), 1+rng.IntN(3)
		if b.MaxRun != 0 && b.MaxRun < b.MinRun {
			b.MaxRun = b.MinRun
		}
		blocks = append(blocks, b)
	}
	if rng.Float64() < 0.5 {
		o := ephem.Orbit{QAU: uniform(rng, 1.3, 2.5), E: uniform(rng, 0.02, 0.3), IncDeg: uniform(rng, 0, 25),
			NodeDeg: uniform(rng, 0, 360), PeriDeg: uniform(rng, 0, 360),
			PerihelionTT: ephem.JD{Hi: ephem.NewInstant(ds).TT.Value() + uniform(rng, -600, 600)},
			Law:          ephem.MagAsteroid, H: uniform(rng, 8, 15), G: 0.15}
		if cn, err := ephem.NewConic(o); err == nil {
			nt.orbits["A0"] = o
			blocks = append(blocks, randBlock(rng, "A0", &constraints.Target{Name: "asteroid", Orbit: cn}, weak, ds, de, loc, true))
		}
	}
	// The grid must start at the weakest darkness asked: make one block ask
	// for it.
	blocks[0].Set.Darkness = weak
	step := []time.Duration{30 * time.Second, 60 * time.Second, 120 * time.Second}[rng.IntN(3)]
	g, err := scheduler.NightGrid(cs, day.Year(), day.Month(), day.Day(), scheduler.WeakestDarkness(blocks), step, constraints.Options{})
	if err != nil {
		return nil, err
	}
	nt.grid, nt.blocks = g, blocks
	for k := rng.IntN(3); k > 0; k-- {
		s := g.Start.Add(time.Duration(rng.Float64() * float64(g.End().Sub(g.Start))))
		e := s.Add(time.Duration(uniform(rng, 5, 60) * float64(time.Minute))).Truncate(time.Second)
		nt.closures = append(nt.closures, scheduler.Closure{Start: s.Truncate(time.Second), End: e, Note: "random"})
	}
	return nt, nil
}

// propComet invents a comet that the site sees within 20 deg of the Sun
// in twilight (the grid's evaluation is not used to pick it): at an instant
// near dusk or dawn a direction is chosen a few degrees above the horizon
// and 1-5 deg beyond the solar-avoidance floor from the Sun, the comet is
// put there at a random distance with a random velocity, and its elements
// follow from that state. Nil when no draw qualifies.
func propComet(rng *rand.Rand, nt *propNight, ds, de time.Time) (*ephem.Conic, ephem.Orbit) {
	obs := &nt.site.Observer
	floor := math.Max(nt.site.SolarFloorDeg, constraints.MinSolarFloorDeg)
	for try := 0; try < 200; try++ {
		t0 := ds.Add(time.Duration(uniform(rng, -20, 40) * float64(time.Minute)))
		if rng.Float64() < 0.5 {
			t0 = de.Add(-time.Duration(uniform(rng, -20, 40) * float64(time.Minute)))
		}
		snap := ephem.Prepare(ephem.NewInstant(t0))
		l := snap.Local(obs)
		sun := l.SunPlace()
		el := math.Min(20, floor+uniform(rng, 0.5, 5)) * ephem.Deg2Rad
		h := uniform(rng, 2, 15) * ephem.Deg2Rad
		c := (math.Cos(el) - math.Sin(h)*math.Sin(sun.Alt)) / (math.Cos(h) * math.Cos(sun.Alt))
		if math.Abs(c) > 1 {
			continue
		}
		az := sun.Az + math.Acos(c)
		if rng.Float64() < 0.5 {
			az = sun.Az - math.Acos(c)
		}
		hor := ephem.Vec3{math.Cos(h) * math.Cos(az), math.Cos(h) * math.Sin(az), math.Sin(h)}
		u := snap.NPB.TMulVec(l.OfDateToHorizon.TMulVec(hor)) // GCRS direction
		earth, _ := ephem.EarthHeliocentric(snap.TT)
		r := earth.Add(u.Scale(uniform(rng, 0.2, 1.5)))
		rn := r.Norm()
		// A random direction; speed near the parabolic one.
		dir := ephem.Vec3{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}.Unit()
		speed := math.Sqrt(2*propMuSun/rn) * uniform(rng, 0.8, 1.15)
		ecl := ephem.EclipticJ2000ToGCRS.Transpose()
		o, ok := elementsFromState(ecl.MulVec(r), ecl.MulVec(dir.Scale(speed)), snap.TT.Value())
		if !ok {
			continue
		}
		o.Law, o.M1, o.K1 = ephem.MagComet, uniform(rng, 4, 10), 10
		cn, err := ephem.NewConic(o)
		if err != nil {
			continue
		}
		p, _, _ := l.OrbitPlace(cn)
		got := ephem.Separation(p.OfDate, sun.OfDate) * ephem.Rad2Deg
		if p.AltApparent*ephem.Rad2Deg > 1 && got < 20.5 && got > floor {
			return cn, o
		}
	}
	return nil, ephem.Orbit{}
}

// propMuSun is the Sun's GM in AU^3/day^2: the square of the Gaussian
// gravitational constant k = 0.01720209895 (IAU 1976).
const propMuSun = 0.01720209895 * 0.01720209895

// elementsFromState converts a heliocentric state (J2000 ecliptic, AU and
// AU/day) at TT Julian date tt into perihelion elements, by the textbook
// two-body relations (angular momentum, eccentricity vector, Kepler's
// equation in its elliptic or hyperbolic form; e.g. Vallado, Fundamentals
// of Astrodynamics, algorithm "RV2COE", from memory). Near-parabolic and
// degenerate states are refused (ok false).
func elementsFromState(r, v ephem.Vec3, tt float64) (ephem.Orbit, bool) {
	const mu = propMuSun
	rn := r.Norm()
	hv := r.Cross(v)
	hn := hv.Norm()
	ev := r.Scale(v.Dot(v)/mu - 1/rn).Sub(v.Scale(r.Dot(v) / mu))
	e := ev.Norm()
	if !(e > 0.05 && e < 3) || math.Abs(e-1) < 0.02 || hn == 0 {
		return ephem.Orbit{}, false
	}
	q := hn * hn / mu / (1 + e)
	if q < 0.05 {
		return ephem.Orbit{}, false
	}
	cl := func(x float64) float64 { return math.Max(-1, math.Min(1, x)) }
	inc := math.Acos(cl(hv[2] / hn))
	node := math.Atan2(hv[0], -hv[1])
	nv := ephem.Vec3{math.Cos(node), math.Sin(node), 0}
	w := math.Acos(cl(nv.Dot(ev) / e))
	if ev[2] < 0 {
		w = 2*math.Pi - w
	}
	nu := math.Acos(cl(ev.Dot(r) / (e * rn)))
	if r.Dot(v) < 0 {
		nu = -nu
	}
	var dt float64 // days since perihelion
	if e < 1 {
		a := q / (1 - e)
		ea := 2 * math.Atan(math.Sqrt((1-e)/(1+e))*math.Tan(nu/2))
		dt = (ea - e*math.Sin(ea)) / math.Sqrt(mu/(a*a*a))
	} else {
		a := q / (e - 1)
		x := math.Sqrt((e-1)/(e+1)) * math.Tan(nu/2)
		if math.Abs(x) >= 1 {
			return ephem.Orbit{}, false
		}
		f := 2 * math.Atanh(x)
		dt = (e*math.Sinh(f) - f) / math.Sqrt(mu/(a*a*a))
	}
	return ephem.Orbit{QAU: q, E: e, IncDeg: inc * ephem.Rad2Deg, NodeDeg: ephem.NormAngle(node) * ephem.Rad2Deg,
		PeriDeg: w * ephem.Rad2Deg, PerihelionTT: ephem.JD{Hi: tt - dt}}, true
}

// randBlock draws a block with a random constraint set.
func randBlock(rng *rand.Rand, id string, t *constraints.Target, weak constraints.Dark, ds, de time.Time, loc *time.Location, orbit bool) scheduler.Block {
	exp := []float64{5, 15, 30, 60, 120, 180, 300}[rng.IntN(7)]
	b := scheduler.Block{ID: id, Target: t, Filter: []string{"L", "R", "G", "B", "Ha", "OIII"}[rng.IntN(6)],
		Exposure: time.Duration(exp * float64(time.Second)), FramesWanted: 4 + rng.IntN(60),
		MinRun: 1 + rng.IntN(4), DitherEvery: rng.IntN(4), Priority: uniform(rng, 1, 10)}
	if rng.Float64() < 0.6 {
		b.MaxRun = b.MinRun + rng.IntN(40)
	}
	s := &constraints.Set{Darkness: constraints.Dark(int(weak) + rng.IntN(4-int(weak)))}
	if orbit {
		b.NonSidereal = rng.Float64() < 0.7
		s.Darkness = constraints.Dark(int(weak) + rng.IntN(min(2, 4-int(weak))))
	}
	if rng.Float64() < 0.5 {
		s.MinAltDeg = uniform(rng, -2, 35)
	}
	if rng.Float64() < 0.15 {
		s.MaxAltDeg = uniform(rng, math.Max(s.MinAltDeg+15, 40), 89)
	}
	if rng.Float64() < 0.4 {
		s.MaxAirmass = uniform(rng, 1.2, 4)
	}
	if rng.Float64() < 0.25 {
		s.MaxHourAngleDeg = uniform(rng, 15, 90)
	}
	if rng.Float64() < 0.4 {
		s.MinMoonSepDeg = uniform(rng, 5, 90)
	}
	if rng.Float64() < 0.25 {
		s.MaxMoonIllum = uniform(rng, 0.2, 0.95)
		s.MoonIllumWhenUp = rng.Float64() < 0.5
	}
	if rng.Float64() < 0.3 {
		hi := 60.0
		if orbit {
			hi = 22
		}
		s.MinSolarElongDeg = uniform(rng, 5, hi)
	}
	if rng.Float64() < 0.2 {
		s.MinSkyMag = uniform(rng, 16, 21.5)
	}
	if orbit && rng.Float64() < 0.5 {
		s.FaintestMag = uniform(rng, 6, 16)
	}
	if !orbit || rng.Float64() < 0.3 {
		if rng.Float64() < 0.2 {
			// A local-time window around a random instant of the night, with
			// edges on odd seconds.
			at := ds.Add(time.Duration(rng.Float64() * float64(de.Sub(ds)))).In(loc)
			clock := time.Duration(at.Hour())*time.Hour + time.Duration(at.Minute())*time.Minute + time.Duration(at.Second())*time.Second
			start := (clock - time.Duration(uniform(rng, 0, 3)*float64(time.Hour))).Truncate(time.Second)
			end := (clock + time.Duration(uniform(rng, 0, 3)*float64(time.Hour))).Truncate(time.Second)
			wrap := func(d time.Duration) time.Duration { return ((d % (24 * time.Hour)) + 24*time.Hour) % (24 * time.Hour) }
			s.LocalStart, s.LocalEnd = wrap(start), wrap(end)
			if s.LocalStart == s.LocalEnd {
				s.LocalEnd = wrap(s.LocalEnd + time.Minute)
			}
		}
	}
	if rng.Float64() < 0.1 {
		// Dates: the local date of the night's start or of its end.
		d := ds.In(loc)
		if rng.Float64() < 0.5 {
			d = de.In(loc)
		}
		day := time.Date(d.Year(), d.Month(), d.Day(), 0, 0, 0, 0, time.UTC)
		if rng.Float64() < 0.5 {
			s.Earliest = day
		} else {
			s.Latest = day
		}
	}
	if rng.Float64() < 0.15 {
		s.AvoidFlipZone = true
	}
	if orbit && !b.NonSidereal && rng.Float64() < 0.5 {
		s.MaxTrailPixels = uniform(rng, 1, 20)
	}
	if orbit {
		// Comets and asteroids low in twilight: short exposures and limits
		// that leave them a chance.
		b.Exposure = time.Duration([]float64{5, 10, 20, 30, 60}[rng.IntN(5)] * float64(time.Second))
		s.MinAltDeg = math.Min(s.MinAltDeg, uniform(rng, -2, 6))
		s.MaxAltDeg, s.MaxHourAngleDeg = 0, 0
		if s.MaxAirmass != 0 {
			s.MaxAirmass = uniform(rng, 3, 12)
		}
		if s.MinSkyMag != 0 {
			s.MinSkyMag = uniform(rng, 10, 15)
		}
	}
	if rng.Float64() < 0.08 && !orbit {
		b.Exposure = 60 * time.Second
		b.MinRun = 1 + rng.IntN(3)
		b.MaxRun = b.MinRun
		b.Cadence = &scheduler.Cadence{Every: time.Duration(30+rng.IntN(61)) * time.Minute,
			Tolerance: time.Duration(5+rng.IntN(10)) * time.Minute}
	}
	b.Set = s
	return b
}

// sample is everything the checks need at one instant, from ephem only.
type sample struct {
	t                     time.Time
	altDeg, azDeg         float64 // apparent (refracted at the site's air), azimuth N->E
	haDeg, decDeg         float64 // apparent hour angle (-180, 180], declination of date
	airmass               float64 // Kasten & Young
	sunAltDeg             float64 // geometric, centre
	sunSepDeg, moonSepDeg float64 // topocentric
	moonAltDeg, moonIllum float64 // apparent; topocentric fraction
	skyMag                float64 // V mag/arcsec^2 at the target
	mag                   float64 // orbit targets: predicted magnitude + k X (NaN otherwise)
	rateArcsecMin         float64 // orbit targets: apparent rate
	clock                 time.Duration
	localDay              time.Time
}

// observe computes a sample of target t at instant at.
func (nt *propNight) observe(t *constraints.Target, at time.Time) sample {
	obs := &nt.site.Observer
	snap := ephem.Prepare(ephem.NewInstant(at))
	l := snap.Local(obs)
	var p ephem.Place
	s := sample{t: at, mag: math.NaN()}
	var topo ephem.View
	if t.Star != nil {
		p = l.StarPlace(t.Star.Direction(snap.TT))
	} else {
		p, topo, _ = l.OrbitPlace(t.Orbit)
	}
	sun, moon := l.SunPlace(), l.MoonPlace()
	s.altDeg, s.azDeg = p.AltApparent*ephem.Rad2Deg, p.Az*ephem.Rad2Deg
	s.haDeg, s.decDeg = p.HourAngle*ephem.Rad2Deg, p.Dec*ephem.Rad2Deg
	s.airmass = ephem.Airmass(p.AltApparent)
	s.sunAltDeg = sun.Alt * ephem.Rad2Deg
	sunSep, moonSep := ephem.Separation(p.OfDate, sun.OfDate), ephem.Separation(p.OfDate, moon.OfDate)
	s.sunSepDeg, s.moonSepDeg = sunSep*ephem.Rad2Deg, moonSep*ephem.Rad2Deg
	s.moonAltDeg = moon.AltApparent * ephem.Rad2Deg
	s.moonIllum, _ = l.MoonIllumination()
	// Sky brightness: no independent route exists in the repository, so the
	// model's published formulas are called one by one (constraints'
	// exported Krisciunas & Schaefer and Patat et al. functions, not
	// SkyStep or the grid), fed with the ephem values above.
	k := nt.site.Sky.ExtinctionV
	alt := math.Max(p.AltApparent, 0)
	phase := math.Acos(math.Max(-1, math.Min(1, 2*s.moonIllum-1)))
	nl := constraints.DarkSkyNanolamberts(nt.site.Sky.ZenithMag, k, alt) +
		constraints.MoonlightNanolamberts(k, alt, moon.AltApparent, moonSep, phase, l.MoonOfDate().Norm()) +
		constraints.TwilightNanolamberts(k, alt, sun.Alt, sunSep)
	s.skyMag = constraints.NanolambertsToMag(nl)
	if t.Orbit != nil {
		s.mag = topo.Magnitude + k*s.airmass
		s.rateArcsecMin = math.Hypot(topo.RateRA, topo.RateDec)
	}
	lt := at.In(nt.loc)
	s.clock = time.Duration(lt.Hour())*time.Hour + time.Duration(lt.Minute())*time.Minute +
		time.Duration(lt.Second())*time.Second + time.Duration(lt.Nanosecond())
	y, m, d := lt.Date()
	s.localDay = time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
	return s
}

// horizonAt interpolates the site's horizon profile linearly in azimuth,
// wrapping through north (the documented rule of a profile), written here
// apart from constraints.Horizon.
func horizonAt(pts []constraints.HorizonPoint, azDeg float64) float64 {
	switch len(pts) {
	case 0:
		return 0
	case 1:
		return pts[0].AltDeg
	}
	for i := range pts {
		j := (i + 1) % len(pts)
		a0, a1 := pts[i].AzDeg, pts[j].AzDeg
		if j == 0 {
			a1 += 360
		}
		x := azDeg
		if x < a0 {
			x += 360
		}
		if x >= a0 && x <= a1 {
			return pts[i].AltDeg + (pts[j].AltDeg-pts[i].AltDeg)*(x-a0)/(a1-a0)
		}
	}
	panic("horizonAt: azimuth outside the profile")
}

// altOfAirmass inverts ephem.Airmass (Kasten & Young) by bisection: the
// apparent altitude (deg) at which the airmass equals x.
func altOfAirmass(x float64) float64 {
	lo, hi := 0.0, 90.0
	for i := 0; i < 60; i++ {
		m := (lo + hi) / 2
		if ephem.Airmass(m*ephem.Deg2Rad) > x {
			lo = m
		} else {
			hi = m
		}
	}
	return (lo + hi) / 2
}

// darkLimitDeg is the Sun's highest geometric altitude each darkness
// requirement allows (constraints.Dark's documented thresholds).
func darkLimitDeg(d constraints.Dark) float64 {
	return [...]float64{ephem.SunriseAltDeg, ephem.CivilAltDeg, ephem.NauticalAltDeg, ephem.AstronomicalAltDeg}[d]
}

// propCheck is one constraint as a margin: >= 0 where it holds.
type propCheck struct {
	kind   string
	unit   string
	tol    float64 // largest breach forgiven at any duration, in unit
	strict bool    // no time tolerance
	margin func(s *sample) float64
}

// checksFor lists the checks that block b's constraint set and the site ask.
func (nt *propNight) checksFor(b *scheduler.Block) []propCheck {
	c := b.Set
	site := nt.site
	as := func(deg float64) float64 { return deg * 3600 }
	var out []propCheck
	add := func(kind, unit string, tol float64, m func(s *sample) float64) {
		out = append(out, propCheck{kind: kind, unit: unit, tol: tol, margin: m})
	}
	floor := math.Max(site.SolarFloorDeg, constraints.MinSolarFloorDeg)
	out = append(out, propCheck{kind: "solar-avoidance floor", unit: "arcsec", tol: propFloorTolArcsec, strict: true,
		margin: func(s *sample) float64 { return as(s.sunSepDeg - floor) }})
	dl := darkLimitDeg(c.Darkness)
	add("darkness (Sun altitude)", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(dl - s.sunAltDeg) })
	add("horizon profile", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(s.altDeg - horizonAt(nt.horizon, s.azDeg)) })
	add("minimum altitude", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(s.altDeg - c.MinAltDeg) })
	if c.MaxAltDeg != 0 {
		add("maximum altitude", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(c.MaxAltDeg - s.altDeg) })
	}
	if c.MaxAirmass != 0 {
		// As an altitude, so that the tolerance is an angle.
		h := altOfAirmass(c.MaxAirmass)
		add("maximum airmass (as altitude)", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(s.altDeg - h) })
	}
	if c.MaxHourAngleDeg != 0 {
		add("maximum hour angle", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(c.MaxHourAngleDeg - math.Abs(s.haDeg)) })
	}
	if c.MinSolarElongDeg != 0 {
		add("minimum solar elongation", "arcsec", propAngleTolArcsec, func(s *sample) float64 { return as(s.sunSepDeg - c.MinSolarElongDeg) })
	}
	if c.MinMoonSepDeg != 0 {
		add("minimum Moon separation", "arcsec", propAngleTolArcsec, func(s *sample) float64 {
			if s.moonAltDeg <= -moonSkipAltDeg {
				return math.Inf(1)
			}
			return as(s.moonSepDeg - c.MinMoonSepDeg)
		})
	}
	if c.MaxMoonIllum != 0 {
		add("maximum Moon illumination", "fraction", propIllumTol, func(s *sample) float64 {
			if c.MoonIllumWhenUp && s.moonAltDeg <= 0 {
				return math.Inf(1)
			}
			return c.MaxMoonIllum - s.moonIllum
		})
	}
	if c.MinSkyMag != 0 {
		add("sky brightness", "mag", propMagTol, func(s *sample) float64 { return s.skyMag - c.MinSkyMag })
	}
	if c.FaintestMag != 0 && b.Target.Orbit != nil {
		add("faintest magnitude", "mag", propMagTol, func(s *sample) float64 { return c.FaintestMag - s.mag })
	}
	if b.Target.Orbit != nil && !b.NonSidereal && site.PixelScaleArcsec > 0 {
		px := c.MaxTrailPixels
		if px == 0 {
			px = constraints.DefaultMaxTrailPixels
		}
		limit := px * site.PixelScaleArcsec / b.Exposure.Minutes()
		add("trailing", "arcsec/min", propRateTol, func(s *sample) float64 { return limit - s.rateArcsecMin })
	}
	if c.LocalStart != 0 || c.LocalEnd != 0 {
		add("local-time window", "s", 0, func(s *sample) float64 {
			in := s.clock >= c.LocalStart && s.clock < c.LocalEnd
			if c.LocalStart > c.LocalEnd {
				in = s.clock >= c.LocalStart || s.clock < c.LocalEnd
			}
			if in {
				return 1
			}
			return -1
		})
	}
	if !c.Earliest.IsZero() || !c.Latest.IsZero() {
		add("date window", "s", 0, func(s *sample) float64 {
			if !c.Earliest.IsZero() && s.localDay.Before(c.Earliest) || !c.Latest.IsZero() && s.localDay.After(c.Latest) {
				return -1
			}
			return 1
		})
	}
	if c.AvoidFlipZone && site.Mount == constraints.GermanEquatorial {
		f0, f1 := site.FlipStartHADeg, site.FlipEndHADeg
		add("flip zone", "arcsec", propAngleTolArcsec, func(s *sample) float64 {
			return as(math.Max(f0-s.haDeg, s.haDeg-f1))
		})
	}
	return out
}

// violation is one breach found.
type violation struct {
	kind   string
	seed   uint64
	block  string
	at     time.Time
	excess float64 // in unit
	unit   string
	dur    time.Duration // how long it lasts (0 for instantaneous checks)
}

func (v violation) String() string {
	s := fmt.Sprintf("seed %d block %s at %s: %s", v.seed, v.block, v.at.Format(time.RFC3339), v.kind)
	switch {
	case v.unit == "flip" || v.unit == "crossing":
		return s
	case v.dur > 0 && v.unit != "s":
		return s + fmt.Sprintf(" by %.4g %s for %v", v.excess, v.unit, v.dur.Round(10*time.Millisecond))
	}
	return s + fmt.Sprintf(" by %.4g %s", v.excess, v.unit)
}

// runTimes are the instants checked in [start, end]: every propSample and
// both ends exactly.
func runTimes(start, end time.Time) []time.Time {
	var ts []time.Time
	for t := start; t.Before(end); t = t.Add(propSample) {
		ts = append(ts, t)
	}
	return append(ts, end)
}

// checkRun checks one assignment's constraints over [Start, End].
func (nt *propNight) checkRun(a *scheduler.Assignment, b *scheduler.Block) (vs []violation, kinds []string) {
	checks := append(nt.checksFor(b), nt.pierChecks(a)...)
	for _, c := range checks {
		kinds = append(kinds, c.kind)
	}
	ts := runTimes(a.Start, a.End)
	ss := make([]sample, len(ts))
	for i, t := range ts {
		ss[i] = nt.observe(b.Target, t)
	}
	var out []violation
	for _, c := range checks {
		ms := make([]float64, len(ss))
		for i := range ss {
			ms[i] = c.margin(&ss[i])
		}
		for i := 0; i < len(ms); {
			if !(ms[i] < 0) {
				i++
				continue
			}
			j := i
			worst, at := 0.0, ts[i]
			for j < len(ms) && ms[j] < 0 {
				if -ms[j] > worst {
					worst, at = -ms[j], ts[j]
				}
				j++
			}
			// The breach spans (ts[i-1], ts[j]) at most; refine its edges.
			lo, hi := ts[i], ts[j-1]
			if i > 0 {
				lo = nt.edge(b.Target, c, ts[i-1], ts[i])
			}
			if j < len(ms) {
				hi = nt.edge(b.Target, c, ts[j], ts[j-1])
			}
			dur := hi.Sub(lo)
			if worst > c.tol && (c.strict || dur > propTimeTol) {
				ex := worst
				if c.unit == "s" {
					ex = dur.Seconds()
				}
				out = append(out, violation{kind: c.kind, seed: nt.seed, block: b.ID, at: at, excess: ex, unit: c.unit, dur: dur})
			}
			i = j
		}
	}
	out = append(out, nt.checkPier(a, b, ts, ss)...)
	return out, kinds
}

// edge bisects between ok (margin >= 0) and bad (margin < 0) to
// propBisect and returns the instant nearest ok where the margin is
// negative.
func (nt *propNight) edge(t *constraints.Target, c propCheck, ok, bad time.Time) time.Time {
	for bad.Sub(ok).Abs() > propBisect {
		m := ok.Add(bad.Sub(ok) / 2)
		s := nt.observe(t, m)
		if c.margin(&s) < 0 {
			bad = m
		} else {
			ok = m
		}
	}
	return bad
}

// checkPier checks a german equatorial mount's pier sides: on the east
// side the hour angle stays at or before the flip zone's end, on the west
// side at or after its start, a flip starts inside the zone, and a block
// that avoids the zone never flips or crosses it.
func (nt *propNight) checkPier(a *scheduler.Assignment, b *scheduler.Block, ts []time.Time, ss []sample) []violation {
	site := nt.site
	if site.Mount != constraints.GermanEquatorial {
		return nil
	}
	f0, f1 := site.FlipStartHADeg, site.FlipEndHADeg
	var out []violation
	bad := func(kind string, at time.Time, ex float64, unit string) {
		out = append(out, violation{kind: kind, seed: nt.seed, block: b.ID, at: at, excess: ex, unit: unit})
	}
	if !a.Flip.IsZero() {
		if a.FlipBefore <= 0 || a.FlipBefore >= len(a.FrameStarts) {
			bad("flip layout", a.Flip, float64(a.FlipBefore), "frame")
			return out
		}
		// Early by more than 1 arcsec and 1 s (the hour angle grows by
		// 15.04 arcsec per second of time).
		if s := nt.observe(b.Target, a.Flip); (f0-s.haDeg)*3600 > math.Max(propAngleTolArcsec, siderealArcsecPerS*propTimeTol.Seconds()) {
			bad("flip starts before the flip zone", a.Flip, (f0-s.haDeg)*3600, "arcsec")
		}
		if b.Set.AvoidFlipZone {
			bad("flip in a run that avoids the flip zone", a.Flip, 0, "flip")
		}
	}
	for i := 1; i < len(ss) && b.Set.AvoidFlipZone; i++ {
		h0, h1 := ss[i-1].haDeg, ss[i].haDeg
		if h0 < f0 && h1 > f1 && h1-h0 < 180 {
			bad("flip zone crossed between samples", ts[i], 0, "crossing")
		}
	}
	return out
}

// pierChecks are a german equatorial mount's side limits over a run: on
// the east side (before a flip) the hour angle stays at or before the flip
// zone's end, on the west side at or after its start; the flip itself is
// exempt.
func (nt *propNight) pierChecks(a *scheduler.Assignment) []propCheck {
	site := nt.site
	if site.Mount != constraints.GermanEquatorial {
		return nil
	}
	f0, f1 := site.FlipStartHADeg, site.FlipEndHADeg
	flipping := !a.Flip.IsZero() && a.FlipBefore > 0 && a.FlipBefore < len(a.FrameStarts)
	var flipEnd time.Time
	if flipping {
		flipEnd = a.FrameStarts[a.FlipBefore]
	}
	inFlip := func(t time.Time) bool { return flipping && !t.Before(a.Flip) && t.Before(flipEnd) }
	west := func(t time.Time) bool { return a.Pointing.PierWest || flipping && !t.Before(flipEnd) }
	return []propCheck{
		{kind: "east side past the flip zone's end", unit: "arcsec", tol: propAngleTolArcsec, margin: func(s *sample) float64 {
			if inFlip(s.t) || west(s.t) {
				return math.Inf(1)
			}
			if d := math.Remainder(s.haDeg-f1, 360); d > 0 && d < 180 {
				return -d * 3600
			}
			return math.Inf(1)
		}},
		{kind: "west side before the flip zone's start", unit: "arcsec", tol: propAngleTolArcsec, margin: func(s *sample) float64 {
			if inFlip(s.t) || !west(s.t) {
				return math.Inf(1)
			}
			if d := math.Remainder(f0-s.haDeg, 360); d > 0 && d < 180 {
				return -d * 3600
			}
			return math.Inf(1)
		}},
	}
}

// trapezoid is the time to move an axis by d degrees at top speed v deg/s
// with acceleration = deceleration a deg/s^2 (a = 0: constant speed): a
// trapezoidal speed profile, or a triangular one when the move is too
// short to reach v (the usual kinematics of a move from rest to rest).
func trapezoid(d, v, a float64) float64 {
	d = math.Abs(d)
	switch {
	case d == 0:
		return 0
	case a <= 0:
		return d / v
	case d >= v*v/a:
		return d/v + v/a
	}
	return 2 * math.Sqrt(d/a)
}

// mountAxes returns the mechanical axes (degrees) of a pointing, by the
// convention of scheduler/overhead.go: alt-azimuth (azimuth, altitude); fork
// (hour angle, declination); german equatorial east side (hour angle
// reduced into (f1-360, f1], plus 90; declination), west side (hour angle
// reduced into [f0, f0+360), minus 90; 180 - declination). A tracked
// previous target on the east side stops at the flip zone's end.
func mountAxes(site *scheduler.Site, haDeg, decDeg, azDeg, altDeg float64, west, prev bool) (a1, a2 float64) {
	switch site.Mount {
	case constraints.AltAzimuth:
		return azDeg, altDeg
	case constraints.ForkEquatorial:
		return haDeg, decDeg
	}
	f0, f1 := site.FlipStartHADeg, site.FlipEndHADeg
	ha := haDeg
	if !west {
		if prev && ha > f1 && ha < f1+180 {
			ha = f1
		}
		ha = f1 - math.Mod(math.Mod(f1-ha, 360)+360, 360)
		return ha + 90, decDeg
	}
	ha = f0 + math.Mod(math.Mod(ha-f0, 360)+360, 360)
	return ha - 90, 180 - decDeg
}

// setupOf is the whole overhead the plan declares before a run.
func setupOf(a *scheduler.Assignment) time.Duration {
	s := a.Spent
	return s.Slew + s.Settle + s.FilterChange + s.Focus + s.Acquisition
}

// checkSlews checks every slew of a plan: the plan's slew lasts at least
// the trapezoid time of the slower axis, from the previous target where it
// is when the slew begins (at the end of the gap or at its start, see
// below) to the new target at the run's start; the gap holds the declared
// setup; runs and setups avoid closures.
func (nt *propNight) checkSlews(pl *scheduler.Plan) []violation {
	site := nt.site
	var out []violation
	latDeg := site.Observer.LatRad * ephem.Rad2Deg
	prevEnd := pl.Start
	prevBlock := -1
	prevWest := false
	for k := range pl.Assignments {
		a := &pl.Assignments[k]
		b := &nt.blocks[a.Block]
		setup := setupOf(a)
		begin := a.Start.Add(-setup)
		s := nt.observe(b.Target, a.Start)
		c1, c2 := mountAxes(site, s.haDeg, s.decDeg, s.azDeg, s.altDeg, a.Pointing.PierWest, false)
		// slewFrom is the trapezoid time from the previous target where it
		// is at instant from (the park position before the first run).
		slewFrom := func(from time.Time) float64 {
			var p1, p2 float64
			if prevBlock < 0 {
				// Parked at the zenith, east side.
				p1, p2 = mountAxes(site, 0, latDeg, 0, 90, false, true)
			} else {
				s := nt.observe(nt.blocks[prevBlock].Target, from)
				p1, p2 = mountAxes(site, s.haDeg, s.decDeg, s.azDeg, s.altDeg, prevWest, true)
			}
			d1, d2 := c1-p1, c2-p2
			if site.Mount != constraints.GermanEquatorial {
				d1 = math.Remainder(d1, 360)
			}
			return math.Max(trapezoid(d1, site.Axis1RateDegS, nt.accel[0]), trapezoid(d2, site.Axis2RateDegS, nt.accel[1]))
		}
		// The plan does not say when in the gap its slew begins: at the
		// gap's end (the setup just before the run, as the plan's Spent
		// lays it out) or right after the previous run. Either is a valid
		// timeline, so the shorter of the two slews is the least allowed.
		need := slewFrom(begin)
		if prevEnd.Before(begin) {
			need = math.Min(need, slewFrom(prevEnd))
		}
		sp := a.Spent
		if sp.Slew < 0 || sp.Settle < 0 || sp.FilterChange < 0 || sp.Focus < 0 || sp.Acquisition < 0 || sp.Idle < 0 {
			// A NaN or infinite slew in seconds becomes the most negative
			// Duration.
			out = append(out, violation{kind: "declared overhead negative (slew not finite)", seed: nt.seed, block: a.ID,
				at: a.Start, excess: need, unit: "s"})
		} else if short := need - a.Spent.Slew.Seconds(); short > propSlewTol.Seconds() {
			out = append(out, violation{kind: "slew shorter than the trapezoid time", seed: nt.seed, block: a.ID, at: begin,
				excess: short, unit: "s"})
		}
		if gap := a.Start.Sub(prevEnd); gap < setup-propTimeTol {
			out = append(out, violation{kind: "gap shorter than the declared setup", seed: nt.seed, block: a.ID, at: prevEnd,
				excess: (setup - gap).Seconds(), unit: "s"})
		}
		if a.Spent.Settle < site.Settle || a.Spent.Acquisition < site.Acquisition {
			out = append(out, violation{kind: "settle or acquisition short", seed: nt.seed, block: a.ID, at: begin,
				excess: math.Max((site.Settle - a.Spent.Settle).Seconds(), (site.Acquisition - a.Spent.Acquisition).Seconds()), unit: "s"})
		}
		for _, c := range nt.closures {
			lo, hi := maxTime(begin, c.Start), minTime(a.End, c.End)
			if ov := hi.Sub(lo); ov > propTimeTol {
				out = append(out, violation{kind: "run or setup overlaps a closure", seed: nt.seed, block: a.ID, at: lo,
					excess: ov.Seconds(), unit: "s", dur: ov})
			}
		}
		prevEnd, prevBlock = a.End, a.Block
		prevWest = a.Pointing.PierWest || !a.Flip.IsZero()
	}
	return out
}

func maxTime(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}

func minTime(a, b time.Time) time.Time {
	if a.Before(b) {
		return a
	}
	return b
}

// planNight plans a random night with Solve (a small, fixed iteration
// count: deterministic and fast) and returns the plan and every breach.
func planNight(seed uint64) (*propNight, *scheduler.Plan, []violation, map[string]int, error) {
	nt, err := genNight(seed)
	if err != nil {
		return nil, nil, nil, nil, fmt.Errorf("seed %d: %w", seed, err)
	}
	p, err := scheduler.NewProblem(scheduler.Input{Site: nt.site, Grid: nt.grid, Blocks: nt.blocks, Closures: nt.closures,
		Options: scheduler.Options{Seed: seed, Iterations: propIterations, Budget: -1, Workers: 1}})
	if err != nil {
		return nil, nil, nil, nil, fmt.Errorf("seed %d: %w", seed, err)
	}
	pl := scheduler.Solve(p)
	var vs []violation
	active := map[string]int{}
	for k := range pl.Assignments {
		a := &pl.Assignments[k]
		v, kinds := nt.checkRun(a, &nt.blocks[a.Block])
		vs = append(vs, v...)
		for _, k := range kinds {
			active[k]++
		}
	}
	vs = append(vs, nt.checkSlews(pl)...)
	return nt, pl, vs, active, nil
}

// propSeeds reads the regression seeds (../testdata/property/seeds.txt: one
// seed per line, then a note of what failed).
func propSeeds(t *testing.T) []uint64 {
	f, err := os.Open(filepath.Join("..", "testdata", "property", "seeds.txt"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var out []uint64
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		s, err := strconv.ParseUint(strings.Fields(line)[0], 10, 64)
		if err != nil {
			t.Fatalf("seeds.txt: %q: %v", line, err)
		}
		out = append(out, s)
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}

// TestPlansHoldEverySecond is the property test of issue 10 (see the top of
// the file): the regression seeds first, then propNights random nights.
func TestPlansHoldEverySecond(t *testing.T) {
	var probe scheduler.Overheads
	if !setAccel(&probe, 1, 1) && os.Getenv("NIGHTLOOM_PROPERTY") == "" {
		t.Skip("scheduler.Overheads has no Axis1AccelDegS2/Axis2AccelDegS2 yet (issue 10); set NIGHTLOOM_PROPERTY=1 to run against today's scheduler")
	}
	seeds := propSeeds(t)
	n := propNights
	if testing.Short() {
		n = propNightsShort
	}
	seen := map[uint64]bool{}
	for _, s := range seeds {
		seen[s] = true
	}
	regression := len(seeds)
	for i := 0; i < n; i++ {
		if s := propSeedBase + uint64(i); !seen[s] {
			seeds = append(seeds, s)
		}
	}
	type result struct {
		runs, orbitRuns int
		mount           constraints.MountKind
		vs              []violation
		active          map[string]int
		err             error
	}
	res := make([]result, len(seeds))
	var wg sync.WaitGroup
	next := make(chan int)
	for w := 0; w < 2; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				nt, pl, vs, active, err := planNight(seeds[i])
				res[i].vs, res[i].active, res[i].err = vs, active, err
				if pl != nil {
					res[i].runs = len(pl.Assignments)
					res[i].mount = nt.site.Mount
					for _, a := range pl.Assignments {
						if nt.blocks[a.Block].Target.Orbit != nil {
							res[i].orbitRuns++
						}
					}
				}
			}
		}()
	}
	for i := range seeds {
		next <- i
	}
	close(next)
	wg.Wait()

	type agg struct {
		count   int
		worst   violation
		seeds   map[uint64]bool
		nightsN int
	}
	kinds := map[string]*agg{}
	runs, orbitRuns := 0, 0
	var mounts [3]int
	active := map[string]int{}
	for i, r := range res {
		if r.err != nil {
			t.Errorf("seed %d: %v", seeds[i], r.err)
			continue
		}
		runs += r.runs
		orbitRuns += r.orbitRuns
		for k, n := range r.active {
			active[k] += n
		}
		mounts[r.mount]++
		for _, v := range r.vs {
			g := kinds[v.kind]
			if g == nil {
				g = &agg{seeds: map[uint64]bool{}}
				kinds[v.kind] = g
			}
			g.count++
			g.seeds[v.seed] = true
			if v.excess > g.worst.excess || g.count == 1 {
				g.worst = v
			}
		}
	}
	t.Logf("%d nights (%d regression seeds; german/fork/alt-az mounts %v), %d runs (%d of orbit targets) checked every %v and at both ends",
		len(seeds), regression, mounts, runs, orbitRuns, propSample)
	t.Logf("runs per check: %v", active)
	names := make([]string, 0, len(kinds))
	for k := range kinds {
		names = append(names, k)
	}
	sort.Strings(names)
	for _, k := range names {
		g := kinds[k]
		var ss []uint64
		for s := range g.seeds {
			ss = append(ss, s)
		}
		sort.Slice(ss, func(i, j int) bool { return ss[i] < ss[j] })
		if len(ss) > 8 {
			ss = ss[:8]
		}
		t.Errorf("%s: %d breaches in %d nights; worst: %v; seeds %v", k, g.count, len(g.seeds), g.worst, ss)
	}
}

// TestTrapezoid checks the test's own slew formula against hand-worked
// cases (kinematics of a rest-to-rest move; no outside source needed):
// 10 deg at 2 deg/s with 1 deg/s^2 reaches full speed after 2 deg, so
// 10/2 + 2/1 = 7 s; 1 deg cannot reach full speed: 2 sqrt(1/1) = 2 s; at
// the boundary d = v^2/a both formulas give 2v/a.
func TestTrapezoid(t *testing.T) {
	const tol = 1e-12
	for _, c := range []struct{ d, v, a, want float64 }{
		{10, 2, 1, 7}, {1, 2, 1, 2}, {4, 2, 1, 4}, {-10, 2, 1, 7}, {10, 2, 0, 5}, {0, 2, 1, 0},
	} {
		if got := trapezoid(c.d, c.v, c.a); math.Abs(got-c.want) > tol {
			t.Errorf("trapezoid(%v, %v, %v) = %v, want %v (tol %v s)", c.d, c.v, c.a, got, c.want, tol)
		}
	}
}

// TestHorizonAt checks the test's own horizon interpolation on a hand-made
// profile (linear in azimuth, wrapping through north).
func TestHorizonAt(t *testing.T) {
	const tol = 1e-12
	pts := []constraints.HorizonPoint{{AzDeg: 10, AltDeg: 4}, {AzDeg: 100, AltDeg: 10}, {AzDeg: 350, AltDeg: 0}}
	for _, c := range []struct{ az, want float64 }{
		{10, 4}, {55, 7}, {100, 10}, {225, 5}, {350, 0}, {0, 2}, {5, 3}, {355, 1},
	} {
		if got := horizonAt(pts, c.az); math.Abs(got-c.want) > tol {
			t.Errorf("horizonAt(%v) = %v, want %v (tol %v deg)", c.az, got, c.want, tol)
		}
	}
}
