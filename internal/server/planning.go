package server

// Planning glue: the one file that talks to the scheduler. It turns a
// planning job (the site, its open blocks with their targets, closures,
// runs kept from an earlier version) into scheduler inputs, runs the solver,
// and turns its plan into a nightloomv1.Plan body with pointings, rates,
// overheads and predicted conditions. plans.go stores and publishes what
// comes out; nothing else in the server imports the scheduler.

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sort"
	"strings"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
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
}

// schedulerPlanner is the planner of the daemon: scheduler.Solve (adaptive
// large-neighbourhood search) on the night's constraint grid.
type schedulerPlanner struct{}

// lookaheadStep is the coarse grid of the urgency lookahead.
const lookaheadStep = scheduler.LookaheadStep

// overheadsOf is the scheduler's overhead model of a site. The scheduler
// slews at constant speed, so the axes' accelerations (site.proto) are not
// used by the solver; they are by NextAssignment (axisTime).
func overheadsOf(s *nightloomv1.Site) scheduler.Overheads {
	m, in := s.GetMount(), s.GetInstrument()
	o := scheduler.Overheads{
		Axis1RateDegS: m.GetPrimaryAxis().GetRateDegPerS(), Axis2RateDegS: m.GetSecondaryAxis().GetRateDegPerS(),
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
	}
	if c := pb.GetCadence(); c != nil {
		sb.Cadence = &scheduler.Cadence{Every: c.GetInterval().AsDuration(), Tolerance: c.GetTolerance().AsDuration()}
	}
	return sb
}

func (schedulerPlanner) plan(ctx context.Context, job *planJob) (*nightloomv1.Plan, error) {
	began := time.Now()
	site := &scheduler.Site{Site: job.site.cons, Overheads: overheadsOf(job.site.pb)}
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
	opts := scheduler.Options{Seed: uint64(job.args.seed), Budget: budget, Workers: runtime.GOMAXPROCS(0),
		LookaheadNights: max(1, job.args.lookahead)}
	in := scheduler.Input{Site: site, Grid: grid, Blocks: blocks, Closures: closures, Executed: executed, From: from, Options: opts}
	if job.args.lookahead > 0 && len(blocks) > 0 {
		first := job.start.In(job.site.loc())
		if job.night != nil {
			first = civilOf(job.night)
		}
		first = time.Date(first.Year(), first.Month(), first.Day(), 0, 0, 0, 0, time.UTC)
		la, err := scheduler.NewLookahead(site, blocks, first, job.args.lookahead, lookaheadStep, opts.Workers)
		if err != nil {
			return nil, fmt.Errorf("server: lookahead: %w", err)
		}
		in.Chances = la.Chances(0, job.args.lookahead, nil)
	}
	if ctx.Err() != nil {
		return nil, ctx.Err()
	}
	prob, err := scheduler.NewProblem(in)
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
		sp, _, err = scheduler.Replan(prob, old, scheduler.State{Now: from, Executed: executed, Closures: closures})
		if err != nil {
			return nil, fmt.Errorf("server: replan: %w", err)
		}
	} else {
		sp = scheduler.Solve(prob)
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
		GridSteps: int32(grid.N), BlocksConsidered: int32(len(blocks))}
	body.Objective = objectiveOf(job, body, &sp.Objective)
	return body, nil
}

// assignmentsOf turns one scheduler run into one assignment, or two when a
// meridian flip splits it.
func assignmentsOf(job *planJob, prob *scheduler.Problem, a *scheduler.Assignment, ordinal int) []*nightloomv1.Assignment {
	b := job.blocks[a.Block]
	site := job.site.pb
	exp := b.pb.GetExposure().AsDuration()
	frame := exp + site.GetInstrument().GetReadout().AsDuration()
	starts := a.FrameStarts
	if len(starts) != a.Frames || a.Frames == 0 {
		starts = nil // no layout: one part from Start to End
	}
	type part struct {
		first, n   int
		start, end time.Time
		flipBefore time.Time // the flip's start, for the second part
	}
	parts := []part{{first: 0, n: a.Frames, start: a.Start, end: a.End}}
	if !a.Flip.IsZero() && starts != nil && a.FlipBefore > 0 && a.FlipBefore < a.Frames {
		k := a.FlipBefore
		parts = []part{
			{first: 0, n: k, start: starts[0], end: starts[k-1].Add(frame)},
			{first: k, n: a.Frames - k, start: starts[k], end: a.End, flipBefore: starts[k-1].Add(frame)},
		}
	}
	var out []*nightloomv1.Assignment
	for pi, p := range parts {
		as := &nightloomv1.Assignment{
			BlockId: b.pb.GetId(), TargetId: b.pb.GetTargetId(), TargetName: b.target.pb.GetName(),
			Start: timestamppb.New(p.start), End: timestamppb.New(p.end), Frames: int32(p.n),
			Filter: b.pb.GetFilter(), Exposure: durationpb.New(exp), DitherEveryFrames: b.pb.GetDitherEveryFrames(),
			NonSiderealTracking: b.pb.GetNonSiderealTracking(),
		}
		oh := &nightloomv1.Overheads{}
		if pi == 0 {
			s := a.Spent
			oh.Slew, oh.Settle, oh.Acquisition = durationpb.New(s.Slew), durationpb.New(s.Settle), durationpb.New(s.Acquisition)
			oh.FilterChange, oh.Focus, oh.MeridianFlip = durationpb.New(s.FilterChange), durationpb.New(s.Focus), durationpb.New(0)
		} else {
			zero := durationpb.New(0)
			oh.Slew, oh.Settle, oh.Acquisition, oh.FilterChange, oh.Focus = zero, zero, zero, zero, zero
			oh.MeridianFlip = durationpb.New(p.start.Sub(p.flipBefore))
		}
		as.Overheads = oh
		total := oh.Slew.AsDuration() + oh.Settle.AsDuration() + oh.Acquisition.AsDuration() + oh.FilterChange.AsDuration() +
			oh.Focus.AsDuration() + oh.MeridianFlip.AsDuration()
		as.PrepareStart = timestamppb.New(p.start.Add(-total))
		if b.pb.GetCadence() != nil {
			as.CadenceRun = int32(ordinal)
		}
		o0 := observe(job.site.cons, b.target.model, p.start)
		o1 := observe(job.site.cons, b.target.model, p.end)
		as.Pointing = o0.pointing
		if o0.moving {
			as.Rate = &nightloomv1.NonSiderealRate{RaCosDecArcsecPerMin: o0.rateRA, DecArcsecPerMin: o0.rateDec}
		}
		as.ConditionsAtStart = conditions(o0, qualityAt(prob, a.Block, p.start))
		as.ConditionsAtEnd = conditions(o1, qualityAt(prob, a.Block, p.end.Add(-time.Nanosecond)))
		out = append(out, as)
	}
	return out
}

// qualityAt is the grid's quality factor of block b at t.
func qualityAt(prob *scheduler.Problem, b int, t time.Time) float64 {
	g := prob.Grid
	return float64(prob.Vis[b].Quality[g.Index(t)])
}

// conditions are the predicted conditions of an observation.
func conditions(o observation, quality float64) *nightloomv1.PredictedConditions {
	c := &nightloomv1.PredictedConditions{AltitudeDeg: o.altDeg, MoonSeparationDeg: o.moonSepDeg, Quality: quality}
	if !math.IsInf(o.airmass, 0) {
		c.Airmass = o.airmass
	}
	if !math.IsNaN(o.sky) {
		c.SkyBrightnessVMagArcsec2 = o.sky
	}
	if !math.IsNaN(o.observedMagnitude) {
		c.Magnitude = proto.Float64(o.observedMagnitude)
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
		out.Detail = whyNot(prob, u.Block, clock)
	case scheduler.WindowTooShort:
		out.Reason = nightloomv1.Reason_REASON_WINDOW_TOO_SHORT
		out.Detail = fmt.Sprintf("longest window %s is shorter than the shortest useful run (%s with overheads)",
			roundMin(u.LongestWindow), roundMin(shortestRun(job.site.pb, b.pb)))
	default:
		out.Reason = nightloomv1.Reason_REASON_LOST_TO_HIGHER_VALUE
		out.Detail = "observable " + windowsText(prob, u.Block, clock) + ", but the time went to blocks of higher value"
	}
	return out
}

func roundMin(d time.Duration) string { return d.Round(time.Minute).String() }

// whyNot lists the failing constraints span by span in local time, e.g.
// "Moon too close 23:10-01:40; below the horizon profile 01:40-05:02".
func whyNot(prob *scheduler.Problem, b int, clock func(time.Time) string) string {
	var parts []string
	spans := prob.Vis[b].Spans(prob.Grid)
	for _, sp := range spans {
		if sp.Reason == constraints.OK {
			continue
		}
		if len(parts) == 6 {
			parts = append(parts, "...")
			break
		}
		parts = append(parts, fmt.Sprintf("%s %s-%s", sp.Reason, clock(sp.From), clock(sp.To)))
	}
	return strings.Join(parts, "; ")
}

// windowsText lists the observable windows in local time.
func windowsText(prob *scheduler.Problem, b int, clock func(time.Time) string) string {
	var parts []string
	g := prob.Grid
	for _, w := range prob.Vis[b].Windows {
		if len(parts) == 4 {
			parts = append(parts, "...")
			break
		}
		parts = append(parts, clock(g.Time(w.Start))+"-"+clock(g.Time(w.End)))
	}
	if len(parts) == 0 {
		return "at no grid step"
	}
	return strings.Join(parts, ", ")
}

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
	return &nightloomv1.ObjectiveParts{Total: o.Value, WeightedExposure: o.Weighted, CompletionBonus: o.Bonus,
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

// truncateAssignment ends a run at cut with the frames that fit (Replan:
// a closure overlaps the run in progress); nil when none fits.
func truncateAssignment(site *siteModel, a *nightloomv1.Assignment, cut time.Time) *nightloomv1.Assignment {
	start := a.GetStart().AsTime()
	exp := a.GetExposure().AsDuration()
	every := int(a.GetDitherEveryFrames())
	n := int(a.GetFrames())
	for n > 0 && start.Add(runLength(site.pb, exp, n, every)).After(cut) {
		n--
	}
	if n == 0 {
		return nil
	}
	out := proto.Clone(a).(*nightloomv1.Assignment)
	out.Frames = int32(n)
	out.End = timestamppb.New(start.Add(runLength(site.pb, exp, n, every)))
	return out
}

// dispatch adjusts a planned assignment for NextAssignment: the frames the
// block still wants, and overheads from the telescope's actual state. A run
// already in progress at now is returned as planned. nil means the run has
// nothing left to do.
func dispatch(site *siteModel, a *nightloomv1.Assignment, b *nightloomv1.Block, state *nightloomv1.TelescopeState, now time.Time) (*nightloomv1.Assignment, bool) {
	left := int(b.GetFramesWanted() - b.GetFramesDone())
	if left <= 0 {
		return nil, false
	}
	out := proto.Clone(a).(*nightloomv1.Assignment)
	start := a.GetStart().AsTime()
	if !start.After(now) {
		return out, true
	}
	asPlanned := true
	if int(out.GetFrames()) > left {
		out.Frames = int32(left)
		out.End = timestamppb.New(start.Add(runLength(site.pb, a.GetExposure().AsDuration(), left, int(a.GetDitherEveryFrames()))))
		asPlanned = false
	}
	if state != nil && (state.GetPosition() != nil || state.GetFilter() != "" || state.GetLastFocusTime() != nil) {
		oh := proto.Clone(a.GetOverheads()).(*nightloomv1.Overheads)
		m, in := site.pb.GetMount(), site.pb.GetInstrument()
		if p := state.GetPosition(); p != nil {
			oh.Slew = durationpb.New(slewTime(site, p.GetAltitudeDeg(), p.GetAzimuthDeg(), a.GetPointing()))
			if oh.Slew.AsDuration() > 0 {
				oh.Settle = durationpb.New(m.GetSettle().AsDuration())
			}
		}
		changed := false
		if f := state.GetFilter(); f != "" {
			changed = f != a.GetFilter()
			oh.FilterChange = durationpb.New(0)
			if changed {
				oh.FilterChange = durationpb.New(in.GetFilterChange().AsDuration())
			}
		}
		if lf := state.GetLastFocusTime(); lf != nil {
			fp := in.GetFocus()
			due := fp != nil && ((fp.GetInterval().AsDuration() > 0 && start.Sub(lf.AsTime()) >= fp.GetInterval().AsDuration()) ||
				(changed && fp.GetOnFilterChange()))
			oh.Focus = durationpb.New(0)
			if due {
				oh.Focus = durationpb.New(fp.GetDuration().AsDuration())
			}
		}
		if !proto.Equal(oh, a.GetOverheads()) {
			asPlanned = false
		}
		out.Overheads = oh
		total := oh.GetSlew().AsDuration() + oh.GetSettle().AsDuration() + oh.GetAcquisition().AsDuration() +
			oh.GetFilterChange().AsDuration() + oh.GetFocus().AsDuration() + oh.GetMeridianFlip().AsDuration()
		ps := start.Add(-total)
		if ps.Before(now) {
			// The preparations cannot begin in the past: start later.
			shift := now.Sub(ps)
			ps = now
			out.Start = timestamppb.New(start.Add(shift))
			out.End = timestamppb.New(out.GetEnd().AsTime().Add(shift))
			asPlanned = false
		}
		out.PrepareStart = timestamppb.New(ps)
	}
	return out, asPlanned
}

// slewTime is the time to slew from a horizontal position to a pointing on
// the site's two axes (trapezoidal profile; the slower axis counts):
// azimuth and altitude for alt-azimuth mounts, hour angle and declination
// for equatorial ones.
func slewTime(site *siteModel, altDeg, azDeg float64, to *nightloomv1.Pointing) time.Duration {
	m := site.pb.GetMount()
	var d1, d2 float64
	if m.GetKind() == nightloomv1.MountKind_MOUNT_KIND_ALT_AZIMUTH {
		d1 = math.Abs(math.Remainder(to.GetAzimuthDeg()-azDeg, 360))
		d2 = math.Abs(to.GetAltitudeDeg() - altDeg)
	} else {
		ha, dec := horizontalToHADec(site.pb.GetLatitudeDeg(), altDeg, azDeg)
		d1 = math.Abs(math.Remainder(to.GetHourAngleDeg()-ha, 360))
		d2 = math.Abs(to.GetDecApparentDeg() - dec)
	}
	return max(axisTime(m.GetPrimaryAxis(), d1), axisTime(m.GetSecondaryAxis(), d2))
}

// horizontalToHADec converts altitude and azimuth (north through east) to
// hour angle and declination at a latitude, all in degrees (the standard
// spherical-triangle relations, e.g. Meeus, Astronomical Algorithms, 2nd
// ed., ch. 13, with azimuth from north).
func horizontalToHADec(latDeg, altDeg, azDeg float64) (haDeg, decDeg float64) {
	phi, h, a := latDeg*ephem.Deg2Rad, altDeg*ephem.Deg2Rad, azDeg*ephem.Deg2Rad
	sd := math.Sin(phi)*math.Sin(h) + math.Cos(phi)*math.Cos(h)*math.Cos(a)
	dec := math.Asin(math.Max(-1, math.Min(1, sd)))
	ha := math.Atan2(-math.Sin(a)*math.Cos(h), math.Cos(phi)*math.Sin(h)-math.Sin(phi)*math.Cos(h)*math.Cos(a))
	return ha * ephem.Rad2Deg, dec * ephem.Rad2Deg
}
