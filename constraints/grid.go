package constraints

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

// Grid limits, so that a request cannot ask for unbounded work.
const (
	MinStep      = 10 * time.Second
	MaxGridSteps = 20000 // a 60 s grid over ~14 nights, or 10 s over 2 days
)

// ErrGrid reports an invalid grid request.
var ErrGrid = errors.New("constraints: invalid grid")

// Options tune a grid.
type Options struct {
	// NoSkyBrightness skips the sky-brightness model: the Sky track is NaN,
	// sky-brightness limits are not checked and quality ignores the sky.
	NoSkyBrightness bool
}

// Grid is a site's sky sampled at a fixed step: the Sun and Moon state and
// the Earth orientation are computed here once per step and shared by
// every target.
type Grid struct {
	Site  *Site
	Start time.Time
	Step  time.Duration
	N     int
	Opts  Options

	Snap  []ephem.Snapshot
	Local []ephem.Local

	SunAlt, SunAz   []float64 // geometric, radians
	SunDir, MoonDir []ephem.Vec3
	MoonAlt, MoonAz []float64 // apparent, radians
	MoonIllum       []float64 // topocentric illuminated fraction
	MoonPhase       []float64 // Sun-Moon-observer angle, radians
	MoonDistKm      []float64 // topocentric
	Dark            []Darkness
	// Closed marks steps when the site cannot observe (closures). Callers
	// may set it before Evaluate; it starts all false.
	Closed []bool

	sunHD, moonHD []ephem.Vec3 // Sun and Moon in the local hour-angle frame
	// Per-step quantities hoisted out of the per-target loops, one array
	// each (structure of arrays): cos and sin of the local apparent
	// sidereal time, and the Sun's and Moon's hour-angle-frame unit vectors
	// by component.
	last, cosLAST, sinLAST []float64
	sunX, sunY, sunZ       []float64
	moonX, moonY, moonZ    []float64
	sky                    []SkyStep
	clock                  []time.Duration // local time of day at each step
	localDay               []time.Time     // local civil date at each step (midnight, UTC location)
	points                 *pointCache     // one-step grids for edge refinement (Intervals)
}

// NewGrid samples [start, end) every step (instants start + i*step).
func NewGrid(site *Site, start, end time.Time, step time.Duration, opts Options) (*Grid, error) {
	g, err := newGrid(site, start, end, step, opts, nil)
	if err != nil {
		return nil, err
	}
	g.points = &pointCache{}
	return g, nil
}

// newGrid is NewGrid with the snapshot of each instant from snap (nil:
// ephem.Prepare).
func newGrid(site *Site, start, end time.Time, step time.Duration, opts Options, snap func(ephem.Instant) ephem.Snapshot) (*Grid, error) {
	if snap == nil {
		snap = ephem.Prepare
	}
	if err := site.Validate(); err != nil {
		return nil, err
	}
	if step < MinStep {
		return nil, fmt.Errorf("%w: step %v shorter than %v", ErrGrid, step, MinStep)
	}
	if !end.After(start) {
		return nil, fmt.Errorf("%w: end %v not after start %v", ErrGrid, end, start)
	}
	span := end.Sub(start)
	n64 := int64((span + step - 1) / step)
	if n64 > MaxGridSteps {
		return nil, fmt.Errorf("%w: %d steps, at most %d (coarser step or shorter interval)", ErrGrid, n64, MaxGridSteps)
	}
	n := int(n64)
	// One allocation per element type: a one-step grid (edge refinement
	// makes thousands) costs a handful of allocations, not two dozen.
	f := make([]float64, 16*n)
	col := func(k int) []float64 { return f[k*n : (k+1)*n : (k+1)*n] }
	v := make([]ephem.Vec3, 4*n)
	vcol := func(k int) []ephem.Vec3 { return v[k*n : (k+1)*n : (k+1)*n] }
	g := &Grid{Site: site, Start: start.UTC(), Step: step, N: n, Opts: opts,
		Snap: make([]ephem.Snapshot, n), Local: make([]ephem.Local, n),
		SunAlt: col(0), SunAz: col(1), SunDir: vcol(0), MoonDir: vcol(1), MoonAlt: col(2), MoonAz: col(3),
		MoonIllum: col(4), MoonPhase: col(5), MoonDistKm: col(6),
		Dark: make([]Darkness, n), sunHD: vcol(2), moonHD: vcol(3), Closed: make([]bool, n), clock: make([]time.Duration, n),
		localDay: make([]time.Time, n),
		last:     col(7), cosLAST: col(8), sinLAST: col(9),
		sunX: col(10), sunY: col(11), sunZ: col(12), moonX: col(13), moonY: col(14), moonZ: col(15)}
	if !opts.NoSkyBrightness {
		g.sky = make([]SkyStep, n)
	}
	loc := site.Location
	if loc == nil {
		loc = time.UTC
	}
	// The steps are independent: split them across goroutines in blocks
	// (a one-step grid for edge refinement stays on the caller's).
	forBlocks(n, gridBlock, 0, func(i0, i1 int) {
		for i := i0; i < i1; i++ {
			g.fillStep(i, snap, loc)
		}
	})
	return g, nil
}

// fillStep computes step i's shared quantities (newGrid's loop body).
func (g *Grid) fillStep(i int, snap func(ephem.Instant) ephem.Snapshot, loc *time.Location) {
	site := g.Site
	t := g.Time(i)
	g.Snap[i] = snap(ephem.NewInstant(t))
	g.Local[i] = g.Snap[i].Local(&site.Observer)
	l := &g.Local[i]
	sun, moon := l.SunPlace(), l.MoonPlace()
	g.SunAlt[i], g.SunAz[i], g.SunDir[i] = sun.Alt, sun.Az, sun.OfDate
	g.MoonAlt[i], g.MoonAz[i], g.MoonDir[i] = moon.AltApparent, moon.Az, moon.OfDate
	g.sunHD[i] = l.OfDateToHADec.MulVec(sun.OfDate)
	g.moonHD[i] = l.OfDateToHADec.MulVec(moon.OfDate)
	g.last[i] = l.LAST
	g.sinLAST[i], g.cosLAST[i] = math.Sincos(l.LAST)
	g.sunX[i], g.sunY[i], g.sunZ[i] = g.sunHD[i][0], g.sunHD[i][1], g.sunHD[i][2]
	g.moonX[i], g.moonY[i], g.moonZ[i] = g.moonHD[i][0], g.moonHD[i][1], g.moonHD[i][2]
	g.MoonIllum[i], _ = l.MoonIllumination()
	g.MoonPhase[i] = math.Acos(clamp(2*g.MoonIllum[i]-1, -1, 1))
	g.MoonDistKm[i] = l.MoonOfDate().Norm()
	g.Dark[i] = DarknessAt(sun.Alt * ephem.Rad2Deg)
	if g.sky != nil {
		g.sky[i] = NewSkyStep(site.Sky, sun.Alt, sun.Az, moon.AltApparent, moon.Az, g.MoonPhase[i], g.MoonDistKm[i])
	}
	lt := t.In(loc)
	y, m, d := lt.Date()
	g.localDay[i] = time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
	g.clock[i] = time.Duration(lt.Hour())*time.Hour + time.Duration(lt.Minute())*time.Minute +
		time.Duration(lt.Second())*time.Second
}

// Time returns the instant of step i.
func (g *Grid) Time(i int) time.Time { return g.Start.Add(time.Duration(i) * g.Step) }

// End returns the instant just after the last step's interval.
func (g *Grid) End() time.Time { return g.Time(g.N) }

// Index returns the step whose interval [Time(i), Time(i+1)) holds t,
// clamped to [0, N-1].
func (g *Grid) Index(t time.Time) int {
	i := int(t.Sub(g.Start) / g.Step)
	if t.Before(g.Start) {
		i = 0
	}
	if i >= g.N {
		i = g.N - 1
	}
	return i
}

// Close marks [from, to) as closed (weather, maintenance): every step whose
// interval overlaps it.
func (g *Grid) Close(from, to time.Time) {
	for i := 0; i < g.N; i++ {
		t0, t1 := g.Time(i), g.Time(i+1)
		if t0.Before(to) && t1.After(from) {
			g.Closed[i] = true
		}
	}
}

// clamp limits x to [lo, hi] (plain comparisons: math.Max/Min handle NaN and
// signed zeros at a cost the inner loops notice).
func clamp(x, lo, hi float64) float64 {
	if x < lo {
		return lo
	}
	if x > hi {
		return hi
	}
	return x
}
