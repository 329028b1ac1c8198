package scheduler

import "math"

// polish is a first-improvement local search on a timeline with two
// moves that destroy-and-repair reaches only by chance:
//
//   - shift: move one run to the best start within its slack (between its
//     predecessor's setup and its successor's), keeping at least its
//     frames;
//   - swap: exchange two adjacent runs (each placed as early as possible,
//     with the same frames).
//
// Cadence runs are left in place. A move of a run in keep must also pay
// for its keep bonus (replanning). It returns whether anything improved.
func (p *Problem) polish(sc *sched, keep map[runKey]bool, keepBonus float64) bool {
	cost := keepCost(keep, keepBonus)
	improved := false
	for pass := 0; pass < 4; pass++ {
		moved := false
		for k := 0; k < len(sc.runs); k++ {
			if p.shiftRun(sc, k, cost) {
				moved = true
			}
		}
		for k := 0; k+1 < len(sc.runs); k++ {
			if p.swapRuns(sc, k, cost) {
				moved = true
			}
		}
		if !moved {
			break
		}
		improved = true
	}
	return improved
}

// shiftRun tries to move runs[k]; it reports whether it did.
func (p *Problem) shiftRun(sc *sched, k int, cost func(*run) float64) bool {
	old := sc.runs[k]
	penalty := cost(&old)
	b := old.b
	d := &p.bd[b]
	if d.every > 0 {
		return false
	}
	prev, base := p.prevOf(sc, k), p.baseOf(sc, k)
	nb, ns := p.nextOf(sc, k+1)
	planned := sc.planned[b] - old.n
	nmax := min(d.maxRun, d.rem-planned)
	first, _, ok := p.earliest(prev, b, base, base)
	if !ok {
		return false
	}
	last := ns - float64(old.n)*d.frame
	step := math.Max(p.quantum, p.step)
	best, bestGain := run{}, 1e-9*math.Max(1, sc.val)
	for s := first; s <= last+1e-9; s = p.ceilQ(s + step) {
		if s != first {
			if _, ok := p.startOK(prev, b, base, s); !ok {
				continue
			}
		}
		it, ok := p.newRun(b, s)
		if !ok {
			continue
		}
		var fit run
		for it.r.n < nmax && it.next() {
			if !p.fitsBefore(&it.r, nb, ns) {
				break
			}
			fit = it.r
		}
		if fit.n < old.n {
			continue
		}
		gain := fit.val - old.val + p.bonusDelta(b, planned+old.n, planned+fit.n)
		if fit.s != old.s || fit.n != old.n {
			gain -= penalty
		}
		if gain > bestGain {
			best, bestGain = fit, gain
		}
	}
	if best.n == 0 {
		return false
	}
	p.replace(sc, k, best)
	return true
}

// swapRuns tries to exchange runs[k] and runs[k+1].
func (p *Problem) swapRuns(sc *sched, k int, cost func(*run) float64) bool {
	a, c := sc.runs[k], sc.runs[k+1]
	if a.b == c.b || p.bd[a.b].every > 0 || p.bd[c.b].every > 0 {
		return false
	}
	prev, base := p.prevOf(sc, k), p.baseOf(sc, k)
	nb, ns := p.nextOf(sc, k+2)
	place := func(prev prevState, b int, base float64, n int) (run, bool) {
		s, _, ok := p.earliest(prev, b, base, base)
		if !ok {
			return run{}, false
		}
		it, ok := p.newRun(b, s)
		if !ok {
			return run{}, false
		}
		for it.r.n < n && it.next() {
		}
		return it.r, it.r.n == n
	}
	r1, ok := place(prev, c.b, base, c.n)
	if !ok {
		return false
	}
	r2, ok := place(p.after(r1.b, r1.s, r1.side1), a.b, p.ceilQ(r1.e), a.n)
	if !ok || !p.fitsBefore(&r2, nb, ns) {
		return false
	}
	if r1.val+r2.val <= a.val+c.val+cost(&a)+cost(&c)+1e-9*math.Max(1, sc.val) {
		return false
	}
	sc.val += r1.val + r2.val - a.val - c.val
	sc.runs[k], sc.runs[k+1] = r1, r2
	return true
}

// keepCost is what changing a run costs: its keep bonus when it is one of
// the runs a replan keeps, else nothing.
func keepCost(keep map[runKey]bool, keepBonus float64) func(*run) float64 {
	return func(r *run) float64 {
		if keep != nil && keep[keyOf(r)] {
			return keepBonus * r.val
		}
		return 0
	}
}

// pushWindow is how far push moves a run later, and pushWork bounds the
// runs one polish's pushes may re-place (a few milliseconds).
const (
	pushWindow = 30 * 60.0
	pushWork   = 200_000
)

// pushRuns tries, for every run, push moves: start it later (up to
// pushWindow) and/or give it more frames, and move the runs after it
// later as far as that needs (same frames each, cadence runs kept on
// their series' slots), where shift and swap move one run at a time and
// so cannot trade a run's loss for another's gain. First improvement;
// it reports whether anything improved.
func (p *Problem) pushRuns(sc *sched, cost func(*run) float64) bool {
	work := pushWork
	improved := false
	for k := 0; k < len(sc.runs) && work > 0; k++ {
		if p.pushRun(sc, k, cost, &work) {
			improved = true
		}
	}
	return improved
}

// pushRun tries the push moves of runs[k] and applies the best.
func (p *Problem) pushRun(sc *sched, k int, cost func(*run) float64, work *int) bool {
	old := sc.runs[k]
	d := &p.bd[old.b]
	prev, base := p.prevOf(sc, k), p.baseOf(sc, k)
	planned := sc.planned[old.b] - old.n
	nmax := min(d.maxRun, d.rem-planned)
	step := math.Max(p.quantum, p.step)
	var best *sched
	bestVal := sc.val + 1e-9*math.Max(1, sc.val)
	trial := sc.clone()
	for s := old.s; s <= old.s+pushWindow+1e-9 && *work > 0; s = p.ceilQ(s + step) {
		if _, ok := p.startOK(prev, old.b, base, s); !ok {
			continue
		}
		it, ok := p.newRun(old.b, s)
		if !ok {
			continue
		}
		for it.r.n < nmax && it.next() {
			if it.r.n < old.n || (s == old.s && it.r.n == old.n) {
				continue
			}
			trial.copyFrom(sc)
			trial.runs[k] = it.r
			if !p.cascade(trial, k+1, work) || !p.seriesOK(trial, old.b) {
				if it.r.n > old.n {
					break // more frames push the rest further still
				}
				continue
			}
			p.recompute(trial)
			v := trial.val
			for j := k; j < len(sc.runs); j++ {
				if r := &sc.runs[j]; r.s != trial.runs[j].s || r.n != trial.runs[j].n {
					v -= cost(r)
				}
			}
			if v > bestVal {
				bestVal = v
				best = trial.clone()
			}
		}
	}
	if best == nil {
		return false
	}
	sc.copyFrom(best)
	return true
}

// cascade re-places runs[k:] after a change before them: each run that
// no longer fits after its predecessor starts at the earliest start that
// does, not earlier than it was, with its frames; a cadence run must stay
// on its series' slots. It stops at the first run that still fits and
// reports false when one cannot be placed.
func (p *Problem) cascade(sc *sched, k int, work *int) bool {
	for j := k; j < len(sc.runs); j++ {
		*work--
		r := sc.runs[j]
		prev, base := p.prevOf(sc, j), p.baseOf(sc, j)
		if _, ok := p.startOK(prev, r.b, base, r.s); ok {
			return true // the rest is as it was
		}
		s, _, ok := p.earliest(prev, r.b, base, r.s)
		if !ok {
			return false
		}
		it, ok := p.newRun(r.b, s)
		if !ok {
			return false
		}
		for it.r.n < r.n && it.next() {
		}
		if it.r.n != r.n {
			return false
		}
		sc.runs[j] = it.r
		if p.bd[r.b].every > 0 && !p.seriesOK(sc, r.b) {
			return false
		}
	}
	return p.tailOK(sc)
}

// tailOK reports whether the last run ends in time.
func (p *Problem) tailOK(sc *sched) bool {
	return len(sc.runs) == 0 || sc.runs[len(sc.runs)-1].e <= p.tEnd+1e-9
}

// seriesOK reports whether block b's runs in sc keep its cadence series
// on slots (true for blocks without cadence).
func (p *Problem) seriesOK(sc *sched, b int) bool {
	d := &p.bd[b]
	if d.every <= 0 {
		return true
	}
	prev := p.execStart[b]
	for j := range sc.runs {
		if sc.runs[j].b != b {
			continue
		}
		if !math.IsNaN(prev) && !onSlot(sc.runs[j].s-prev, d.every, d.tol, 1e-9) {
			return false
		}
		prev = sc.runs[j].s
	}
	return true
}
