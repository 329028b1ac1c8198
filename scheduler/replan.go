package scheduler

import (
	"fmt"
	"math"
	"time"
)

// State is what is known at an instant of the night: the runs the
// control software reported done (frames kept) and every closure known.
// A run still in progress at Now is not part of the state: report it when
// it ends, or pass its end as Now.
type State struct {
	Now      time.Time
	Executed []Assignment
	Closures []Closure
}

// ReplanReport says how much a replan changed: Kept future assignments of
// the old plan that the new one has unchanged (same block, start and
// frames), Dropped ones that it does not, Added ones that are new.
// Changed = Dropped + Added. Feasible counts the old future assignments
// that were still valid in the new state (the ones a replan could keep);
// Runs says, for every old future assignment, what became of it and why.
type ReplanReport struct {
	Kept, Dropped, Added, Changed int
	Feasible                      int
	Runs                          []RunChange
}

// RunChange is what a replan did to one future assignment of the old plan.
type RunChange struct {
	ID     string    // the block
	Start  time.Time // the old start
	Frames int       // the old frames
	Change Change
	// NewStart and NewFrames are the block's nearest new run (zero when
	// it has none).
	NewStart  time.Time
	NewFrames int
	// Why says why in words (empty when kept).
	Why string
}

// Change is what happened to an old run in a replan.
type Change uint8

// Changes of an old run.
const (
	// RunKept: the same block, start and frames.
	RunKept Change = iota + 1
	// RunInfeasible: no longer valid in the new state (a closure, frames
	// reported done, the mount's new state, a broken cadence series).
	RunInfeasible
	// RunMoved: still valid, but the block runs at another time or with
	// other frames, because the new plan gains more than the stability
	// term (Options.KeepBonus) costs.
	RunMoved
	// RunDropped: still valid, but the block has no run left: its time
	// went to runs worth more than it and its stability term.
	RunDropped
)

func (c Change) String() string {
	switch c {
	case RunKept:
		return "kept"
	case RunInfeasible:
		return "no longer feasible"
	case RunMoved:
		return "moved"
	case RunDropped:
		return "dropped"
	}
	return "unknown"
}

// Replan re-plans the rest of the night from st.Now: the executed runs are
// fixed, the old plan's future assignments that are still valid (after
// new closures, shorter frames left, a different mount state) form the
// starting timeline, and the large-neighbourhood search improves it with
// a bonus of Options.KeepBonus times its value for every old assignment
// kept, so that the new plan moves only what is worth moving.
func Replan(p *Problem, old *Plan, st State) (*Plan, ReplanReport, error) {
	q, err := p.WithState(st.Closures, st.Executed, st.Now)
	if err != nil {
		return nil, ReplanReport{}, err
	}
	start, keep := q.fromPlan(old)
	q.keep = keep
	sc, iters, stop := q.solve(start, q.Options.KeepBonus, keep)
	pl := q.toPlan(sc, "alns-replan", iters)
	pl.Stopped = stop
	var rep ReplanReport
	kept := map[runKey]bool{}
	for i := range sc.runs {
		k := keyOf(&sc.runs[i])
		if keep[k] {
			rep.Kept++
			kept[k] = true
		} else {
			rep.Added++
		}
	}
	for k := range keep {
		if !kept[k] {
			rep.Dropped++
		}
	}
	for _, a := range old.Assignments {
		if !a.Executed && q.rel(a.Start) >= q.tFrom-1e-9 && !keep[q.keyOfAssignment(&a)] {
			rep.Dropped++ // no longer valid: not even in the starting timeline
		}
	}
	rep.Changed = rep.Dropped + rep.Added
	rep.Feasible = len(keep)
	rep.Runs = q.runChanges(old, sc, keep, kept)
	return pl, rep, nil
}

// runChanges explains what a replan did to each future run of the old plan.
func (p *Problem) runChanges(old *Plan, sc *sched, feasible, kept map[runKey]bool) []RunChange {
	var out []RunChange
	for i := range old.Assignments {
		a := &old.Assignments[i]
		if a.Executed || p.rel(a.Start) < p.tFrom-1e-9 {
			continue
		}
		c := RunChange{ID: a.ID, Start: a.Start, Frames: a.Frames}
		k := p.keyOfAssignment(a)
		// The block's new run nearest to the old start.
		near := -1
		if a.Block >= 0 && a.Block < len(p.Blocks) && p.Blocks[a.Block].ID == a.ID {
			for j := range sc.runs {
				if sc.runs[j].b == a.Block && (near < 0 ||
					math.Abs(sc.runs[j].s-p.rel(a.Start)) < math.Abs(sc.runs[near].s-p.rel(a.Start))) {
					near = j
				}
			}
		}
		if near >= 0 {
			c.NewStart, c.NewFrames = p.abs(sc.runs[near].s), sc.runs[near].n
		}
		switch {
		case kept[k]:
			c.Change = RunKept
		case !feasible[k]:
			c.Change = RunInfeasible
			c.Why = p.whyInfeasible(a)
		case near >= 0:
			c.Change = RunMoved
			c.Why = "moved: the new plan gains more than keeping it is worth"
		default:
			c.Change = RunDropped
			c.Why = "dropped: its time went to runs worth more than it and its stability bonus"
		}
		out = append(out, c)
	}
	return out
}

// whyInfeasible says why an old run is no longer valid in p's state.
func (p *Problem) whyInfeasible(a *Assignment) string {
	b := a.Block
	if b < 0 || b >= len(p.Blocks) || p.Blocks[b].ID != a.ID {
		return "its block is no longer open"
	}
	s, e := p.rel(a.Start), p.rel(a.End)
	if p.closureIn(math.Max(0, s-p.bd[b].minSetup), e) >= 0 {
		return "a closure covers it or its setup"
	}
	if a.Frames > p.bd[b].rem {
		return fmt.Sprintf("only %d of its %d frames are still wanted", p.bd[b].rem, a.Frames)
	}
	if p.ivEnd(b, s) < 0 || p.ivEnd(b, s) < e-1e-6 {
		return "its block is no longer observable then"
	}
	if p.bd[b].every > 0 {
		return "its cadence series or the runs before it changed: it no longer fits"
	}
	return "the runs before it changed (setup, mount side or frames): it no longer fits"
}

func (p *Problem) keyOfAssignment(a *Assignment) runKey {
	return runKey{b: a.Block, n: a.Frames, ms: int64(math.Round(p.rel(a.Start) * 1000))}
}

// fromPlan rebuilds the still-valid future assignments of a plan as a
// timeline, and the set of their keys.
func (p *Problem) fromPlan(old *Plan) (*sched, map[runKey]bool) {
	sc := p.emptySched()
	keep := map[runKey]bool{}
	if old == nil {
		return sc, keep
	}
	for i := range old.Assignments {
		a := &old.Assignments[i]
		if a.Executed || a.Block < 0 || a.Block >= len(p.Blocks) || p.Blocks[a.Block].ID != a.ID {
			continue
		}
		s := p.rel(a.Start)
		if s < p.tFrom-1e-9 {
			continue
		}
		b := a.Block
		k := len(sc.runs)
		if _, ok := p.startOK(p.prevOf(sc, k), b, p.baseOf(sc, k), s); !ok {
			continue
		}
		// A run shorter than MinRun may stand anywhere in time when the
		// plan completes its block (Validate); fixup drops it otherwise.
		if a.Frames > p.maxFrames(b, sc.planned[b]) || a.Frames < 1 {
			continue
		}
		lo, hi, ok := p.cadenceRange(sc, b, k, s)
		if !ok || s < lo-1e-9 || s > hi+1e-9 {
			continue
		}
		it, ok := p.newRun(b, s)
		if !ok {
			continue
		}
		for it.r.n < a.Frames && it.next() {
		}
		if it.r.n != a.Frames {
			continue
		}
		p.insert(sc, k, it.r)
		keep[keyOf(&it.r)] = true
	}
	changed := map[int]bool{}
	for b := range p.Blocks {
		changed[b] = true
	}
	p.fixup(sc, make([]bool, len(sc.runs)+1), changed)
	for k := range keep {
		found := false
		for i := range sc.runs {
			if keyOf(&sc.runs[i]) == k {
				found = true
				break
			}
		}
		if !found {
			delete(keep, k)
		}
	}
	return sc, keep
}

// Dispatch returns the single best run to start next given the state: the
// plan's next assignment when it is still valid from the mount's present
// state, else the first assignment of a replan. It returns nil when
// nothing can run for the rest of the night.
func Dispatch(p *Problem, plan *Plan, st State) (*Assignment, error) {
	q, err := p.WithState(st.Closures, st.Executed, st.Now)
	if err != nil {
		return nil, err
	}
	if plan != nil {
		for i := range plan.Assignments {
			a := &plan.Assignments[i]
			if a.Executed || q.rel(a.Start) < q.tFrom-1e-9 {
				continue
			}
			if a.Block < 0 || a.Block >= len(q.Blocks) || q.Blocks[a.Block].ID != a.ID {
				return nil, fmt.Errorf("%w: plan assignment of unknown block %q", ErrInput, a.ID)
			}
			// The rest of the plan, not the run alone: a run shorter than
			// MinRun is valid when later runs complete its block.
			sc, _ := q.fromPlan(&Plan{Assignments: plan.Assignments[i:]})
			if len(sc.runs) > 0 && sc.runs[0].b == a.Block && math.Abs(sc.runs[0].s-q.rel(a.Start)) < 1e-6 {
				out := q.assignment(sc, 0)
				return &out, nil
			}
			break
		}
	}
	np, _, err := Replan(p, plan, st)
	if err != nil {
		return nil, err
	}
	for i := range np.Assignments {
		if !np.Assignments[i].Executed {
			out := np.Assignments[i]
			return &out, nil
		}
	}
	return nil, nil
}
