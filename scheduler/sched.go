package scheduler

import (
	"math"
)

// sched is a timeline of runs in time order with the frames planned per
// block and its objective value (weighted exposure plus bonuses).
type sched struct {
	runs    []run
	planned []int
	val     float64
}

func (p *Problem) emptySched() *sched {
	return &sched{planned: make([]int, len(p.Blocks))}
}

func (sc *sched) clone() *sched {
	return &sched{runs: append([]run(nil), sc.runs...), planned: append([]int(nil), sc.planned...), val: sc.val}
}

func (sc *sched) copyFrom(o *sched) {
	sc.runs = append(sc.runs[:0], o.runs...)
	sc.planned = append(sc.planned[:0], o.planned...)
	sc.val = o.val
}

// prevOf is the mount's state before runs[k].
func (p *Problem) prevOf(sc *sched, k int) prevState {
	if k == 0 {
		return p.anchorState()
	}
	r := &sc.runs[k-1]
	return p.after(r.b, r.s, r.side1)
}

// baseOf is the quantum boundary from which the mount is free before runs[k].
func (p *Problem) baseOf(sc *sched, k int) float64 {
	if k == 0 {
		return p.ceilQ(p.anchor.free)
	}
	return p.ceilQ(sc.runs[k-1].e)
}

// nextOf is the block and start of runs[k] (-1 and the grid's end past the
// last run).
func (p *Problem) nextOf(sc *sched, k int) (int, float64) {
	if k >= len(sc.runs) {
		return -1, p.tEnd
	}
	return sc.runs[k].b, sc.runs[k].s
}

// bonusDelta is the change of bonus when block b's planned frames go from
// before to after.
func (p *Problem) bonusDelta(b, before, after int) float64 {
	d := &p.bd[b]
	was, is := before >= d.rem && d.rem > 0, after >= d.rem && d.rem > 0
	switch {
	case is && !was:
		return d.bonus
	case was && !is:
		return -d.bonus
	}
	return 0
}

// insert puts r at position k.
func (p *Problem) insert(sc *sched, k int, r run) {
	sc.runs = append(sc.runs, run{})
	copy(sc.runs[k+1:], sc.runs[k:])
	sc.runs[k] = r
	sc.val += r.val + p.bonusDelta(r.b, sc.planned[r.b], sc.planned[r.b]+r.n)
	sc.planned[r.b] += r.n
}

// replace swaps runs[k] for r (same block).
func (p *Problem) replace(sc *sched, k int, r run) {
	old := sc.runs[k]
	sc.val += r.val - old.val + p.bonusDelta(r.b, sc.planned[r.b], sc.planned[r.b]-old.n+r.n)
	sc.planned[r.b] += r.n - old.n
	sc.runs[k] = r
}

// removeMarked drops the runs with del[k] set and returns, for every
// remaining position, whether its gap merged a removed run (dirty[k] is
// the gap before runs[k]; dirty[len] the last gap).
func (p *Problem) removeMarked(sc *sched, del []bool) []bool {
	dirty := make([]bool, 0, len(sc.runs)+1)
	out := sc.runs[:0]
	merged := false
	for k, r := range sc.runs {
		if del[k] {
			sc.val -= r.val + p.bonusDelta(r.b, sc.planned[r.b]-r.n, sc.planned[r.b])
			sc.planned[r.b] -= r.n
			merged = true
			continue
		}
		dirty = append(dirty, merged)
		merged = false
		out = append(out, r)
	}
	dirty = append(dirty, merged)
	sc.runs = out
	return dirty
}

// gapOK reports whether runs[k] may start where it does after its
// predecessor.
func (p *Problem) gapOK(sc *sched, k int) bool {
	r := &sc.runs[k]
	_, ok := p.startOK(p.prevOf(sc, k), r.b, p.baseOf(sc, k), r.s)
	return ok
}

// fixup removes runs that no longer fit after their predecessor changed
// (a longer slew, a focus that is now due) and cadence series that a
// removal broke, until the timeline is consistent. dirty (as returned by
// removeMarked) is updated; the removed blocks are added to changed.
func (p *Problem) fixup(sc *sched, dirty []bool, changed map[int]bool) []bool {
	for {
		var del []bool
		mark := func(k int) {
			if del == nil {
				del = make([]bool, len(sc.runs))
			}
			del[k] = true
			changed[sc.runs[k].b] = true
		}
		for k := range sc.runs {
			if !p.gapOK(sc, k) {
				mark(k)
				break // later gaps depend on this one; recheck after removal
			}
		}
		if del == nil {
			for b := range changed {
				if p.bd[b].every > 0 {
					p.markBrokenSeries(sc, b, &del, mark)
				}
				if sc.planned[b] < p.bd[b].rem {
					// A run shorter than MinRun is only allowed as the
					// remainder of a completed block.
					for k := range sc.runs {
						if sc.runs[k].b == b && sc.runs[k].n < p.bd[b].minRun {
							mark(k)
						}
					}
				}
			}
		}
		if del == nil {
			return dirty
		}
		nd := p.removeMarked(sc, del)
		// Merge the old dirty flags into the new positions: simplest is
		// to mark every gap next to a removal dirty and keep the old ones.
		dirty = mergeDirty(dirty, del, nd)
	}
}

// mergeDirty carries dirty flags over a removal: old is per gap before the
// removal (len = runs+1), del the removed runs, nd the new flags.
func mergeDirty(old, del, nd []bool) []bool {
	out := make([]bool, len(nd))
	j := 0
	acc := false
	for k := 0; k <= len(del); k++ {
		acc = acc || (k < len(old) && old[k])
		if k < len(del) && del[k] {
			continue
		}
		out[j] = acc || nd[j]
		acc = false
		j++
	}
	return out
}

// markBrokenSeries marks for removal the shorter side of a cadence series
// whose spacing is broken.
func (p *Problem) markBrokenSeries(sc *sched, b int, del *[]bool, mark func(int)) {
	d := &p.bd[b]
	var idx []int
	for k := range sc.runs {
		if sc.runs[k].b == b {
			idx = append(idx, k)
		}
	}
	if len(idx) > 0 && !math.IsNaN(p.execStart[b]) {
		// The series continues an executed run, which stays: a break
		// removes the planned runs from there on.
		prev := p.execStart[b]
		for i, k := range idx {
			if !onSlot(sc.runs[k].s-prev, d.every, d.tol, 1e-9) {
				for _, k := range idx[i:] {
					mark(k)
				}
				return
			}
			prev = sc.runs[k].s
		}
		return
	}
	for i := 1; i < len(idx); i++ {
		if !onSlot(sc.runs[idx[i]].s-sc.runs[idx[i-1]].s, d.every, d.tol, 1e-9) {
			if i <= len(idx)-i {
				for _, k := range idx[:i] {
					mark(k)
				}
			} else {
				for _, k := range idx[i:] {
					mark(k)
				}
			}
			return
		}
	}
}

// cadenceRange is the allowed start range of a new run of cadence block b
// inserted at position k, at or after from (the first slot that ends
// there), and whether one may go there at all. A series may skip slots:
// consecutive runs are a whole number of Every apart, within Tolerance
// (see onSlot); the skipped slots earn nothing.
func (p *Problem) cadenceRange(sc *sched, b, k int, from float64) (lo, hi float64, ok bool) {
	d := &p.bd[b]
	lo, hi = math.Inf(-1), math.Inf(1)
	if d.every <= 0 {
		return lo, hi, true
	}
	before, after := -1, -1
	for j := k - 1; j >= 0; j-- {
		if sc.runs[j].b == b {
			before = j
			break
		}
	}
	for j := k; j < len(sc.runs); j++ {
		if sc.runs[j].b == b {
			after = j
			break
		}
	}
	bs := math.NaN()
	if before >= 0 {
		bs = sc.runs[before].s
	} else if !math.IsNaN(p.execStart[b]) {
		bs = p.execStart[b] // the series began with an executed run
	}
	switch {
	case !math.IsNaN(bs):
		// The first slot after the previous run that ends at or after from.
		m := math.Max(1, math.Ceil((from-bs-d.tol)/d.every-1e-9))
		lo, hi = bs+m*d.every-d.tol, bs+m*d.every+d.tol
		if after >= 0 {
			// Between two runs of the series: the slot must also be a
			// whole number of Every before the next one.
			as := sc.runs[after].s
			j := math.Round((as - bs - m*d.every) / d.every)
			if j < 1 {
				return 0, 0, false
			}
			lo, hi = math.Max(lo, as-j*d.every-d.tol), math.Min(hi, as-j*d.every+d.tol)
			if lo > hi {
				return 0, 0, false
			}
		}
		return lo, hi, true
	case after >= 0:
		// Before the series: the latest slot that starts before the next
		// run's slot and ends at or after from.
		as := sc.runs[after].s
		m := math.Max(1, math.Floor((as-from+d.tol)/d.every+1e-9))
		return as - m*d.every - d.tol, as - m*d.every + d.tol, true
	}
	return lo, hi, true
}

// onSlot reports whether a gap g between the starts of two consecutive
// runs of a cadence series is a whole number (>= 1) of every, within tol
// (and slack, for checks on rounded times).
func onSlot(g, every, tol, slack float64) bool {
	if g < every-tol-slack {
		return false
	}
	for _, m := range []float64{math.Floor(g / every), math.Ceil(g / every)} {
		if m >= 1 && math.Abs(g-m*every) <= tol+slack {
			return true
		}
	}
	return false
}

// recompute rebuilds sc.val and sc.planned from the runs (a check against
// drift of the incremental sums).
func (p *Problem) recompute(sc *sched) {
	for i := range sc.planned {
		sc.planned[i] = 0
	}
	sc.val = 0
	for _, r := range sc.runs {
		sc.planned[r.b] += r.n
		sc.val += r.val
	}
	for b, n := range sc.planned {
		if d := &p.bd[b]; d.rem > 0 && n >= d.rem {
			sc.val += d.bonus
		}
	}
}
