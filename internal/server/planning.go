package server

// Planning glue: the one file that talks to the scheduler. It turns a
// planning job (the site, its open blocks with their targets, closures,
// runs kept from an earlier version) into scheduler inputs, runs the solver,
// and turns its plan into a nightloomv1.Plan body with pointings, rates,
// overheads and predicted conditions. plans.go stores and publishes what
// comes out; apart from networkplan.go (the same for a network of sites),
// nothing else in the server imports the scheduler.

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sort"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
	"github.com/nightloom/nightloom/scheduler"
)

// planner makes the body of one plan version. The body's interval,
// assignments (kept ones first), unplaced blocks, solver stats and
// objective are set; ids, site, origin, closures and version are the
// caller's.
type planner interface {
	plan(ctx context.Context, job *planJob) (*nightloomv1.Plan, error)
}

// planTarget is a target in both forms.
type planTarget struct {
	pb    *nightloomv1.Target
	model *constraints.Target
}

// planBlock is an open block with its target; framesDone counts what the
// store has plus what earlier nights of the same MakePlan call planned.
type planBlock struct {
	pb         *nightloomv1.Block
	target     *planTarget
	framesDone int
}

// planJob is one night's (or interval's) planning problem.
type planJob struct {
	site       *siteModel
	start, end time.Time // the interval planned
	night      *nightloomv1.LocalDate
	from       time.Time // replans: plan from here (kept runs before it)
	blocks     []*planBlock
	closures   []*nightloomv1.Closure
	kept       []*nightloomv1.Assignment // replans: runs kept from the old version, in time order
	inProgress *nightloomv1.Assignment   // the kept run in progress at from (its frames are not reported yet)
	previous   []*nightloomv1.Assignment // replans: the old version's runs after from, the starting timeline
	args       planArgs
	origin     nightloomv1.PlanOrigin
	// programs are the allocations and use the fair-share factor balances
	// (programs.go); nil when there are none.
	programs []scheduler.Program
	// report is set by the planner for a replan: what became of each of
	// the old version's runs after from.
	report *scheduler.ReplanReport
}

// schedulerPlanner is the planner of the daemon: scheduler.Solve (adaptive
// large-neighbourhood search) on the night's constraint grid. lookahead
// (nil: none) keeps the urgency lookahead per site and night across calls,
// so that a replan does not recompute it.
type schedulerPlanner struct {
	lookahead *scheduler.LookaheadCache
}

// lookaheadStep is the coarse grid of the urgency lookahead.
const lookaheadStep = scheduler.LookaheadStep

// overheadsOf is the scheduler's overhead model of a site: the one model of
// slews (trapezoidal, per axis), settle, filter changes, focus, acquisition
// and flips that planning, replanning and NextAssignment share.
func overheadsOf(s *nightloomv1.Site) scheduler.Overheads {
	m, in := s.GetMount(), s.GetInstrument()
	o := scheduler.Overheads{
		Axis1RateDegS: m.GetPrimaryAxis().GetRateDegPerS(), Axis2RateDegS: m.GetSecondaryAxis().GetRateDegPerS(),
		Axis1AccelDegS2: m.GetPrimaryAxis().GetAccelerationDegPerS2(), Axis2AccelDegS2: m.GetSecondaryAxis().GetAccelerationDegPerS2(),
		Settle: m.GetSettle().AsDuration(), Acquisition: in.GetAcquisition().AsDuration(),
		FilterChange: in.GetFilterChange().AsDuration(), Readout: in.GetReadout().AsDuration(),
		Dither: in.GetDither().AsDuration(),
	}
	if f := in.GetFocus(); f != nil {
		o.Focus, o.FocusEvery, o.FocusOnFilterChange = f.GetDuration().AsDuration(), f.GetInterval().AsDuration(), f.GetOnFilterChange()
	}
	if fl := m.GetMeridianFlip(); fl != nil {
		o.Flip = fl.GetDuration().AsDuration()
	}
	return o
}

// schedBlock converts a block for the scheduler.
func schedBlock(b *planBlock, byNight bool) scheduler.Block {
	pb := b.pb
	set := constraintSet(pb.GetConstraints(), hasMagLaw(b.target.pb))
	if !byNight {
		dateLimits(set, pb)
	}
	sb := scheduler.Block{
		ID: pb.GetId(), Target: b.target.model, Filter: pb.GetFilter(), Exposure: pb.GetExposure().AsDuration(),
		FramesWanted: int(pb.GetFramesWanted()), FramesDone: b.framesDone,
		MinRun: int(pb.GetMinRunFrames()), MaxRun: int(pb.GetMaxRunFrames()), DitherEvery: int(pb.GetDitherEveryFrames()),
		Priority: float64(pb.GetPriority()), Set: set, NonSidereal: pb.GetNonSiderealTracking(),
		Program: pb.GetProgram(),
	}
	if c := pb.GetCadence(); c != nil {
		sb.Cadence = &scheduler.Cadence{Every: c.GetInterval().AsDuration(), Tolerance: c.GetTolerance().AsDuration()}
	}
	return sb
}

func (sp0 schedulerPlanner) plan(ctx context.Context, job *planJob) (*nightloomv1.Plan, error) {
	began := time.Now()
	site := job.site.sched
	body := &nightloomv1.Plan{Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(job.start), End: timestamppb.New(job.end)}}
	body.Assignments = append(body.Assignments, job.kept...)

	// Runs kept before `from` anchor the mount; their frames count as
	// done. The store's frames_done already holds the reported runs (all
	// finished ones, by assumption), so only the run in progress adds
	// frames: scheduler.Input.Executed adds every executed run's frames,
	// and the finished ones are taken off FramesDone to balance.
	index := map[string]int{}
	blocks := make([]scheduler.Block, len(job.blocks))
	for i, b := range job.blocks {
		blocks[i] = schedBlock(b, job.night != nil)
		index[b.pb.GetId()] = i
	}
	var executed []scheduler.Assignment
	for _, a := range job.kept {
		i, ok := index[a.GetBlockId()]
		if !ok {
			continue // no longer open: it cannot be an executed run of this problem
		}
		if a != job.inProgress {
			blocks[i].FramesDone = max(0, blocks[i].FramesDone-int(a.GetFrames()))
		}
		executed = append(executed, scheduler.Assignment{Block: i, ID: a.GetBlockId(),
			Start: a.GetStart().AsTime(), End: a.GetEnd().AsTime(), Frames: int(a.GetFrames()),
			Pointing: scheduler.Pointing{AltDeg: a.GetPointing().GetAltitudeDeg(), AzDeg: a.GetPointing().GetAzimuthDeg(),
				HADeg: a.GetPointing().GetHourAngleDeg(), DecDeg: a.GetPointing().GetDecApparentDeg(),
				RADeg: a.GetPointing().GetRaApparentDeg(), PierWest: a.GetPointing().GetHourAngleDeg() >= 0}})
	}
	from := job.from
	for _, a := range job.kept {
		if e := a.GetEnd().AsTime(); e.After(from) {
			from = e
		}
	}
	var closures []scheduler.Closure
	for _, c := range job.closures {
		closures = append(closures, scheduler.Closure{Start: c.GetInterval().GetStart().AsTime(), End: c.GetInterval().GetEnd().AsTime(), Note: c.GetReason()})
	}

	grid, err := constraints.NewGrid(job.site.cons, job.start, job.end, job.args.gridStep, constraints.Options{})
	if err != nil {
		return nil, fieldError("grid_step", "%v", err)
	}
	budget := job.args.budget
	if budget <= 0 {
		budget = time.Nanosecond // a budget of 0: the constructive schedule only
	}
	// The call's context cancels the solver (lookahead, preparation and
	// search): a cancelled or timed-out MakePlan or Replan stops within
	// one block's evaluation or one search iteration and says so.
	stopped := func() error {
		return fmt.Errorf("planning stopped after %v: %w", time.Since(began).Round(time.Millisecond), ctx.Err())
	}
	opts := scheduler.Options{Seed: uint64(job.args.seed), Budget: budget, Workers: runtime.GOMAXPROCS(0), Cancel: ctx.Done(),
		LookaheadNights: max(1, job.args.lookahead)}
	in := scheduler.Input{Site: site, Grid: grid, Blocks: blocks, Closures: closures, Executed: executed, From: from, Options: opts,
		Programs: job.programs}
	if job.args.lookahead > 0 && len(blocks) > 0 {
		first := job.start.In(job.site.loc())
		if job.night != nil {
			first = civilOf(job.night)
		}
		first = time.Date(first.Year(), first.Month(), first.Day(), 0, 0, 0, 0, time.UTC)
		var la *scheduler.Lookahead
		if sp0.lookahead != nil {
			la, err = sp0.lookahead.Lookahead(site, blocks, first, job.args.lookahead, lookaheadStep, opts.Workers, opts.Cancel)
		} else {
			la, err = scheduler.NewLookahead(site, blocks, first, job.args.lookahead, lookaheadStep, opts.Workers, opts.Cancel)
		}
		if ctx.Err() != nil {
			return nil, stopped()
		}
		if err != nil {
			return nil, fmt.Errorf("server: lookahead: %w", err)
		}
		in.Chances = la.Chances(0, job.args.lookahead, nil)
	}
	if ctx.Err() != nil {
		return nil, stopped()
	}
	prob, err := scheduler.NewProblem(in)
	if ctx.Err() != nil {
		return nil, stopped()
	}
	if err != nil {
		return nil, fmt.Errorf("server: planning problem: %w", err)
	}
	var sp *scheduler.Plan
	if len(job.previous) > 0 {
		// A replan starts from the old version's later runs that are still
		// valid and moves only what is worth moving (scheduler.Replan).
		old := &scheduler.Plan{}
		for _, a := range job.previous {
			i, ok := index[a.GetBlockId()]
			if !ok {
				continue
			}
			old.Assignments = append(old.Assignments, scheduler.Assignment{Block: i, ID: a.GetBlockId(),
				Start: a.GetStart().AsTime(), End: a.GetEnd().AsTime(), Frames: int(a.GetFrames())})
		}
		var rep scheduler.ReplanReport
		sp, rep, err = scheduler.Replan(prob, old, scheduler.State{Now: from, Executed: executed, Closures: closures})
		if err != nil {
			return nil, fmt.Errorf("server: replan: %w", err)
		}
		job.report = &rep
	} else {
		sp = scheduler.Solve(prob)
	}
	if ctx.Err() != nil {
		return nil, stopped()
	}
	// The solver's plan is checked against the model independently
	// (overheads, frame layout, visibility and the solar-avoidance floor at
	// every covered step) before it can reach a telescope: a plan that
	// fails is an internal error, not a stored version.
	if err := scheduler.Validate(sp, prob); err != nil {
		return nil, fmt.Errorf("server: the solver's plan failed validation: %w", err)
	}

	// Assignments: the scheduler's runs split at meridian flips, since in
	// the API no exposure runs through a flip (site.proto MeridianFlip).
	runs := map[string]int{} // runs of each block so far tonight (time order), kept ones first
	for _, a := range job.kept {
		runs[a.GetBlockId()]++
	}
	for i := range sp.Assignments {
		a := &sp.Assignments[i]
		if a.Executed {
			continue
		}
		runs[a.ID]++
		body.Assignments = append(body.Assignments, assignmentsOf(job, prob, a, runs[a.ID])...)
	}
	sort.SliceStable(body.Assignments, func(i, j int) bool {
		return body.Assignments[i].GetStart().AsTime().Before(body.Assignments[j].GetStart().AsTime())
	})
	for _, u := range sp.Unplaced {
		body.Unplaced = append(body.Unplaced, unplacedOf(job, prob, &u))
	}
	body.Solver = &nightloomv1.SolverStats{Algorithm: sp.Solver, SolveTime: durationpb.New(time.Since(began)),
		Iterations: int64(sp.Iterations), Seed: job.args.seed, GridStep: durationpb.New(job.args.gridStep),
		GridSteps: int32(grid.N), BlocksConsidered: int32(len(blocks)), StopReason: sp.Stopped}
	body.Objective = objectiveOf(job, body, &sp.Objective)
	body.Charges = chargesOf(sp.Charged)
	body.Cadence = cadenceOf(sp)
	return body, nil
}

// cadenceOf converts a plan's cadence series.
func cadenceOf(sp *scheduler.Plan) []*nightloomv1.CadenceSeries {
	var out []*nightloomv1.CadenceSeries
	for _, c := range sp.Cadence {
		cs := &nightloomv1.CadenceSeries{BlockId: c.ID, Interval: durationpb.New(c.Every), RunsDelivered: int32(c.Delivered)}
		for _, s := range c.Skipped {
			cs.Skipped = append(cs.Skipped, &nightloomv1.SkippedSlot{At: timestamppb.New(s.At), Reason: slotReasonOf(s.Why)})
		}
		out = append(out, cs)
	}
	return out
}

// slotReasonOf converts why a cadence slot was skipped.
func slotReasonOf(w scheduler.SlotWhy) nightloomv1.SlotReason {
	switch w {
	case scheduler.SlotNotObservable:
		return nightloomv1.SlotReason_SLOT_REASON_NOT_OBSERVABLE
	case scheduler.SlotClosed:
		return nightloomv1.SlotReason_SLOT_REASON_CLOSURE
	case scheduler.SlotNoFrames:
		return nightloomv1.SlotReason_SLOT_REASON_NO_FRAMES_LEFT
	case scheduler.SlotLostToHigherValue:
		return nightloomv1.SlotReason_SLOT_REASON_LOST_TO_HIGHER_VALUE
	case scheduler.SlotPast:
		return nightloomv1.SlotReason_SLOT_REASON_BEFORE_PLAN
	}
	return nightloomv1.SlotReason_SLOT_REASON_UNSPECIFIED
}

// runChangesOf converts a replan's per-run changes.
func runChangesOf(rep *scheduler.ReplanReport) []*nightloomv1.RunChange {
	if rep == nil {
		return nil
	}
	var out []*nightloomv1.RunChange
	for _, c := range rep.Runs {
		rc := &nightloomv1.RunChange{BlockId: c.ID, Start: timestamppb.New(c.Start), Frames: int32(c.Frames),
			NewFrames: int32(c.NewFrames), Reason: c.Why}
		if !c.NewStart.IsZero() {
			rc.NewStart = timestamppb.New(c.NewStart)
		}
		switch c.Change {
		case scheduler.RunKept:
			rc.Change = nightloomv1.RunChangeKind_RUN_CHANGE_KIND_KEPT
		case scheduler.RunInfeasible:
			rc.Change = nightloomv1.RunChangeKind_RUN_CHANGE_KIND_INFEASIBLE
		case scheduler.RunMoved:
			rc.Change = nightloomv1.RunChangeKind_RUN_CHANGE_KIND_MOVED
		case scheduler.RunDropped:
			rc.Change = nightloomv1.RunChangeKind_RUN_CHANGE_KIND_DROPPED
		}
		out = append(out, rc)
	}
	return out
}

// assignmentsOf turns one scheduler assignment into the API's: one, or
// two when a meridian flip splits it (scheduler.Problem.Runs).
func assignmentsOf(job *planJob, prob *scheduler.Problem, a *scheduler.Assignment, ordinal int) []*nightloomv1.Assignment {
	b := job.blocks[a.Block]
	var out []*nightloomv1.Assignment
	for _, r := range prob.Runs(a) {
		out = append(out, assignmentProto(b.pb, b.target.pb, r, ordinal))
	}
	return out
}

// assignmentProto converts a run of block b (target t) to the API's
// assignment; ordinal is the run's number among the block's cadence runs.
func assignmentProto(b *nightloomv1.Block, t *nightloomv1.Target, r scheduler.Run, ordinal int) *nightloomv1.Assignment {
	as := &nightloomv1.Assignment{
		BlockId: b.GetId(), TargetId: b.GetTargetId(), TargetName: t.GetName(),
		Start: timestamppb.New(r.Start), End: timestamppb.New(r.End), Frames: int32(r.Frames),
		Filter: b.GetFilter(), Exposure: durationpb.New(r.Exposure), DitherEveryFrames: b.GetDitherEveryFrames(),
		NonSiderealTracking: b.GetNonSiderealTracking(), PrepareStart: timestamppb.New(r.PrepareStart),
	}
	o := r.Overheads
	as.Overheads = &nightloomv1.Overheads{Slew: durationpb.New(o.Slew), Settle: durationpb.New(o.Settle),
		Acquisition: durationpb.New(o.Acquisition), FilterChange: durationpb.New(o.FilterChange),
		Focus: durationpb.New(o.Focus), MeridianFlip: durationpb.New(o.Flip)}
	if b.GetCadence() != nil {
		as.CadenceRun = int32(ordinal)
	}
	as.Pointing = pointingOf(r.AtStart)
	if r.AtStart.Moving {
		as.Rate = &nightloomv1.NonSiderealRate{RaCosDecArcsecPerMin: r.AtStart.RateRA, DecArcsecPerMin: r.AtStart.RateDec}
	}
	as.ConditionsAtStart = conditions(r.AtStart, r.QualityStart)
	as.ConditionsAtEnd = conditions(r.AtEnd, r.QualityEnd)
	return as
}

// runOf is the domain's view of a stored assignment of a block whose
// target is t: times, frames, overheads and the pointing at the start
// (the observations at both ends are recomputed when the run changes).
func runOf(a *nightloomv1.Assignment, t *constraints.Target) scheduler.Run {
	o := a.GetOverheads()
	r := scheduler.Run{Block: -1, ID: a.GetBlockId(), Target: t, Filter: a.GetFilter(), Exposure: a.GetExposure().AsDuration(),
		DitherEvery: int(a.GetDitherEveryFrames()), Start: a.GetStart().AsTime(), End: a.GetEnd().AsTime(),
		PrepareStart: a.GetPrepareStart().AsTime(), Frames: int(a.GetFrames()),
		Overheads: scheduler.Spent{Slew: o.GetSlew().AsDuration(), Settle: o.GetSettle().AsDuration(),
			FilterChange: o.GetFilterChange().AsDuration(), Focus: o.GetFocus().AsDuration(),
			Acquisition: o.GetAcquisition().AsDuration(), Flip: o.GetMeridianFlip().AsDuration()}}
	p := a.GetPointing()
	r.AtStart = constraints.Observation{HADeg: p.GetHourAngleDeg(), DecDeg: p.GetDecApparentDeg(), RADeg: p.GetRaApparentDeg(),
		AltDeg: p.GetAltitudeDeg(), AzDeg: p.GetAzimuthDeg(), RAICRSDeg: p.GetRaIcrsDeg(), DecICRSDeg: p.GetDecIcrsDeg()}
	return r
}

// conditions are the predicted conditions of an observation.
func conditions(o constraints.Observation, quality float64) *nightloomv1.PredictedConditions {
	c := &nightloomv1.PredictedConditions{AltitudeDeg: o.AltDeg, MoonSeparationDeg: o.MoonSepDeg, Quality: quality}
	if !math.IsInf(o.Airmass, 0) {
		c.Airmass = o.Airmass
	}
	if !math.IsNaN(o.Sky) {
		c.SkyBrightnessVMagArcsec2 = o.Sky
	}
	if !math.IsNaN(o.ObservedMagnitude) {
		c.Magnitude = proto.Float64(o.ObservedMagnitude)
	}
	return c
}

// unplacedOf explains a block the plan leaves out.
func unplacedOf(job *planJob, prob *scheduler.Problem, u *scheduler.Unplaced) *nightloomv1.Unplaced {
	b := job.blocks[u.Block]
	out := &nightloomv1.Unplaced{BlockId: u.ID, FramesLeft: int32(max(0, int(b.pb.GetFramesWanted())-b.framesDone))}
	loc := job.site.loc()
	clock := func(t time.Time) string { return t.In(loc).Format("15:04") }
	switch u.Why {
	case scheduler.NeverObservable:
		out.Reason = reasonProto(u.Constraint)
		out.Detail = prob.WhyNot(u.Block, clock)
	case scheduler.WindowTooShort:
		out.Reason = nightloomv1.Reason_REASON_WINDOW_TOO_SHORT
		out.Detail = fmt.Sprintf("longest window %s is shorter than the shortest useful run (%s with overheads)",
			roundMin(u.LongestWindow), roundMin(shortestRun(job.site, b.pb)))
	default:
		out.Reason = nightloomv1.Reason_REASON_LOST_TO_HIGHER_VALUE
		out.Detail = "observable " + prob.ObservableText(u.Block, clock) + ", but the time went to blocks of higher value"
	}
	return out
}

func roundMin(d time.Duration) string { return d.Round(time.Minute).String() }

// objectiveOf sums the objective's parts (plan.proto ObjectiveParts).
func objectiveOf(job *planJob, body *nightloomv1.Plan, o *scheduler.Objective) *nightloomv1.ObjectiveParts {
	in := job.site.pb.GetInstrument()
	readout, dither := in.GetReadout().AsDuration(), in.GetDither().AsDuration()
	var exposure, overhead, busy time.Duration
	for _, a := range body.GetAssignments() {
		if !a.GetEnd().AsTime().After(job.from) && job.origin != nightloomv1.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN {
			continue // runs before a replan's start are not this plan's
		}
		n := time.Duration(a.GetFrames())
		exposure += n * a.GetExposure().AsDuration()
		run := a.GetEnd().AsTime().Sub(a.GetStart().AsTime())
		overhead += a.GetStart().AsTime().Sub(a.GetPrepareStart().AsTime()) + n*readout
		if e := a.GetDitherEveryFrames(); e > 0 && a.GetFrames() > 1 {
			overhead += time.Duration((a.GetFrames()-1)/e) * dither
		}
		busy += run + a.GetStart().AsTime().Sub(a.GetPrepareStart().AsTime())
	}
	from := job.from
	if job.origin == nightloomv1.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN {
		from = job.start
	}
	idle := job.end.Sub(from) - busy - closedTime(job.closures, from, job.end)
	return &nightloomv1.ObjectiveParts{Total: o.Value, WeightedExposure: o.Weighted, CompletionBonus: o.Bonus, CadencePoints: o.Cadence,
		ExposureTime: durationpb.New(exposure), OverheadTime: durationpb.New(overhead), IdleTime: durationpb.New(max(0, idle))}
}

// closedTime is the time closures cover within [from, to).
func closedTime(cs []*nightloomv1.Closure, from, to time.Time) time.Duration {
	var d time.Duration
	for _, c := range mergeClosures(cs) {
		a, b := c.GetInterval().GetStart().AsTime(), c.GetInterval().GetEnd().AsTime()
		if a.Before(from) {
			a = from
		}
		if b.After(to) {
			b = to
		}
		if b.After(a) {
			d += b.Sub(a)
		}
	}
	return d
}

// shortestRun is the time a block's shortest useful run needs with the
// overheads before it (scheduler.Site.ShortestRun): min_run_frames, or the
// frames left if fewer.
func shortestRun(site *siteModel, b *nightloomv1.Block) time.Duration {
	n := int(max(1, b.GetMinRunFrames()))
	if left := int(b.GetFramesWanted() - b.GetFramesDone()); left > 0 && left < n {
		n = left
	}
	return site.sched.ShortestRun(b.GetExposure().AsDuration(), n, int(b.GetDitherEveryFrames()))
}

// truncateAssignment ends a run at cut with the frames that fit and its
// conditions recomputed (Replan: a closure overlaps the run in progress);
// nil when none fits.
func truncateAssignment(site *siteModel, a *nightloomv1.Assignment, t *constraints.Target, cut time.Time) *nightloomv1.Assignment {
	r, ok := site.sched.Truncate(runOf(a, t), cut)
	if !ok {
		return nil
	}
	if r.Frames == int(a.GetFrames()) {
		return a
	}
	out := proto.Clone(a).(*nightloomv1.Assignment)
	out.Frames, out.End = int32(r.Frames), timestamppb.New(r.End)
	out.ConditionsAtEnd = conditions(r.AtEnd, r.QualityEnd)
	return out
}

// dispatch adjusts a planned assignment for NextAssignment
// (scheduler.Site.Redispatch): the frames the block still wants, overheads
// from the telescope's actual state, a later start if need be, and the
// constraints re-checked over a moved run. A run already in progress at now
// is returned as planned. nil means the run has nothing left to do.
func dispatch(site *siteModel, a *nightloomv1.Assignment, b *nightloomv1.Block, t *constraints.Target, req *constraints.Request,
	state *nightloomv1.TelescopeState, now time.Time) (*nightloomv1.Assignment, bool) {
	var st *scheduler.TelescopeState
	if state != nil {
		st = &scheduler.TelescopeState{Filter: state.GetFilter()}
		if p := state.GetPosition(); p != nil {
			st.HasPosition, st.AltDeg, st.AzDeg = true, p.GetAltitudeDeg(), p.GetAzimuthDeg()
		}
		if lf := state.GetLastFocusTime(); lf != nil {
			st.LastFocus = lf.AsTime()
		}
	}
	r, asPlanned, ok := site.sched.Redispatch(runOf(a, t), int(b.GetFramesWanted()-b.GetFramesDone()), st, req, now)
	if !ok {
		return nil, false
	}
	if asPlanned {
		return proto.Clone(a).(*nightloomv1.Assignment), true
	}
	out := proto.Clone(a).(*nightloomv1.Assignment)
	out.Start, out.End, out.PrepareStart = timestamppb.New(r.Start), timestamppb.New(r.End), timestamppb.New(r.PrepareStart)
	out.Frames = int32(r.Frames)
	o := r.Overheads
	out.Overheads = &nightloomv1.Overheads{Slew: durationpb.New(o.Slew), Settle: durationpb.New(o.Settle),
		Acquisition: durationpb.New(o.Acquisition), FilterChange: durationpb.New(o.FilterChange),
		Focus: durationpb.New(o.Focus), MeridianFlip: durationpb.New(o.Flip)}
	out.Pointing = pointingOf(r.AtStart)
	if r.AtStart.Moving {
		out.Rate = &nightloomv1.NonSiderealRate{RaCosDecArcsecPerMin: r.AtStart.RateRA, DecArcsecPerMin: r.AtStart.RateDec}
	}
	out.ConditionsAtStart = conditions(r.AtStart, r.QualityStart)
	out.ConditionsAtEnd = conditions(r.AtEnd, r.QualityEnd)
	return out, false
}
