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
	// Programs are the allocations of the blocks' programs (Block.Program).
	Programs []Program
	Options  Options
}

// Problem is a prepared night: tracks and visibility of every block and
// the solver's per-block tables. It is read-only once made and may be used
// by several solvers at once.
type Problem struct {
	Site   *Site
	Grid   *constraints.Grid
	Blocks []Block
	Tracks []*constraints.Track
	Vis    []*constraints.Visibility
	// Intervals are each block's observable time, continuous (every
	// instant checked or certified, constraints.Grid.Intervals), before
	// closures. Runs must lie inside one of them.
	Intervals [][]constraints.Interval
	Closures  []Closure
	Executed  []Assignment
	From      time.Time
	// Urgency is the factor u of each block (package doc).
	Urgency []float64
	Chances []int
	// Programs and Share: the programs and each block's fair-share factor.
	Programs []Program
	Share    []float64
	Options  Options

	step, quantum float64   // seconds
	n             int       // grid steps
	tEnd          float64   // end of the grid, seconds from its start
	tFrom         float64   // From, seconds from the grid's start
	closed        []bool    // steps that overlap a closure (explanations and bounds)
	cl            []float64 // merged closures, pairs of seconds from the grid's start
	bd            []bdat
	anchor        anchor
	execStart     []float64       // start of each block's last executed run tonight (NaN if none)
	ax            *axesTable      // mount axes per block and step, made on use
	keep          map[runKey]bool // replanning: runs of the old plan, not to be extended
	flip0, flip1  float64         // flip zone, radians of hour angle
	oh            ohSec
	maxSetup      float64
	// annealHook, when set (tests), sees each iteration's temperature as
	// a fraction of the starting one and whether time clocks it.
	annealHook func(temp float64, timed bool)
}

// ohSec is the overhead model in seconds.
type ohSec struct {
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
	// iv holds the block's observable intervals less closures, as pairs
	// of seconds from the grid's start (sorted, disjoint); ivAt[i] is the
	// first pair that ends after step i's start.
	iv   []float64
	ivAt []int32
	// bad and good describe the steps for the bounds: a step is good when
	// an interval overlaps it. bad[i] is the first step at or after i that
	// is not good, good[i] the first good one (n if none).
	bad  []int32
	good []int32
	// qc[c] is the best quality of steps c*qChunk .. (c+1)*qChunk-1
	// (upper bounds in repair's lazy evaluation).
	qc         []float32
	every, tol float64 // cadence, seconds (every = 0: none)
	point      float64 // value of one cadence point (run), 0 without cadence
	avoidFlip  bool    // the block avoids the flip zone: no flip inside a run
	moving     bool    // the target moves against the stars
	minSetup   float64
	peak       int // step of the best quality
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
	tracks, vis := visibilities(in.Grid, in.Blocks, in.Options.Workers, in.Options.Cancel)
	if cancelled(in.Options.Cancel) {
		return nil, ErrCancelled
	}
	return newProblem(in, tracks, vis, nil)
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
// newProblem builds the problem from the blocks' tracks and visibility and,
// when intervals is not nil, their continuous intervals (blockIntervals;
// Horizon computes them ahead with the tracks).
func newProblem(in Input, tracks []*constraints.Track, vis []*constraints.Visibility, intervals [][]constraints.Interval) (*Problem, error) {
	p := &Problem{Site: in.Site, Grid: in.Grid, Blocks: in.Blocks, Chances: in.Chances, Programs: in.Programs,
		Options: in.Options.withDefaults(), Tracks: tracks, Vis: vis}
	for i, tr := range p.Tracks {
		if tr == nil {
			return nil, fmt.Errorf("%w %q: %w", ErrBlock, in.Blocks[i].ID, constraints.ErrTarget)
		}
	}
	if cancelled(p.Options.Cancel) {
		return nil, ErrCancelled
	}
	for i, v := range p.Vis {
		if v == nil {
			return nil, fmt.Errorf("%w %q: no visibility", ErrBlock, in.Blocks[i].ID)
		}
	}
	p.Intervals = intervals
	if p.Intervals == nil {
		p.Intervals = blockIntervals(p.Grid, p.Blocks, p.Tracks, p.Vis, p.Options.Workers, p.Options.Cancel)
	}
	if cancelled(p.Options.Cancel) {
		return nil, ErrCancelled
	}
	if err := p.prepare(in.Closures, in.Executed, in.From); err != nil {
		return nil, err
	}
	p.precomputeAxes()
	return p, nil
}

// blockIntervals refines every block's windows into continuous intervals
// (constraints.Grid.Intervals) on workers goroutines (GOMAXPROCS when
// workers <= 0).
func blockIntervals(g *constraints.Grid, blocks []Block, tracks []*constraints.Track, vis []*constraints.Visibility, workers int, cancel <-chan struct{}) [][]constraints.Interval {
	iv := make([][]constraints.Interval, len(blocks))
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	parallel(len(blocks), workers, func(i int) {
		if cancelled(cancel) {
			return
		}
		b := &blocks[i]
		iv[i] = g.Intervals(tracks[i], constraints.Request{Set: b.Set, Exposure: b.Exposure, NonSidereal: b.NonSidereal}, vis[i])
	})
	return iv
}

// visibilities samples every distinct target once and evaluates every
// block, on a bounded pool of workers.
func visibilities(g *constraints.Grid, blocks []Block, workers int, cancel <-chan struct{}) ([]*constraints.Track, []*constraints.Visibility) {
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
	// One call: fixed targets' tracks share one allocation, targets split
	// across the workers (constraints.Grid.TrackAll).
	targets := make([]*constraints.Target, len(uniq))
	for k, i := range uniq {
		targets[k] = blocks[i].Target
	}
	if !cancelled(cancel) {
		ts, _ := g.TrackAll(targets, workers)
		for k, i := range uniq {
			tracks[i] = ts[k]
		}
	}
	for i := range blocks {
		tracks[i] = tracks[first[blocks[i].Target]]
	}
	if cancelled(cancel) {
		return tracks, vis
	}
	// One call too: a night's blocks take a few milliseconds here, and
	// visibilities come in one allocation per chunk of blocks.
	reqs := make([]constraints.Request, len(blocks))
	for i := range blocks {
		b := &blocks[i]
		reqs[i] = constraints.Request{Set: b.Set, Exposure: b.Exposure, NonSidereal: b.NonSidereal}
	}
	return tracks, g.EvaluateAll(tracks, reqs, workers)
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
	p.oh = ohSec{settle: o.Settle.Seconds(), acq: o.Acquisition.Seconds(),
		filter: o.FilterChange.Seconds(), readout: o.Readout.Seconds(), dither: o.Dither.Seconds(),
		focus: o.Focus.Seconds(), flp: o.Flip.Seconds(), focusEvery: o.FocusEvery.Seconds(),
		focusOnFilter: o.FocusOnFilterChange}
	p.flip0 = p.Site.FlipStartHADeg * ephem.Deg2Rad
	p.flip1 = p.Site.FlipEndHADeg * ephem.Deg2Rad
	// The longest possible setup: a slew over the whole travel of both
	// axes, settling, a filter change, focus and acquisition.
	p.maxSetup = math.Max(AxisSeconds(360, o.Axis1RateDegS, o.Axis1AccelDegS2), AxisSeconds(360, o.Axis2RateDegS, o.Axis2AccelDegS2)) +
		p.oh.settle + p.oh.filter + p.oh.focus + p.oh.acq

	p.closed = make([]bool, p.n)
	p.cl = p.cl[:0:0]
	cs := append([]Closure(nil), p.Closures...)
	sort.Slice(cs, func(i, j int) bool { return cs[i].Start.Before(cs[j].Start) })
	for _, c := range cs {
		if !c.End.After(c.Start) {
			return fmt.Errorf("%w: closure %v..%v is empty", ErrInput, c.Start, c.End)
		}
		a, b := p.rel(c.Start), p.rel(c.End)
		if k := len(p.cl); k > 0 && a <= p.cl[k-1] {
			p.cl[k-1] = math.Max(p.cl[k-1], b)
		} else {
			p.cl = append(p.cl, a, b)
		}
		for i := max(0, int(math.Floor(a/p.step))); i < p.n && float64(i)*p.step < b; i++ {
			if float64(i+1)*p.step > a {
				p.closed[i] = true
			}
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
	p.Share = make([]float64, len(p.Blocks))
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
		d.avoidFlip = b.Set != nil && b.Set.AvoidFlipZone
		d.moving = b.Target.Moving()
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
		p.Share[i] = p.fairShare(b.Program)
		d.w = b.Priority * d.exp * u * p.Share[i]
		if d.every > 0 {
			// A point of a light curve is worth more than its exposure:
			// CadenceWeight times a shortest run's weighted exposure.
			d.point = p.Options.CadenceWeight * d.w * float64(d.minRun)
		}
		if d.rem > 0 {
			// The frames left, not the whole block: one frame of a hundred left
			// earns a hundredth of a whole block's bonus.
			d.bonus = p.Options.CompletionBonus * d.w * float64(d.rem)
		}
		p.blockIntervals(i)
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

// fairShare is the fair-share factor of a program (package doc): above 1
// for a program under its allocation, below 1 over it, 1 without a
// program or an allocation.
func (p *Problem) fairShare(name string) float64 {
	if name == "" || p.Options.FairShareWeight == 0 {
		return 1
	}
	for _, pr := range p.Programs {
		if pr.Name == name && pr.Allocation > 0 {
			f := 1 + p.Options.FairShareWeight*(1-pr.Used.Seconds()/pr.Allocation.Seconds())
			return math.Min(fairShareMax, math.Max(fairShareMin, f))
		}
	}
	return 1
}

// Bounds of the fair-share factor: a program far over its allocation still
// gets a quarter of its value (its blocks run when nothing else can), one
// far under it at most twice.
const (
	fairShareMin = 0.25
	fairShareMax = 2
)

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

// blockIntervals fills block b's intervals less closures, the step tables
// of the bounds, its quality table and its best step.
func (p *Problem) blockIntervals(b int) {
	d := &p.bd[b]
	d.iv = d.iv[:0:0]
	for _, x := range p.Intervals[b] {
		d.iv = subtractClosures(d.iv, p.rel(x.Start), p.rel(x.End), p.cl)
	}
	d.ivAt = make([]int32, p.n+1)
	k := 0
	for i := 0; i <= p.n; i++ {
		for k < len(d.iv)/2 && d.iv[2*k+1] <= float64(i)*p.step {
			k++
		}
		d.ivAt[i] = int32(k)
	}
	d.bad = make([]int32, p.n+1)
	d.good = make([]int32, p.n+1)
	d.bad[p.n], d.good[p.n] = int32(p.n), int32(p.n)
	goodStep := make([]bool, p.n)
	for k := 0; k < len(d.iv); k += 2 {
		for i := max(0, int(d.iv[k]/p.step)); i < p.n && float64(i)*p.step < d.iv[k+1]; i++ {
			goodStep[i] = true
		}
	}
	for s := p.n - 1; s >= 0; s-- {
		if !goodStep[s] {
			d.bad[s] = int32(s)
			d.good[s] = d.good[s+1]
		} else {
			d.bad[s] = d.bad[s+1]
			d.good[s] = int32(s)
		}
	}
	// Quality: the grid's where the sample is observable; a step that an
	// interval reaches into past a failing sample takes its neighbour's.
	q := p.Vis[b].Quality
	d.q = q
	for s := 0; s < p.n; s++ {
		if goodStep[s] && q[s] == 0 {
			if &d.q[0] == &q[0] {
				d.q = append([]float32(nil), q...)
			}
			if s > 0 {
				d.q[s] = q[s-1]
			}
			if s+1 < p.n && q[s+1] > d.q[s] {
				d.q[s] = q[s+1]
			}
		}
	}
	d.qc = make([]float32, (p.n+qChunk-1)/qChunk)
	for s, q := range d.q {
		d.qc[s/qChunk] = max(d.qc[s/qChunk], q)
	}
	d.peak = 0
	for s := range d.q {
		if goodStep[s] && (!goodStep[d.peak] || d.q[s] > d.q[d.peak]) {
			d.peak = s
		}
	}
}

// qChunk is the number of grid steps per entry of bdat.qc.
const qChunk = 8

// subtractClosures appends [a, b) less the merged closures cl to xs.
func subtractClosures(xs []float64, a, b float64, cl []float64) []float64 {
	for k := 0; k < len(cl) && a < b; k += 2 {
		c0, c1 := cl[k], cl[k+1]
		if c1 <= a || c0 >= b {
			continue
		}
		if c0 > a {
			xs = append(xs, a, c0)
		}
		a = math.Max(a, c1)
	}
	if a < b {
		xs = append(xs, a, b)
	}
	return xs
}

// ivFrom is the index of block d's first interval that ends after x.
func (p *Problem) ivFrom(d *bdat, x float64) int {
	i := int(math.Floor(x / p.step))
	switch {
	case i < 0:
		i = 0
	case i > p.n:
		i = p.n
	}
	k := int(d.ivAt[i])
	for k < len(d.iv)/2 && d.iv[2*k+1] <= x {
		k++
	}
	return k
}

// ivEnd is the end of block b's interval holding x (seconds), or -1 when x
// is not observable.
func (p *Problem) ivEnd(b int, x float64) float64 {
	d := &p.bd[b]
	k := p.ivFrom(d, x)
	if k < len(d.iv)/2 && d.iv[2*k] <= x+1e-9 {
		return d.iv[2*k+1]
	}
	return -1
}

// ivNext is the first observable instant of block b at or after x, +Inf
// when there is none.
func (p *Problem) ivNext(b int, x float64) float64 {
	d := &p.bd[b]
	k := p.ivFrom(d, x)
	if k >= len(d.iv)/2 {
		return math.Inf(1)
	}
	return math.Max(x, d.iv[2*k])
}

// closureIn returns the end of the last merged closure that overlaps
// [a, b), or -1 when none does.
func (p *Problem) closureIn(a, b float64) float64 {
	end := -1.0
	for k := 0; k < len(p.cl); k += 2 {
		if p.cl[k] < b && p.cl[k+1] > a {
			end = p.cl[k+1]
		}
	}
	return end
}
