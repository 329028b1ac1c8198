package scheduler

import (
	"math"
	"math/rand/v2"
	"runtime"
	"sort"
	"sync"
	"time"
)

// Destroy operators of the large-neighbourhood search.
const (
	destroyRandom  = iota // k random runs
	destroySegment        // every run in a random stretch of 20-120 min
	destroyRelated        // Shaw's related removal: close in time and on the sky
	destroyWorst          // the runs with the lowest value per second
	destroyBlock          // every run of one block
	destroyCadence        // the runs in the way of a cadence series
	numDestroy
)

// Repair operators: greedy insertion by value, by value per second, by
// value with the bonus prorated or by tightness, each with and without
// noise.
var repairOps = [...]struct {
	mode  int
	noise float64
}{{byValue, 0}, {byValue, 0.15}, {byDensity, 0}, {byDensity, 0.15}, {byProgress, 0}, {byProgress, 0.15},
	{byTightness, 0}, {byTightness, 0.15}}

// Adaptive weights (Ropke & Pisinger 2006, sec. 3.4): scores for a new
// best, an improvement, an accepted worse solution; reaction factor and
// segment length.
const (
	sigmaBest    = 33
	sigmaBetter  = 9
	sigmaAccept  = 13
	reaction     = 0.1
	segmentIters = 100
	// shawD is the determinism parameter of Shaw's (1998) removal: the
	// r-th candidate is taken with r = floor(y^D * n), y uniform.
	shawD = 4
	// annealCycles is the number of cooling cycles of the acceptance.
	annealCycles = 3
	// timingIters is when the search decides from its pace whether the
	// budget or the iteration count will end it (the annealing's clock).
	timingIters = 32
	// convergeBudgetShare: a search clocked by time converges only after
	// 1/convergeBudgetShare of the budget without improvement as well.
	convergeBudgetShare = 10
)

// Solve plans the night: a constructive schedule (greedy insertion by
// value) improved by adaptive large-neighbourhood search (see the package
// doc). It is deterministic for a given Options.Seed as long as the
// iteration count, not the time budget, ends the search.
func Solve(p *Problem) *Plan {
	sc, iters, stop := p.solve(nil, 0)
	pl := p.toPlan(sc, "alns", iters)
	pl.Stopped = stop
	return pl
}

// solve runs the search from the constructive schedule, or from start when
// it is not nil; runs equal to a key of keep earn keepBonus times their
// value (replanning).
func (p *Problem) solve(start *sched, keepBonus float64, keep ...map[runKey]bool) (*sched, int, string) {
	o := p.Options
	rng := rand.New(rand.NewPCG(o.Seed, 0x6e6c6f6f6d))
	var cur *sched
	if start != nil {
		cur = start.clone()
		p.recompute(cur)
		dirty := make([]bool, len(cur.runs)+1)
		for i := range dirty {
			dirty[i] = true
		}
		p.repair(cur, dirty, nil, byValue, 0, nil)
	} else {
		// The three starting schedules are independent (no randomness, the
		// problem only read): with more than one worker the cadence-first
		// and the chronological greedy ones are built beside the
		// constructive one, which leaves the result unchanged.
		var cad, g *sched
		var wg sync.WaitGroup
		if o.Workers != 1 && runtime.GOMAXPROCS(0) > 1 {
			wg.Add(2)
			go func() { defer wg.Done(); cad = p.constructiveCadenceFirst() }()
			go func() { defer wg.Done(); g = p.greedy() }()
		}
		cur = p.constructive()
		wg.Wait()
		if cancelled(o.Cancel) {
			return cur, 0, StopCancelled
		}
		if o.Workers == 1 || runtime.GOMAXPROCS(0) <= 1 {
			cad = p.constructiveCadenceFirst()
			g = p.greedy()
		}
		if cad != nil && cad.val > cur.val {
			cur = cad
		}
		if g.val > cur.val {
			cur = g
			dirty := make([]bool, len(cur.runs)+1)
			for i := range dirty {
				dirty[i] = true
			}
			p.repair(cur, dirty, nil, byValue, 0, nil)
		}
	}
	var km map[runKey]bool
	if len(keep) > 0 {
		km = keep[0]
	}
	objective := func(sc *sched) float64 {
		if km == nil || keepBonus == 0 {
			return sc.val
		}
		v := sc.val
		for _, r := range sc.runs {
			if km[keyOf(&r)] {
				v += keepBonus * r.val
			}
		}
		return v
	}
	if len(cur.runs) == 0 && len(p.Blocks) == 0 {
		return cur, 0, StopIterations
	}
	best := cur.clone()
	curObj := objective(cur)
	bestObj := curObj
	t0 := 0.05 * math.Max(curObj, 1) / math.Ln2
	began := time.Now()
	deadline := time.Time{}
	if o.Budget > 0 {
		deadline = began.Add(o.Budget)
	}
	wD := make([]float64, numDestroy)
	wR := make([]float64, len(repairOps))
	for i := range wD {
		wD[i] = 1
	}
	for i := range wR {
		wR[i] = 1
	}
	sD := make([]float64, numDestroy)
	nD := make([]float64, numDestroy)
	sR := make([]float64, len(repairOps))
	nR := make([]float64, len(repairOps))
	trial := p.emptySched()
	it := 0
	stop := StopIterations
	// The clock of the annealing: the fraction of the search done, by
	// iterations, or by time when the budget will end the search
	// (timed, decided after the first iterations from their pace).
	timed := false
	cycle := 0
	cycleLen := max(1, o.Iterations/annealCycles)
	if o.ConvergeIterations > 0 {
		cycleLen = min(cycleLen, max(1, o.ConvergeIterations/2))
	}
	// Convergence: the last iteration and instant at which the best
	// improved by more than ConvergeTolerance.
	markObj, markIt, markT := bestObj, 0, began
	for ; it < o.Iterations; it++ {
		if !deadline.IsZero() && it%8 == 0 {
			now := time.Now()
			if now.After(deadline) {
				stop = StopBudget
				break
			}
			if it == timingIters || !timed && it < timingIters && now.Sub(began) > o.Budget/20 {
				// Projected time of all iterations against the budget.
				el := now.Sub(began).Seconds()
				timed = el/float64(max(it, 1))*float64(o.Iterations) > o.Budget.Seconds()
			}
		}
		if cancelled(o.Cancel) {
			stop = StopCancelled
			break
		}
		// Simulated annealing in cycles: each cools from t0 to t0/1000 and
		// the next starts again from the best solution. By iterations a
		// cycle is a third of the iterations (at most half of
		// ConvergeIterations, so that a search with a huge iteration cap
		// still cools); by
		// time the budget holds annealCycles cycles and ends cold.
		var f float64
		if timed {
			f = math.Max(float64(it)/float64(o.Iterations), time.Since(began).Seconds()/o.Budget.Seconds())
			f = math.Min(f, 1) * annealCycles
		} else {
			f = float64(it) / float64(cycleLen)
		}
		c := int(f)
		if timed {
			c = min(c, annealCycles-1)
		}
		if c > cycle {
			// Convergence is judged when a cooling cycle ends: the cycles
			// since the last improvement worth keeping (at least
			// ConvergeIterations, and a tenth of the budget when time
			// clocks the search) found nothing.
			if o.ConvergeIterations > 0 && it-markIt >= o.ConvergeIterations &&
				(!timed || time.Since(markT) >= o.Budget/convergeBudgetShare) {
				stop = StopConverged
				break
			}
			cycle = c
			cur.copyFrom(best)
			curObj = bestObj
		}
		temp := t0 * math.Pow(1e-3, f-float64(c))
		if p.annealHook != nil {
			p.annealHook(temp/t0, timed)
		}
		di, ri := roulette(wD, rng), roulette(wR, rng)
		trial.copyFrom(cur)
		changed := map[int]bool{}
		del := p.destroy(trial, di, rng)
		for k, x := range del {
			if x {
				changed[trial.runs[k].b] = true
			}
		}
		dirty := p.removeMarked(trial, del)
		dirty = p.fixup(trial, dirty, changed)
		ch := make([]int, 0, len(changed))
		for b := range changed {
			ch = append(ch, b)
		}
		sort.Ints(ch)
		op := repairOps[ri]
		p.repair(trial, dirty, ch, op.mode, op.noise, rng)
		obj := objective(trial)
		sigma := 0.0
		switch {
		case obj > bestObj+1e-9:
			if p.polish(trial, km, keepBonus) {
				obj = objective(trial)
			}
			best.copyFrom(trial)
			bestObj = obj
			cur.copyFrom(trial)
			curObj = obj
			sigma = sigmaBest
			if bestObj > markObj+o.ConvergeTolerance*math.Abs(markObj) {
				markObj, markIt, markT = bestObj, it+1, time.Now()
			}
		case obj > curObj+1e-9:
			cur.copyFrom(trial)
			curObj = obj
			sigma = sigmaBetter
		case obj < curObj-1e-9 && rng.Float64() < math.Exp((obj-curObj)/temp):
			cur.copyFrom(trial)
			curObj = obj
			sigma = sigmaAccept
		}
		sD[di] += sigma
		nD[di]++
		sR[ri] += sigma
		nR[ri]++
		if (it+1)%segmentIters == 0 {
			adapt(wD, sD, nD)
			adapt(wR, sR, nR)
		}
	}
	if stop != StopCancelled {
		p.polish(best, km, keepBonus)
		if p.pushRuns(best, keepCost(km, keepBonus)) {
			p.polish(best, km, keepBonus)
		}
	}
	p.recompute(best)
	return best, it, stop
}

func adapt(w, s, n []float64) {
	for i := range w {
		if n[i] > 0 {
			w[i] = w[i]*(1-reaction) + reaction*s[i]/n[i]
		}
		w[i] = math.Max(w[i], 0.05)
		s[i], n[i] = 0, 0
	}
}

func roulette(w []float64, rng *rand.Rand) int {
	sum := 0.0
	for _, x := range w {
		sum += x
	}
	u := rng.Float64() * sum
	for i, x := range w {
		u -= x
		if u < 0 {
			return i
		}
	}
	return len(w) - 1
}

// constructive is the fast constructive schedule: greedy insertion by
// value from an empty night.
func (p *Problem) constructive() *sched {
	sc := p.emptySched()
	p.repair(sc, []bool{true}, nil, byValue, 0, nil)
	return sc
}

// constructiveCadenceFirst lays out the cadence blocks' runs first, each
// series through the night while the night is empty, then fills the rest
// by value. Inserting by value alone lets long runs take the night before
// the spaced runs of a light curve can find their slots; the solver keeps
// whichever start is worth more. Nil when no block has a cadence.
func (p *Problem) constructiveCadenceFirst() *sched {
	var cad []int
	for b := range p.Blocks {
		if p.bd[b].every > 0 {
			cad = append(cad, b)
		}
	}
	if len(cad) == 0 {
		return nil
	}
	sc := p.emptySched()
	p.repair(sc, nil, cad, byValue, 0, nil)
	dirty := make([]bool, len(sc.runs)+1)
	for i := range dirty {
		dirty[i] = true
	}
	p.repair(sc, dirty, nil, byValue, 0, nil)
	return sc
}

// destroy marks runs to remove.
func (p *Problem) destroy(sc *sched, op int, rng *rand.Rand) []bool {
	n := len(sc.runs)
	del := make([]bool, n)
	if n == 0 {
		return del
	}
	k := 1 + rng.IntN(max(1, min(n, 2+n/5, 12)))
	switch op {
	case destroyRandom:
		for _, i := range rng.Perm(n)[:k] {
			del[i] = true
		}
	case destroySegment:
		l := (20 + 100*rng.Float64()) * 60
		c := p.tFrom + rng.Float64()*(p.tEnd-p.tFrom)
		a, b := c-l/2, c+l/2
		hit := false
		for i, r := range sc.runs {
			if r.s < b && r.e > a {
				del[i] = true
				hit = true
			}
		}
		if !hit {
			del[rng.IntN(n)] = true
		}
	case destroyRelated:
		seed := rng.IntN(n)
		rel := make([]float64, n)
		idx := make([]int, 0, n-1)
		for i := range sc.runs {
			if i != seed {
				rel[i] = p.relatedness(&sc.runs[seed], &sc.runs[i])
				idx = append(idx, i)
			}
		}
		sort.Slice(idx, func(a, b int) bool { return rel[idx[a]] < rel[idx[b]] })
		del[seed] = true
		pickShaw(idx, k-1, del, rng)
	case destroyWorst:
		dens := make([]float64, n)
		idx := make([]int, n)
		for i, r := range sc.runs {
			dens[i] = r.val / math.Max(r.e-p.baseOf(sc, i), 1)
			idx[i] = i
		}
		sort.Slice(idx, func(a, b int) bool { return dens[idx[a]] < dens[idx[b]] })
		pickShaw(idx, k, del, rng)
	case destroyCadence:
		if !p.clearSeries(sc, del, rng) {
			del[rng.IntN(n)] = true
		}
	case destroyBlock:
		b := sc.runs[rng.IntN(n)].b
		for i, r := range sc.runs {
			if r.b == b {
				del[i] = true
				if i+1 < n && rng.IntN(2) == 0 {
					del[i+1] = true
				}
			}
		}
	}
	return del
}

// clearSeries picks a cadence block with frames left and a series start
// (its existing series' next slot, or a random observable time) and marks
// the runs that overlap the slots Every apart from there (each slot widened
// by the longest setup). It reports whether there was a cadence block.
func (p *Problem) clearSeries(sc *sched, del []bool, rng *rand.Rand) bool {
	var cads []int
	for b := range p.bd {
		if d := &p.bd[b]; d.every > 0 && sc.planned[b] < d.rem && p.ivNext(b, p.tFrom) < p.tEnd {
			cads = append(cads, b)
		}
	}
	if len(cads) == 0 {
		return false
	}
	b := cads[rng.IntN(len(cads))]
	d := &p.bd[b]
	s0 := math.NaN()
	for k := len(sc.runs) - 1; k >= 0; k-- {
		if sc.runs[k].b == b {
			s0 = sc.runs[k].s + d.every
			break
		}
	}
	if math.IsNaN(s0) {
		w := p.Vis[b].Windows
		if len(w) == 0 {
			return false
		}
		win := w[rng.IntN(len(w))]
		s0 = float64(win.Start)*p.step + rng.Float64()*float64(win.Len())*p.step
	}
	dur := float64(max(1, d.minRun))*d.frame + p.maxSetupTypical()
	left := (d.rem - sc.planned[b] + d.minRun - 1) / max(1, d.minRun)
	for k := 0; k < left; k++ {
		a, z := s0+float64(k)*d.every-p.maxSetupTypical(), s0+float64(k)*d.every+dur
		if a >= p.tEnd {
			break
		}
		for i, r := range sc.runs {
			if r.s < z && r.e > a {
				del[i] = true
			}
		}
	}
	return true
}

// maxSetupTypical is a generous setup (a long slew, filter, focus,
// acquisition) used to widen cleared slots.
func (p *Problem) maxSetupTypical() float64 {
	return 60 + p.oh.settle + p.oh.filter + p.oh.focus + p.oh.acq
}

// pickShaw marks k entries of the ranked list idx, the r-th with r =
// floor(y^D len) (Shaw 1998).
func pickShaw(idx []int, k int, del []bool, rng *rand.Rand) {
	for ; k > 0 && len(idx) > 0; k-- {
		r := int(math.Pow(rng.Float64(), shawD) * float64(len(idx)))
		del[idx[r]] = true
		idx = append(idx[:r], idx[r+1:]...)
	}
}

// relatedness of two runs (smaller = more related, Shaw 1998): distance
// in time as a fraction of the night, plus angular distance on the sky
// over pi, plus 0.3 for a different filter.
func (p *Problem) relatedness(a, b *run) float64 {
	ma, mb := (a.s+a.e)/2, (b.s+b.e)/2
	r := math.Abs(ma-mb) / math.Max(p.tEnd-p.tFrom, 1)
	i := p.stepAt(ma)
	ta, tb := p.Tracks[a.b], p.Tracks[b.b]
	d1, d2 := float64(ta.Dec[i]), float64(tb.Dec[i])
	c := math.Sin(d1)*math.Sin(d2) + math.Cos(d1)*math.Cos(d2)*math.Cos(float64(ta.HA[i]-tb.HA[i]))
	r += math.Acos(math.Max(-1, math.Min(1, c))) / math.Pi
	if p.bd[a.b].filter != p.bd[b.b].filter {
		r += 0.3
	}
	return r
}

// runKey identifies a run for replanning (block, start to the ms, frames).
type runKey struct {
	b, n int
	ms   int64
}

func keyOf(r *run) runKey { return runKey{b: r.b, n: r.n, ms: int64(math.Round(r.s * 1000))} }

// greedy is the baseline: whenever the mount is free, start the
// highest-ranked block (priority * urgency, then quality) that can start
// right after its setup, with as many frames as fit; when none can, wait
// one grid step.
//
// The blocks are tried in decreasing order of priority * urgency, and the
// search at one instant stops at the first block whose rank cannot beat
// the best so far (quality is at most 1); a block not observable before
// the longest possible setup has elapsed is skipped without computing its
// setup. Both leave the choice unchanged (ties go to the lower index, as
// in a scan of every block).
func (p *Problem) greedy() *sched {
	sc := p.emptySched()
	order := make([]int, len(p.Blocks))
	pu := make([]float64, len(p.Blocks))
	for b := range order {
		order[b] = b
		pu[b] = p.Blocks[b].Priority * p.Urgency[b]
	}
	sort.SliceStable(order, func(i, j int) bool { return pu[order[i]] > pu[order[j]] })
	reach := p.setupCeiling()
	t := p.ceilQ(p.anchor.free)
	for t < p.tEnd {
		k := len(sc.runs)
		prev := p.prevOf(sc, k)
		var best run
		bestRank, bestB := -1.0, -1
		for _, b := range order {
			if bestRank >= 0 && pu[b]*(1+1e-3) < bestRank {
				break
			}
			d := &p.bd[b]
			planned := sc.planned[b]
			nmax := p.maxFrames(b, planned)
			if nmax <= 0 {
				continue
			}
			// Every start tried below lies within reach of t.
			if p.ivNext(b, t) > t+reach {
				continue
			}
			lo, hi, ok := p.cadenceRange(sc, b, k, t)
			if !ok {
				continue
			}
			s := t
			var good bool
			for iter := 0; iter < 4; iter++ {
				su := p.setup(prev, b, s)
				need := p.ceilQ(t + su.total())
				if need <= s+1e-9 {
					good = p.setupClear(s, su.total())
					break
				}
				s = need
			}
			if !good || s < lo-1e-9 || s > hi+1e-9 {
				continue
			}
			it, ok := p.newRun(b, s)
			if !ok {
				continue
			}
			for it.r.n < nmax && it.next() {
			}
			if it.r.n < p.minFrames(b, planned) {
				continue
			}
			rank := pu[b] * (1 + 1e-3*float64(d.q[p.stepAt(s)]))
			if rank > bestRank || rank == bestRank && b < bestB {
				bestRank, best, bestB = rank, it.r, b
			}
		}
		if bestRank < 0 {
			t = p.ceilQ(float64(p.stepAt(t)+1) * p.step)
			continue
		}
		p.insert(sc, k, best)
		t = p.ceilQ(best.e)
	}
	return sc
}

// setupCeiling bounds every setup (setup's total) from above, plus one
// quantum of rounding: a slew of 720 deg on axis 1 (more than it travels:
// a german mount's two pier sides span at most 600 deg with the flip zone
// within +-30 deg of the meridian) and 360 deg on axis 2, settling, a
// filter change, focus and acquisition.
func (p *Problem) setupCeiling() float64 {
	o := &p.Site.Overheads
	slew := math.Max(AxisSeconds(720, o.Axis1RateDegS, o.Axis1AccelDegS2), AxisSeconds(360, o.Axis2RateDegS, o.Axis2AccelDegS2))
	return slew + p.oh.settle + p.oh.filter + p.oh.focus + p.oh.acq + p.quantum
}

// Greedy returns the baseline plan (see greedy).
func Greedy(p *Problem) *Plan {
	return p.toPlan(p.greedy(), "greedy", 0)
}
