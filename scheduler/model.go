package scheduler

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// Overheads is a site's overhead model: every second a telescope spends not
// exposing. Durations are wall-clock time; rates are degrees per second of
// mechanical axis travel.
type Overheads struct {
	// Axis1RateDegS and Axis2RateDegS are the slew rates of the two mount
	// axes: hour angle and declination for equatorial mounts, azimuth and
	// altitude for alt-azimuth ones. A slew lasts as long as the slower
	// axis needs (both move at once).
	Axis1RateDegS, Axis2RateDegS float64
	// Axis1AccelDegS2 and Axis2AccelDegS2 are each axis's acceleration
	// and deceleration (deg/s^2): a slew is a trapezoidal speed profile,
	// or a triangle for short moves (AxisSeconds); 0 means the rate is
	// reached at once.
	Axis1AccelDegS2, Axis2AccelDegS2 float64
	// Settle follows every slew, before the camera may expose.
	Settle time.Duration
	// Acquisition is the time to take a pointing frame and centre the
	// target after a slew (and after a meridian flip, inside Flip).
	Acquisition time.Duration
	// FilterChange moves the filter wheel; it runs during the slew, so only
	// its excess over slew + settle costs time.
	FilterChange time.Duration
	// Readout follows every exposure.
	Readout time.Duration
	// Dither moves the mount a few pixels and settles, after every
	// Block.DitherEvery frames.
	Dither time.Duration
	// Focus is one focus run. It happens before a run, after the filter
	// wheel and before acquisition: before the first run of a plan, on a
	// filter change when FocusOnFilterChange is set, and before the first
	// run that starts in each new FocusEvery period (counted from the start
	// of the night's grid); FocusEvery = 0 turns the periodic focus off.
	Focus               time.Duration
	FocusEvery          time.Duration
	FocusOnFilterChange bool
	// Flip is the time a german equatorial mount needs to flip at the
	// meridian inside a run: the slew to the other side of the pier,
	// settling and re-acquisition.
	Flip time.Duration
}

// DefaultOverheads returns values typical of a small robotic observatory
// (common practice, no published source): 4 deg/s on both axes reached at
// 2 deg/s^2, 5 s settle,
// 30 s acquisition, 10 s filter change, 4 s readout, 8 s dither, a 90 s
// focus run every hour and on filter changes, and a 150 s meridian flip.
func DefaultOverheads() Overheads {
	return Overheads{Axis1RateDegS: 4, Axis2RateDegS: 4, Axis1AccelDegS2: 2, Axis2AccelDegS2: 2, Settle: 5 * time.Second,
		Acquisition: 30 * time.Second, FilterChange: 10 * time.Second, Readout: 4 * time.Second,
		Dither: 8 * time.Second, Focus: 90 * time.Second, FocusEvery: time.Hour,
		FocusOnFilterChange: true, Flip: 150 * time.Second}
}

// Site is a telescope at a place: what constraint evaluation needs (the
// embedded constraints.Site: observer, horizon, sky, solar-avoidance floor,
// mount kind, flip zone, pixel scale) plus the overhead model.
type Site struct {
	*constraints.Site
	Overheads
}

// Cadence asks for one run every Every, plus or minus Tolerance. Within one
// night the runs of a cadence block form one series: consecutive runs start
// a whole number of Every apart, within Tolerance (a series may skip
// slots). The series may begin and end at any time; each run is a point
// (package doc).
type Cadence struct {
	Every, Tolerance time.Duration
}

// Block is one imaging block: a target observed through one filter in
// frames of one exposure length, under a constraint set.
type Block struct {
	ID     string
	Target *constraints.Target
	Filter string
	// Exposure is the length of one frame's exposure (readout is the
	// site's).
	Exposure time.Duration
	// FramesWanted is the total asked for; FramesDone those already kept
	// before this plan (frames of Input.Executed come on top).
	FramesWanted, FramesDone int
	// MinRun and MaxRun bound a run, in frames: MinRun is the shortest
	// useful run (a shorter one is allowed only when it completes the
	// block), MaxRun the longest (0 = no limit). MinRun 0 means 1.
	MinRun, MaxRun int
	// DitherEvery dithers after every so many frames within a run (0 =
	// never).
	DitherEvery int
	// Priority weighs the block's exposure time in the objective (> 0).
	Priority float64
	// Set is the constraint set (nil = none beyond the site's floor).
	Set *constraints.Set
	// NonSidereal tracks a moving target at its own rate (no trailing
	// limit).
	NonSidereal bool
	// Cadence, when set, asks for a regular series of runs.
	Cadence *Cadence
	// Program names whose time the block spends (Input.Programs); empty
	// means none (no fair-share factor).
	Program string
}

// Program is whose time blocks spend on a shared telescope (a student's
// project, a member's share, a network partner): its allocation for the
// period and the time already charged to it in the period before this
// plan.
type Program struct {
	Name       string
	Allocation time.Duration
	Used       time.Duration
}

// Charge is the time a plan charges to one program: the exposure of its
// runs and the overheads spent for them (the setup before each run, and
// the readouts, dithers and flips inside it). Program "" gathers blocks
// without a program.
type Charge struct {
	Program    string
	Allocation time.Duration // 0 for "" and unknown programs
	Used       time.Duration // before the plan
	Exposure   time.Duration
	Overheads  time.Duration
	// Share is the fair-share factor applied to the program's blocks.
	Share float64
}

// Closure is an interval when the site cannot observe (weather,
// maintenance). No run and no overhead before a run may overlap it.
type Closure struct {
	Start, End time.Time
	Note       string
}

// Options tune the solvers. A zero field takes the default given beside it.
type Options struct {
	// Quantum is the resolution of run starts: every run starts a whole
	// number of quanta after the grid's start, and the mount is free again
	// at the first quantum boundary after a run ends. Default 10 s.
	Quantum time.Duration
	// CompletionBonus is the bonus for completing a block, as a fraction of
	// the block's full weighted exposure (see the package doc). Default
	// 0.25; negative means no bonus.
	CompletionBonus float64
	// UrgencyWeight is lambda in the urgency factor (package doc). Default
	// 1; negative means no urgency.
	UrgencyWeight float64
	// Seed makes the large-neighbourhood search reproducible.
	Seed uint64
	// Iterations of the large-neighbourhood search. Default 1500.
	Iterations int
	// Cancel, when closed, stops the preparation and the search as soon
	// as they notice (within one iteration or one block's evaluation):
	// the plan is then the best found so far, Plan.Stopped says
	// StopCancelled, and callers that cancelled discard it.
	Cancel <-chan struct{}
	// Budget stops the search early when exceeded. Default 250 ms;
	// negative means no time limit. The result is deterministic for a seed
	// as long as Iterations, not Budget, ends the search. When the pace of
	// the first iterations shows that the budget will end the search, the
	// annealing cools by elapsed time instead of by iterations, so that a
	// budget-limited search ends cold.
	Budget time.Duration
	// ConvergeIterations ends the search early (Plan.Stopped =
	// StopConverged) when a cooling cycle ends and the best plan has not
	// improved by more than ConvergeTolerance (relative) for this many
	// iterations, and, when the annealing is clocked by time, for a tenth
	// of the budget as well: the budget is then a ceiling, not a cost.
	// Default 1000 (two cooling cycles of the default 1500 iterations);
	// negative means never.
	ConvergeIterations int
	// FairShareWeight is lambda_f of the fair-share factor of a block's
	// program (package doc): f = clamp(1 + lambda_f (1 - used /
	// allocation), 0.25, 2). Default 0.5; negative means no fair share.
	FairShareWeight float64
	// ConvergeTolerance is the relative improvement that counts for
	// ConvergeIterations. Default 1e-4 (0.01 %).
	ConvergeTolerance float64
	// Workers bounds the goroutines that compute tracks and visibility
	// (default GOMAXPROCS).
	Workers int
	// LookaheadNights is N of the urgency lookahead. Default 14.
	LookaheadNights int
	// CadenceWeight values each run of a cadence block (a point of its
	// series, delivered in its slot) at this many times the weighted
	// exposure of its shortest run, on top of the frames' own value (package
	// doc): a missed slot costs more than its exposure seconds. Default 3;
	// negative means points are worth their frames only.
	CadenceWeight float64
	// KeepBonus is the stability term of Replan: the fraction of a run's
	// value added for keeping an assignment of the old plan unchanged, so
	// that a still-feasible run moves only when the change gains more.
	// Default 0.5 (at 0.1 the demo's replan kept 1 of the old plan's 12
	// later runs); negative means none.
	KeepBonus float64
}

// Option defaults.
const (
	DefaultQuantum         = 10 * time.Second
	DefaultCompletionBonus = 0.25
	DefaultUrgencyWeight   = 1.0
	DefaultIterations      = 1500
	DefaultBudget          = 250 * time.Millisecond
	DefaultLookaheadNights = 14
	DefaultKeepBonus       = 0.5
	DefaultCadenceWeight   = 3.0
	DefaultFairShareWeight = 0.5
	DefaultConvergeIters   = 1000
	DefaultConvergeTol     = 1e-4
)

func (o Options) withDefaults() Options {
	if o.Quantum <= 0 {
		o.Quantum = DefaultQuantum
	}
	switch {
	case o.CompletionBonus == 0:
		o.CompletionBonus = DefaultCompletionBonus
	case o.CompletionBonus < 0:
		o.CompletionBonus = 0
	}
	switch {
	case o.UrgencyWeight == 0:
		o.UrgencyWeight = DefaultUrgencyWeight
	case o.UrgencyWeight < 0:
		o.UrgencyWeight = 0
	}
	if o.Iterations <= 0 {
		o.Iterations = DefaultIterations
	}
	if o.Budget == 0 {
		o.Budget = DefaultBudget
	}
	switch {
	case o.KeepBonus == 0:
		o.KeepBonus = DefaultKeepBonus
	case o.KeepBonus < 0:
		o.KeepBonus = 0
	}
	if o.LookaheadNights <= 0 {
		o.LookaheadNights = DefaultLookaheadNights
	}
	switch {
	case o.FairShareWeight == 0:
		o.FairShareWeight = DefaultFairShareWeight
	case o.FairShareWeight < 0:
		o.FairShareWeight = 0
	}
	switch {
	case o.CadenceWeight == 0:
		o.CadenceWeight = DefaultCadenceWeight
	case o.CadenceWeight < 0:
		o.CadenceWeight = 0
	}
	switch {
	case o.ConvergeIterations == 0:
		o.ConvergeIterations = DefaultConvergeIters
	case o.ConvergeIterations < 0:
		o.ConvergeIterations = 0
	}
	if !(o.ConvergeTolerance > 0) {
		o.ConvergeTolerance = DefaultConvergeTol
	}
	return o
}

// Errors.
var (
	ErrBlock     = errors.New("scheduler: invalid block")
	ErrOverheads = errors.New("scheduler: invalid overhead model")
	ErrInput     = errors.New("scheduler: invalid input")
	ErrTooLarge  = errors.New("scheduler: instance too large for the exact solver")
	ErrNoLP      = errors.New("scheduler: linear program failed")
	// ErrCancelled: Options.Cancel was closed while the problem was
	// being prepared.
	ErrCancelled = errors.New("scheduler: cancelled")
)

// Validate checks the overhead model.
func (o *Overheads) Validate() error {
	if !(o.Axis1RateDegS > 0 && o.Axis2RateDegS > 0) || math.IsInf(o.Axis1RateDegS, 0) || math.IsInf(o.Axis2RateDegS, 0) {
		return fmt.Errorf("%w: slew rates %v, %v deg/s must be positive", ErrOverheads, o.Axis1RateDegS, o.Axis2RateDegS)
	}
	if !(o.Axis1AccelDegS2 >= 0 && o.Axis2AccelDegS2 >= 0) || math.IsInf(o.Axis1AccelDegS2, 0) || math.IsInf(o.Axis2AccelDegS2, 0) {
		return fmt.Errorf("%w: accelerations %v, %v deg/s^2 must be >= 0", ErrOverheads, o.Axis1AccelDegS2, o.Axis2AccelDegS2)
	}
	for _, d := range []time.Duration{o.Settle, o.Acquisition, o.FilterChange, o.Readout, o.Dither, o.Focus, o.FocusEvery, o.Flip} {
		if d < 0 {
			return fmt.Errorf("%w: negative duration %v", ErrOverheads, d)
		}
	}
	return nil
}

// Validate checks a block's own fields (the constraint set included).
func (b *Block) Validate() error {
	bad := func(field string, v any) error { return fmt.Errorf("%w %q: %s = %v", ErrBlock, b.ID, field, v) }
	switch {
	case b.Target == nil:
		return bad("target", nil)
	case b.Exposure <= 0:
		return bad("exposure", b.Exposure)
	case b.FramesWanted < 0:
		return bad("frames_wanted", b.FramesWanted)
	case b.FramesDone < 0:
		return bad("frames_done", b.FramesDone)
	case b.MinRun < 0:
		return bad("min_run", b.MinRun)
	case b.MaxRun < 0 || b.MaxRun != 0 && b.MaxRun < b.MinRun:
		return bad("max_run", b.MaxRun)
	case b.DitherEvery < 0:
		return bad("dither_every", b.DitherEvery)
	case !(b.Priority > 0) || math.IsInf(b.Priority, 0):
		return bad("priority", b.Priority)
	case b.Cadence != nil && (b.Cadence.Every <= 0 || b.Cadence.Tolerance < 0 || b.Cadence.Tolerance >= b.Cadence.Every):
		return bad("cadence", *b.Cadence)
	}
	if b.Set != nil {
		if err := b.Set.Validate(); err != nil {
			return fmt.Errorf("%w %q: %w", ErrBlock, b.ID, err)
		}
	}
	return nil
}

// Plan is one version of the schedule of one site over one interval.
type Plan struct {
	// Start and End bound the planned interval (Start is Input.From).
	Start, End time.Time
	// Assignments in time order; executed ones (Executed true) first.
	Assignments []Assignment
	// Unplaced lists every block with frames left that got no run.
	Unplaced []Unplaced
	// Cadence reports, per cadence block with a run, the points delivered
	// and every slot skipped, with the reason.
	Cadence []CadenceReport
	// Charged is the time the plan's runs charge to each program (blocks
	// without one under ""), in the order of Input.Programs, "" last.
	// Exposure plus overheads over all entries equals the plan's.
	Charged   []Charge
	Objective Objective
	// Solver names the algorithm that made the plan.
	Solver string
	// Iterations of improvement run (large-neighbourhood search).
	Iterations int
	// Stopped says what ended the search: StopIterations, StopBudget,
	// StopConverged or StopCancelled ("" for solvers without a search).
	Stopped string
}

// What ended a search (Plan.Stopped).
const (
	StopIterations = "iterations"
	StopBudget     = "time budget"
	StopCancelled  = "cancelled"
	// StopConverged: no improvement worth keeping for a stretch of the
	// search (Options.ConvergeIterations).
	StopConverged = "converged"
)

// cancelled reports whether ch is closed (a nil channel never is).
func cancelled(ch <-chan struct{}) bool {
	select {
	case <-ch:
		return true
	default:
		return false
	}
}

// Assignment is one run of one block.
type Assignment struct {
	Block int    // index into Problem.Blocks
	ID    string // the block's ID
	// Start is the start of the first exposure, End the end of the last
	// readout; the overheads before the run lie before Start.
	Start, End time.Time
	Frames     int
	// FrameStarts holds the start of each exposure.
	FrameStarts []time.Time
	// Flip is the start of a meridian flip inside the run (zero if none);
	// the flip comes before frame FlipBefore.
	Flip       time.Time
	FlipBefore int
	Pointing   Pointing
	Conditions Conditions
	// Spent is the overhead spent between the previous run's end (or the
	// plan start) and Start.
	Spent    Spent
	Executed bool
	// Value is the run's weighted exposure (package doc) plus, for a
	// cadence block, the value of the point it delivers; without the
	// completion bonus.
	Value float64
}

// Pointing is where the telescope points when a run starts.
type Pointing struct {
	HADeg, DecDeg    float64 // apparent hour angle (east negative) and declination of date
	RADeg            float64 // apparent right ascension of date, [0, 360)
	AltDeg, AzDeg    float64 // apparent altitude, azimuth from north through east
	PierWest         bool    // german equatorial: the run starts on the west side (past the flip zone's start)
	RateRAArcsecMin  float64 // moving targets: RA*cos(dec) rate, arcsec/min
	RateDecArcsecMin float64
}

// Conditions are the predicted conditions of a run.
type Conditions struct {
	AirmassStart, AirmassEnd float64
	MeanQuality              float64
	MoonSepDeg, SunSepDeg    float64 // at the start
	SkyMag                   float64 // V mag/arcsec^2 at the start (NaN without the sky model)
}

// Spent is an itemised overhead.
type Spent struct {
	Slew, Settle, FilterChange, Focus, Acquisition time.Duration
	// Idle is the rest of the gap (waiting for a target or a quantum).
	Idle time.Duration
	// Flip is the meridian flip inside the run (plus any wait for the
	// flip zone).
	Flip time.Duration
}

// Objective is a plan's value and its parts (package doc). Units are
// seconds of exposure weighted by priority, quality and urgency.
type Objective struct {
	// Value = Weighted + Cadence + Bonus: what the solvers maximise
	// (executed runs excluded).
	Value    float64
	Weighted float64
	// Cadence is the value of the cadence points delivered (package doc).
	Cadence float64
	Bonus   float64
	// Raw is sum priority * quality * exposure without urgency.
	Raw float64
	// ExposureS is the plain exposure time planned.
	ExposureS float64
	// Completed counts blocks whose frames are all done by the plan.
	Completed int
	// Executed is the weighted value of executed runs (not in Value).
	Executed float64
	// OverheadS is the overhead time of the planned runs: the setups
	// before them and the readouts, dithers and flips inside them.
	OverheadS float64
}

// Why says why a block got no run.
type Why uint8

// Reasons for leaving a block out.
const (
	// NeverObservable: no step of the interval is observable; Unplaced.
	// Constraint names the reason that rules out the most steps.
	NeverObservable Why = iota + 1
	// WindowTooShort: observable, but no window holds its shortest run.
	WindowTooShort
	// LostToHigherValue: a run would fit, but other blocks were worth more.
	LostToHigherValue
)

func (w Why) String() string {
	switch w {
	case NeverObservable:
		return "never observable"
	case WindowTooShort:
		return "window too short for the shortest useful run"
	case LostToHigherValue:
		return "lost to higher-value blocks"
	}
	return "unknown"
}

// Unplaced is a block with frames left that the plan does not observe.
type Unplaced struct {
	Block      int
	ID         string
	Why        Why
	Constraint constraints.Reason // for NeverObservable
	// LongestWindow is the longest observable window (for WindowTooShort).
	LongestWindow time.Duration
}
