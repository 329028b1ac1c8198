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
	cost := func(r *run) float64 {
		if keep != nil && keep[keyOf(r)] {
			return keepBonus * r.val
		}
		return 0
	}
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
