package scheduler

import (
	"math"
)

// BoundDP returns an upper bound on the objective from the run-indexed
// time formulation of the night: one 0-1 variable per possible run
// (block, start quantum, frames), at most one run at any instant, the
// formulation of Sousa & Wolsey (1992, Math. Programming 54, 353) for
// single-machine scheduling. The constraints that couple blocks' runs are
// dualised with multipliers >= 0: each block's frame budget (mu_b), at
// most one run shorter than MinRun per block (nu_b, only a remainder run
// may be short), and for cadence blocks at most one run start in each
// window of Every - Tolerance (two starts closer than that would break
// the series' spacing) and at most seriesMax_b runs in all (kappa_b: the
// starts Every - Tolerance apart that fit between the block's first and
// last observable instants, and its frames' worth):
//
//	L = sum_b mu_b rem_b + sum_b nu_b + sum_windows rho_w + sum_b kappa_b seriesMax_b
//	    + max over sequences of runs of sum_runs (val + (bonus_b/rem_b - mu_b) n - nu_b [short] - rho_w(run) - kappa_b).
//
// The inner maximum is exact dynamic programming over (quantum, filter of
// the last run):
//
//	W(q, f) = max( W(q+1, f), max over b, n of weight(b, s, n) + W(q', f_b) ),  s = q + setup(f, b)
//
// with setup(f, b) the least setup a run of b can have after a run with
// filter f (settle and acquisition, the filter change, the focus run that
// a filter change or the first run of the night asks for) and q' the
// first quantum after the run. Runs are built by the solvers' own frame
// layout (readout, dithers, meridian flips, visibility, closures). Relaxed
// are: slews, the periodic focus, closures during setups, the rest of the
// cadence spacing; the completion bonus is spread over the frames
// (bonus_b/rem_b each, which never undercounts since a block gets at most
// rem_b frames), and dropped where the block's windows cannot hold its
// frames left. L is an upper bound for every choice of multipliers (weak
// duality); because interval scheduling has an integral linear relaxation,
// its minimum equals the bound of the linear relaxation of the
// formulation with those constraints. The multipliers follow the
// subgradient method (Polyak steps toward the greedy plan's value, step
// halving after stalls; Held, Wolfe & Crowder 1974, Math. Programming 6,
// 62); the least L seen is returned.
func BoundDP(p *Problem) float64 { return boundDP(p, p.greedy().val, 120) }

func boundDP(p *Problem, lb float64, iters int) float64 {
	x := newLagDP(p)
	if len(x.active) == 0 {
		return 0
	}
	A := len(x.active)
	// Multipliers: mu (frame budgets), nu (one short run per block), then
	// one per cadence window (one run start each).
	lam := make([]float64, 2*A+x.nCad)
	best, _, _ := subgradient(x, lam, lb, iters, 1, 6, func(l []float64) (float64, []int, []int, []int) {
		return x.solve(l[:A], l[A:2*A], l[2*A:])
	})
	return best
}

// UpperBound is the smallest of BoundDP, Bound and BoundPath (all are
// valid; BoundPath is +Inf on instances too large for it).
func UpperBound(p *Problem) float64 {
	return math.Min(math.Min(BoundDP(p), Bound(p, DefaultBoundSlot)), BoundPath(p))
}

type lagRun struct {
	n     int32
	qe    int32
	val   float32
	short bool // fewer frames than MinRun: allowed once per block
}

type lagDP struct {
	p       *Problem
	active  []int
	filters int
	qN, q0  int
	// runs of active block a starting at quantum qs: runs[off[a][qs]:off[a][qs+1]]
	off  [][]int32
	runs []lagRun
	// setup quanta after a run with filter f (filters = unknown/anchor)
	kq   [][]int // [f][a]
	fil  []int   // filter of active block a
	bpf  []float64
	W    []float64 // (qN+1) * (filters+1)
	arg  []int32   // chosen option per state: -1 wait, -2 stop, else run index
	argA []int32
	R    []float64 // best run value by (start quantum, block)
	Rarg []int32
	// Cadence blocks: at most one run start in each window of cwq[a]
	// quanta (Every - Tolerance); their multipliers start at cOff[a] in
	// the cadence part of lambda (cwq[a] = 0: not a cadence block).
	cwq  []int
	cOff []int
	// sOff[a] is the multiplier of cadence block a's series cap (at most
	// seriesMax runs tonight) in the cadence part of lambda; cRHS holds
	// the right-hand side of every cadence constraint (1 run start per
	// window, seriesMax per series).
	sOff []int
	cRHS []float64
	nCad int
}

func newLagDP(p *Problem) *lagDP {
	x := &lagDP{p: p}
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.rem > 0 && p.ivNext(b, p.tFrom) < p.tEnd {
			x.active = append(x.active, b)
		}
	}
	maxF := -1
	for b := range p.bd {
		maxF = max(maxF, p.bd[b].filter)
	}
	x.filters = maxF + 1
	x.qN = int(math.Floor(p.tEnd/p.quantum + 1e-9))
	x.q0 = int(math.Round(p.ceilQ(p.anchor.free) / p.quantum))
	x.off = make([][]int32, len(x.active))
	x.fil = make([]int, len(x.active))
	x.bpf = make([]float64, len(x.active))
	x.cwq = make([]int, len(x.active))
	x.cOff = make([]int, len(x.active))
	x.sOff = make([]int, len(x.active))
	for a, b := range x.active {
		d := &p.bd[b]
		if d.every > 0 {
			x.cwq[a] = max(1, int(math.Floor((d.every-d.tol)/p.quantum)))
			x.cOff[a] = x.nCad
			x.nCad += x.qN/x.cwq[a] + 1
			for len(x.cRHS) < x.nCad {
				x.cRHS = append(x.cRHS, 1)
			}
			x.sOff[a] = x.nCad
			x.nCad++
			x.cRHS = append(x.cRHS, float64(p.seriesMax(b)))
		}
		x.fil[a] = d.filter
		if p.framesPossible(b) >= d.rem {
			x.bpf[a] = d.bonus / float64(d.rem)
		}
		off := make([]int32, x.qN+1)
		nmax := min(d.maxRun, d.rem)
		nlow := d.rem
		if d.rem > d.minRun {
			nlow = 1 // a remainder run may be this short
		}
		for qs := 0; qs < x.qN; qs++ {
			off[qs] = int32(len(x.runs))
			if qs < x.q0 {
				continue
			}
			it, ok := p.newRun(b, float64(qs)*p.quantum)
			if !ok {
				continue
			}
			for it.r.n < nmax && it.next() {
				if it.r.n < nlow || (it.r.n < d.minRun && it.r.n != d.rem && nlow == d.rem) {
					continue
				}
				qe := int32(math.Round(p.ceilQ(it.r.e) / p.quantum))
				x.runs = append(x.runs, lagRun{n: int32(it.r.n), qe: qe, val: float32(it.r.val), short: it.r.n < d.minRun})
			}
		}
		off[x.qN] = int32(len(x.runs))
		x.off[a] = off
	}
	// Least setups, in quanta, after a run with filter f (index filters
	// stands for the anchor: the executed run's filter or none).
	x.kq = make([][]int, x.filters+1)
	for f := 0; f <= x.filters; f++ {
		x.kq[f] = make([]int, len(x.active))
		prevFilter, focused := f, true
		if f == x.filters {
			prevFilter, focused = p.anchor.filter, p.anchor.focused
		}
		for a, b := range x.active {
			d := &p.bd[b]
			changed := prevFilter != d.filter
			fc := 0.0
			if changed {
				fc = p.oh.filter
			}
			tot := math.Max(p.oh.settle, fc) + p.oh.acq
			if p.oh.focus > 0 && (!focused || changed && p.oh.focusOnFilter) {
				tot += p.oh.focus
			}
			x.kq[f][a] = int(math.Ceil(tot/p.quantum - 1e-9))
		}
	}
	S := (x.qN + 1) * (x.filters + 1)
	x.W = make([]float64, S)
	x.arg = make([]int32, S)
	x.argA = make([]int32, S)
	return x
}

// solve runs the DP for the multipliers mu (frame budgets) and nu (one
// short run per block) and returns its value, the frames of every active
// block in its solution and its short runs. The best run of each
// block from each start quantum, R(a, s) = max_n weight + W(q', f_a), does
// not depend on the previous filter, so it is computed once per (a, s)
// and W(q, f) = max(W(q+1, f), max_a R(a, q + setup(f, a))).
func (x *lagDP) solve(mu, nu, cad []float64) (float64, []int, []int, []int) {
	F := x.filters + 1
	A := len(x.active)
	idx := func(q, f int) int { return q*F + f }
	for f := 0; f < F; f++ {
		x.W[idx(x.qN, f)] = 0
		x.arg[idx(x.qN, f)] = -2
	}
	if len(x.R) == 0 {
		x.R = make([]float64, (x.qN+1)*A)
		x.Rarg = make([]int32, (x.qN+1)*A)
	}
	for a := 0; a < A; a++ {
		x.R[x.qN*A+a] = math.Inf(-1)
	}
	coef := make([]float64, A)
	for a := range x.active {
		coef[a] = x.bpf[a] - mu[a]
	}
	for q := x.qN - 1; q >= x.q0; q-- {
		for a := 0; a < A; a++ {
			off := x.off[a]
			nf := x.fil[a]
			best, arg := math.Inf(-1), int32(-1)
			pen := 0.0
			if x.cwq[a] > 0 {
				pen = cad[x.cOff[a]+q/x.cwq[a]] + cad[x.sOff[a]]
			}
			for r := off[q]; r < off[q+1]; r++ {
				lr := &x.runs[r]
				v := float64(lr.val) + coef[a]*float64(lr.n) + x.W[idx(int(lr.qe), nf)]
				if lr.short {
					v -= nu[a]
				}
				v -= pen
				if v > best {
					best, arg = v, r
				}
			}
			x.R[q*A+a], x.Rarg[q*A+a] = best, arg
		}
		for f := 0; f < F; f++ {
			best := x.W[idx(q+1, f)]
			arg, argA := int32(-1), int32(-1)
			kq := x.kq[f]
			for a := 0; a < A; a++ {
				qs := q + kq[a]
				if qs >= x.qN {
					continue
				}
				if v := x.R[qs*A+a]; v > best {
					best, arg, argA = v, x.Rarg[qs*A+a], int32(a)
				}
			}
			x.W[idx(q, f)] = best
			x.arg[idx(q, f)] = arg
			x.argA[idx(q, f)] = argA
		}
	}
	frames := make([]int, A)
	shorts := make([]int, A)
	starts := make([]int, x.nCad)
	q, f := x.q0, x.filters
	for q < x.qN {
		k := idx(q, f)
		r := x.arg[k]
		if r == -2 {
			break
		}
		if r == -1 {
			q++
			continue
		}
		a := x.argA[k]
		frames[a] += int(x.runs[r].n)
		if x.runs[r].short {
			shorts[a]++
		}
		qs := q + x.kq[f][a]
		if x.cwq[a] > 0 {
			starts[x.cOff[a]+qs/x.cwq[a]]++
			starts[x.sOff[a]]++
		}
		q, f = int(x.runs[r].qe), x.fil[a]
	}
	return x.W[idx(x.q0, x.filters)], frames, shorts, starts
}

// framesPossible bounds the frames block b can get tonight: frames are
// disjoint intervals of one frame length inside its observable windows
// (closures and the plan's start taken into account). A completion bonus
// is out of reach when this is below the frames left.
func (p *Problem) framesPossible(b int) int {
	d := &p.bd[b]
	n := 0
	for i := p.stepAt(p.tFrom); i < p.n; {
		if int(d.bad[i]) == i {
			i = max(i+1, int(d.good[i]))
			continue
		}
		j := int(d.bad[i])
		l := float64(j)*p.step - math.Max(float64(i)*p.step, p.tFrom)
		n += int(math.Floor(l/d.frame + 1e-9))
		i = j
	}
	return n
}

// polyakStep moves the multipliers lam (kept >= 0) against the
// subgradient g of the dual value L by the Polyak step theta (L - lb) /
// |g|^2, lb a lower bound on the optimum (Polyak 1969, from memory; Held,
// Wolfe & Crowder 1974). Components at 0 whose subgradient would push them below
// do not count in |g|. It reports false, changing nothing, when there is
// no direction left or theta has fallen below minTheta.
func polyakStep(lam, g []float64, theta, minTheta, L, lb float64) bool {
	norm := 0.0
	for i := range g {
		if lam[i] > 0 || g[i] < 0 {
			norm += g[i] * g[i]
		}
	}
	if norm == 0 || theta < minTheta {
		return false
	}
	step := theta * math.Max(L-lb, 1e-6*L) / norm
	for i := range lam {
		lam[i] = math.Max(0, lam[i]-step*g[i])
	}
	return true
}
