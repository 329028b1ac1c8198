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
// Changed = Dropped + Added.
type ReplanReport struct {
	Kept, Dropped, Added, Changed int
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
	return pl, rep, nil
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
		lo, hi, ok := p.cadenceRange(sc, b, k)
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
