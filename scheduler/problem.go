package scheduler

import (
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"
	"time"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// Input is everything one night's planning call needs.
type Input struct {
	Site *Site
	// Grid is the night's grid, built on Site.Site. Its Closed mask is
	// not used: closures come in Closures.
	Grid     *constraints.Grid
	Blocks   []Block
	Closures []Closure
	// Executed are runs already done tonight, in time order, with the
	// frames actually kept; they are added to Block.FramesDone.
	Executed []Assignment
	// From is the instant the plan starts (zero = the grid's start): no
	// overhead or run of the plan begins before it.
	From time.Time
	// Chances, if not nil, holds for every block the number of nights of
	// the lookahead (tonight included) with a window long enough for its
	// shortest run (see Lookahead); nil means no urgency.
	Chances []int
	Options Options
}

// Problem is a prepared night: tracks and visibility of every block and
// the solver's per-block tables. It is read-only once made and may be used
// by several solvers at once.
type Problem struct {
	Site     *Site
	Grid     *constraints.Grid
	Blocks   []Block
	Tracks   []*constraints.Track
	Vis      []*constraints.Visibility
	Closures []Closure
	Executed []Assignment
	From     time.Time
	// Urgency is the factor u of each block (package doc).
	Urgency []float64
	Chances []int
	Options Options

	step, quantum float64 // seconds
	n             int     // grid steps
	tEnd          float64 // end of the grid, seconds from its start
	tFrom         float64 // From, seconds from the grid's start
	closed        []bool
	closedNext    []int32 // first closed step at or after i (n if none)
	bd            []bdat
	anchor        anchor
	execStart     []float64       // start of each block's last executed run tonight (NaN if none)
	ax            []float32       // mount axes per block and step (precomputeAxes)
	keep          map[runKey]bool // replanning: runs of the old plan, not to be extended
	flip0, flip1  float64         // flip zone, radians of hour angle
	oh            ohSec
	maxSetup      float64
}

// ohSec is the overhead model in seconds.
type ohSec struct {
	r1, r2                                           float64 // deg/s
	settle, acq, filter, readout, dither, focus, flp float64
	focusEvery                                       float64
	focusOnFilter                                    bool
}

// bdat is one block's solver tables.
type bdat struct {
	exp, frame, dither float64 // seconds; frame = exposure + readout
	ditherEvery        int
	minRun, maxRun     int
	rem                int     // frames left at the plan's start
	w                  float64 // priority * urgency * exposure_s: value of one frame at quality 1
	bonus              float64
	filter             int
	q                  []float32
	bad                []int32 // first infeasible (or closed) step at or after i; n if none
	good               []int32 // first feasible step at or after i; n if none
	every, tol         float64 // cadence, seconds (every = 0: none)
	minSetup           float64
	peak               int // step of the best quality
}

// anchor is the mount's state when the plan starts.
type anchor struct {
	block   int     // last executed block, -1 = parked
	side    int8    // pier side at its end
	start   float64 // its start (focus period), seconds
	free    float64 // the mount is free from here
	focused bool    // a focus run has happened tonight
	filter  int     // -1 unknown
}

// NewProblem computes tracks and visibility (concurrently, with at most
// Options.Workers goroutines) and the solver's tables.
func NewProblem(in Input) (*Problem, error) {
	if err := checkInput(&in); err != nil {
		return nil, err
	}
	tracks, vis := visibilities(in.Grid, in.Blocks, in.Options.Workers)
	return newProblem(in, tracks, vis)
}

func checkInput(in *Input) error {
	if in.Site == nil || in.Site.Site == nil || in.Grid == nil {
		return fmt.Errorf("%w: site and grid are required", ErrInput)
	}
	if err := in.Site.Overheads.Validate(); err != nil {
		return err
	}
	ids := map[string]bool{}
	for i := range in.Blocks {
		b := &in.Blocks[i]
		if err := b.Validate(); err != nil {
			return err
		}
		if ids[b.ID] {
			return fmt.Errorf("%w: block id %q given twice", ErrBlock, b.ID)
		}
		ids[b.ID] = true
	}
	if in.Chances != nil && len(in.Chances) != len(in.Blocks) {
		return fmt.Errorf("%w: %d chances for %d blocks", ErrInput, len(in.Chances), len(in.Blocks))
	}
	return nil
}

// newProblem assembles a problem from precomputed tracks and visibility.
func newProblem(in Input, tracks []*constraints.Track, vis []*constraints.Visibility) (*Problem, error) {
	p := &Problem{Site: in.Site, Grid: in.Grid, Blocks: in.Blocks, Chances: in.Chances,
		Options: in.Options.withDefaults(), Tracks: tracks, Vis: vis}
	for i, tr := range p.Tracks {
		if tr == nil {
			return nil, fmt.Errorf("%w %q: %w", ErrBlock, in.Blocks[i].ID, constraints.ErrTarget)
		}
	}
	if err := p.prepare(in.Closures, in.Executed, in.From); err != nil {
		return nil, err
	}
	p.precomputeAxes()
	return p, nil
}

// visibilities samples every distinct target once and evaluates every
// block, on a bounded pool of workers.
func visibilities(g *constraints.Grid, blocks []Block, workers int) ([]*constraints.Track, []*constraints.Visibility) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	tracks := make([]*constraints.Track, len(blocks))
	vis := make([]*constraints.Visibility, len(blocks))
	first := map[*constraints.Target]int{}
	var uniq []int
	for i := range blocks {
		if _, ok := first[blocks[i].Target]; !ok {
			first[blocks[i].Target] = i
			uniq = append(uniq, i)
		}
	}
	parallel(len(uniq), workers, func(k int) {
		i := uniq[k]
		tracks[i], _ = g.Track(blocks[i].Target)
	})
	for i := range blocks {
		tracks[i] = tracks[first[blocks[i].Target]]
	}
	parallel(len(blocks), workers, func(i int) {
		if tracks[i] == nil {
			return
		}
		b := &blocks[i]
		vis[i] = g.Evaluate(tracks[i], constraints.Request{Set: b.Set, Exposure: b.Exposure, NonSidereal: b.NonSidereal})
	})
	return tracks, vis
}

// parallel runs f(0..n-1) on at most workers goroutines.
func parallel(n, workers int, f func(int)) {
	if workers > n {
		workers = n
	}
	if workers <= 1 {
		for i := 0; i < n; i++ {
			f(i)
		}
		return
	}
	var wg sync.WaitGroup
	next := make(chan int, workers)
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				f(i)
			}
		}()
	}
	for i := 0; i < n; i++ {
		next <- i
	}
	close(next)
	wg.Wait()
}

// prepare fills the tables that depend on closures, executed runs and the
// start instant.
func (p *Problem) prepare(closures []Closure, executed []Assignment, from time.Time) error {
	g := p.Grid
	p.Closures = append([]Closure(nil), closures...)
	p.Executed = append([]Assignment(nil), executed...)
	sort.Slice(p.Executed, func(i, j int) bool { return p.Executed[i].Start.Before(p.Executed[j].Start) })
	if from.IsZero() {
		from = g.Start
	}
	p.From = from
	p.step = g.Step.Seconds()
	p.quantum = p.Options.Quantum.Seconds()
	p.n = g.N
	p.tEnd = float64(g.N) * p.step
	p.tFrom = math.Max(0, p.rel(from))
	o := p.Site.Overheads
	p.oh = ohSec{r1: o.Axis1RateDegS, r2: o.Axis2RateDegS, settle: o.Settle.Seconds(), acq: o.Acquisition.Seconds(),
		filter: o.FilterChange.Seconds(), readout: o.Readout.Seconds(), dither: o.Dither.Seconds(),
		focus: o.Focus.Seconds(), flp: o.Flip.Seconds(), focusEvery: o.FocusEvery.Seconds(),
		focusOnFilter: o.FocusOnFilterChange}
	p.flip0 = p.Site.FlipStartHADeg * ephem.Deg2Rad
	p.flip1 = p.Site.FlipEndHADeg * ephem.Deg2Rad
	// The longest possible setup: a slew over the whole travel of both
	// axes, settling, a filter change, focus and acquisition.
	p.maxSetup = math.Max(360/p.oh.r1, 360/p.oh.r2) + p.oh.settle + p.oh.filter + p.oh.focus + p.oh.acq

	p.closed = make([]bool, p.n)
	for _, c := range p.Closures {
		if !c.End.After(c.Start) {
			return fmt.Errorf("%w: closure %v..%v is empty", ErrInput, c.Start, c.End)
		}
		a, b := p.rel(c.Start), p.rel(c.End)
		for i := max(0, int(math.Floor(a/p.step))); i < p.n && float64(i)*p.step < b; i++ {
			if float64(i+1)*p.step > a {
				p.closed[i] = true
			}
		}
	}
	p.closedNext = make([]int32, p.n+1)
	p.closedNext[p.n] = int32(p.n)
	for i := p.n - 1; i >= 0; i-- {
		if p.closed[i] {
			p.closedNext[i] = int32(i)
		} else {
			p.closedNext[i] = p.closedNext[i+1]
		}
	}

	filters := map[string]int{}
	fid := func(f string) int {
		if id, ok := filters[f]; ok {
			return id
		}
		filters[f] = len(filters)
		return len(filters) - 1
	}
	done := make([]int, len(p.Blocks))
	for _, a := range p.Executed {
		if a.Block < 0 || a.Block >= len(p.Blocks) || p.Blocks[a.Block].ID != a.ID {
			return fmt.Errorf("%w: executed run of unknown block %d %q", ErrInput, a.Block, a.ID)
		}
		done[a.Block] += a.Frames
	}
	p.bd = make([]bdat, len(p.Blocks))
	p.Urgency = make([]float64, len(p.Blocks))
	for i := range p.Blocks {
		b := &p.Blocks[i]
		d := &p.bd[i]
		d.exp = b.Exposure.Seconds()
		d.frame = d.exp + p.oh.readout
		d.dither = p.oh.dither
		d.ditherEvery = b.DitherEvery
		d.minRun = max(1, b.MinRun)
		d.maxRun = b.MaxRun
		if d.maxRun == 0 {
			d.maxRun = math.MaxInt32
		}
		d.rem = max(0, b.FramesWanted-b.FramesDone-done[i])
		d.filter = fid(b.Filter)
		if b.Cadence != nil {
			d.every, d.tol = b.Cadence.Every.Seconds(), b.Cadence.Tolerance.Seconds()
		}
		d.minSetup = p.oh.settle + p.oh.acq
		u := 1.0
		switch {
		case b.Cadence != nil:
			// Each cadence slot has one chance, tonight's: a missed point of
			// a light curve is lost for good, so cadence runs count at the
			// full urgency whatever later nights offer.
			u = 1 + p.Options.UrgencyWeight
		case p.Chances != nil:
			u = urgency(p.Options.UrgencyWeight, d.rem, d.maxRun, p.Chances[i])
		}
		p.Urgency[i] = u
		d.w = b.Priority * d.exp * u
		if d.rem > 0 {
			d.bonus = p.Options.CompletionBonus * d.w * float64(b.FramesWanted)
		}
		v := p.Vis[i]
		d.q = v.Quality
		d.bad = make([]int32, p.n+1)
		d.good = make([]int32, p.n+1)
		d.bad[p.n], d.good[p.n] = int32(p.n), int32(p.n)
		for s := range d.q {
			if d.q[s] > d.q[d.peak] && !p.closed[s] {
				d.peak = s
			}
		}
		for s := p.n - 1; s >= 0; s-- {
			if v.Reason[s] != constraints.OK || p.closed[s] {
				d.bad[s] = int32(s)
				d.good[s] = d.good[s+1]
			} else {
				d.bad[s] = d.bad[s+1]
				d.good[s] = int32(s)
			}
		}
	}

	p.execStart = make([]float64, len(p.Blocks))
	for i := range p.execStart {
		p.execStart[i] = math.NaN()
	}
	for _, a := range p.Executed {
		p.execStart[a.Block] = p.rel(a.Start)
	}
	p.anchor = anchor{block: -1, free: p.tFrom, filter: -1}
	if k := len(p.Executed); k > 0 {
		last := p.Executed[k-1]
		p.anchor.block = last.Block
		p.anchor.start = p.rel(last.Start)
		p.anchor.free = math.Max(p.tFrom, p.rel(last.End))
		p.anchor.side = sideEast
		if last.Pointing.PierWest || !last.Flip.IsZero() {
			p.anchor.side = sideWest
		}
		p.anchor.filter = p.bd[last.Block].filter
		p.anchor.focused = true
	}
	return nil
}

// WithState returns a copy of p for replanning: the same tracks and
// visibility with new closures, executed runs and start instant.
func (p *Problem) WithState(closures []Closure, executed []Assignment, from time.Time) (*Problem, error) {
	q := *p
	if err := q.prepare(closures, executed, from); err != nil {
		return nil, err
	}
	return &q, nil
}

// rel converts an instant to seconds from the grid's start.
func (p *Problem) rel(t time.Time) float64 { return t.Sub(p.Grid.Start).Seconds() }

// abs converts seconds from the grid's start to an instant (rounded to the
// nanosecond).
func (p *Problem) abs(x float64) time.Time {
	return p.Grid.Start.Add(time.Duration(math.Round(x * 1e9)))
}

// stepAt is the grid step holding x (clamped).
func (p *Problem) stepAt(x float64) int {
	i := int(math.Floor(x / p.step))
	if i < 0 {
		return 0
	}
	if i >= p.n {
		return p.n - 1
	}
	return i
}

// lastStep is the last step that an interval ending at x (exclusive) covers.
func (p *Problem) lastStep(x float64) int {
	i := int(math.Ceil(x/p.step)) - 1
	if i >= p.n {
		return p.n - 1
	}
	return i
}

// ceilQ rounds x up to the quantum.
func (p *Problem) ceilQ(x float64) float64 {
	k := math.Ceil(x/p.quantum - 1e-9)
	return k * p.quantum
}

// floorQ rounds x down to the quantum.
func (p *Problem) floorQ(x float64) float64 {
	return math.Floor(x/p.quantum+1e-9) * p.quantum
}
