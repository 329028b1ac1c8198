package scheduler

import (
	"math"
	"time"
)

// BoundPath returns an upper bound on the objective from a path
// relaxation of the night: the state-space relaxation of Christofides,
// Mingozzi & Toth (1981, Networks 11, 145) applied to the run-indexed time
// formulation of BoundDP, with the last block observed kept in the state
// so that slews count. Its inner problem is dynamic programming over
// (quantum, last block) on the quantum grid that every solver of the
// package searches (runs start on quanta, the mount is free again at the
// first quantum after a run):
//
//	W(q, l) = max( W(q+1, l),  max over b, s with s - k(l, b, s) = q of R(s, b) ),  W(qN, l) = 0
//	R(s, b) = max over n of weight(b, s, n) + W(q', b)
//
// where R is the best run of block b from start quantum s (the solvers'
// own frame layout: readout, dithers, meridian flips, visibility,
// closures; q' the first quantum after it) followed by the best rest,
// independent of l, so one iteration costs O(quanta x blocks^2).
// k(l, b, s) is a lower bound, in whole quanta, on the setup of a run of b
// starting at s after a run of l:
//
//	max(slew + settle, filter change) + acquisition + focus
//
// with the slew from l's pointing to b's at the start (the package's own
// axis model and profiles), its least value over the grid step holding s
// and over both pier sides of l (the axes interpolate linearly within a
// step, so the least distance per axis is at an end of the step or zero),
// the filter change and the focus a filter change (or the first run of the
// night) asks for. The weights and multipliers are BoundDP's: the frame
// budgets (mu_b >= 0 per frame), one short run per block, one cadence run
// start per window of Every - Tolerance and the series caps are dualised,
// the completion bonus is spread over the frames left. Relaxed in the
// favourable direction are: the periodic focus (dropped), the slew from
// where l was when the setup began (only the slew at the start counts),
// closures during setups, the rest of the cadence spacing, and the pier
// side of l. Every plan on the quantum grid is a path of the DP worth at
// least its objective under every multiplier, so the DP's value plus the
// multipliers' terms is an upper bound (weak duality). The multipliers
// start from BoundDP's best ones and follow the subgradient method (Polyak
// steps toward the greedy plan's value, step halving after stalls; Held,
// Wolfe & Crowder 1974, Math. Programming 6, 62); the least value seen is
// returned, never above the warm start's own least value (the path DP's
// setups are at least the filter DP's, so at equal multipliers its value
// is no larger). UpperBound still takes BoundDP as well: the warm start is
// a longer run of the same method from the same start, not the same run.
//
// It returns +Inf when the instance is too large for the path DP (see
// pathMaxWork): callers take the minimum with the other bounds.
func BoundPath(p *Problem) float64 {
	st := boundPath(p, p.greedy().val, boundPathIters)
	return st.Bound
}

// PathStats describes one run of BoundPath.
type PathStats struct {
	Bound          float64       // the bound (+Inf: instance too large)
	FilterDP       float64       // BoundDP's value (the warm start)
	Iterations     int           // path DP iterations
	WarmIterations int           // filter DP iterations of the warm start
	Blocks         int           // active blocks
	Quanta         int           // quanta of the night
	Setup          time.Duration // building the run and setup tables
	Total          time.Duration // wall time in all
}

// BoundPathStats is BoundPath with its statistics.
func BoundPathStats(p *Problem) PathStats { return boundPath(p, p.greedy().val, boundPathIters) }

// Iterations of BoundPath: the warm start (on the cheap filter DP) and
// the path DP's own.
const (
	boundPathWarm     = 600
	boundPathIters    = 60
	boundPathPatience = 20
)

// pathMaxWork bounds quanta x (blocks+1)^2, the work of one path DP
// iteration (about 0.15 s at 1e8 on the machines of the benchmarks).
const pathMaxWork = 2.5e8

func boundPath(p *Problem, lb float64, iters int) PathStats {
	t0 := time.Now()
	var st PathStats
	x := newLagDP(p)
	A := len(x.active)
	st.Blocks, st.Quanta = A, x.qN
	if A == 0 {
		st.Total = time.Since(t0)
		return st
	}
	if float64(x.qN)*float64(A+1)*float64(A+1) > pathMaxWork {
		st.Bound = math.Inf(1)
		st.Total = time.Since(t0)
		return st
	}
	// Warm start: BoundDP's subgradient on the filter DP.
	lam := make([]float64, 2*A+x.nCad)
	var theta float64
	st.FilterDP, st.WarmIterations, theta = subgradient(x, lam, lb, boundPathWarm, 1, boundPathPatience, func(l []float64) (float64, []int, []int, []int) {
		return x.solve(l[:A], l[A:2*A], l[2*A:])
	})
	y := newPathDP(x)
	st.Setup = time.Since(t0)
	st.Bound, st.Iterations, _ = subgradient(x, lam, lb, iters, 2*theta, boundPathPatience/2, func(l []float64) (float64, []int, []int, []int) {
		return y.solve(l[:A], l[A:2*A], l[2*A:])
	})
	st.Bound = math.Min(st.Bound, st.FilterDP)
	st.Total = time.Since(t0)
	return st
}

// subgradient minimises the Lagrangian dual of x's relaxation whose inner
// maximum inner computes (its value and the frames, short runs and
// cadence starts of its solution), from lam (updated in place to the best
// multipliers seen) with Polyak steps toward lb, starting at step factor
// theta and halving it after patience iterations without a new least
// value (Held, Wolfe & Crowder 1974). It returns the least dual value
// seen, the iterations run and the final step factor.
func subgradient(x *lagDP, lam []float64, lb float64, iters int, theta float64, patience int,
	inner func([]float64) (float64, []int, []int, []int)) (float64, int, float64) {
	p := x.p
	A := len(x.active)
	g := make([]float64, len(lam))
	cur := append([]float64(nil), lam...)
	best := math.Inf(1)
	stall, it := 0, 0
	for it < iters {
		it++
		val, frames, shorts, starts := inner(cur)
		L := val
		for a := 0; a < A; a++ {
			rem := float64(p.bd[x.active[a]].rem)
			L += cur[a]*rem + cur[A+a]
			g[a] = rem - float64(frames[a])
			g[A+a] = 1 - float64(shorts[a])
		}
		for j, n := range starts {
			L += cur[2*A+j] * x.cRHS[j]
			g[2*A+j] = x.cRHS[j] - float64(n)
		}
		if math.IsInf(best, 1) || L < best-1e-9*math.Abs(best) {
			best, stall = L, 0
			copy(lam, cur)
		} else if stall++; stall >= patience {
			theta, stall = theta/2, 0
		}
		if !polyakStep(cur, g, theta, 1e-3, L, lb) {
			break
		}
	}
	return best, it, theta
}

// pathDP is the inner dynamic program of BoundPath over the run tables of
// a lagDP.
type pathDP struct {
	x   *lagDP
	L   int // states per quantum: the active blocks, then the anchor
	nst int // grid steps
	// k[(a*nst+i)*L+l] is the least setup, in quanta (saturated at 255),
	// of a run of active block a starting in grid step i after a run of
	// l (l = L-1: the anchor, the executed run or the parked mount).
	k    []uint8
	W    []float64 // (qN+1) * L
	warg []int32   // per state: -1 wait, else the start quantum * A + a of the run
	cand []float64
	carg []int32
	R    []float64 // (qN+1) * A
	Rarg []int32
}

func newPathDP(x *lagDP) *pathDP {
	p := x.p
	A := len(x.active)
	y := &pathDP{x: x, L: A + 1, nst: p.n}
	S := (x.qN + 1) * y.L
	y.W = make([]float64, S)
	y.warg = make([]int32, S)
	y.cand = make([]float64, S)
	y.carg = make([]int32, S)
	y.R = make([]float64, (x.qN+1)*A)
	y.Rarg = make([]int32, (x.qN+1)*A)
	y.k = make([]uint8, A*y.nst*y.L)
	parallel(A, p.Options.Workers, func(a int) { y.fillSetups(a) })
	return y
}

// fillSetups fills the least setups of every run of active block a.
func (y *pathDP) fillSetups(a int) {
	x := y.x
	p := x.p
	b := x.active[a]
	d := &p.bd[b]
	sides := []int8{sideEast}
	if p.gem() {
		sides = []int8{sideEast, sideWest}
	}
	for i := 0; i < y.nst; i++ {
		// b's pier sides at the step's ends (the hour angle grows within it).
		t0, t1 := float64(i)*p.step, float64(i+1)*p.step
		bs0, bs1 := p.startSide(b, t0), p.startSide(b, math.Nextafter(t1, t0))
		row := y.k[(a*y.nst+i)*y.L : (a*y.nst+i+1)*y.L]
		for l := 0; l < y.L; l++ {
			prevBlock, prevFilter, focused := -1, -1, true
			ls := sides
			if l < y.L-1 {
				prevBlock, prevFilter = x.active[l], p.bd[x.active[l]].filter
			} else {
				an := p.anchor
				prevBlock, prevFilter, focused = an.block, an.filter, an.focused
				ls = []int8{an.side}
			}
			slew := math.Inf(1)
			for _, lsd := range ls {
				for _, bsd := range []int8{bs0, bs1} {
					slew = math.Min(slew, y.slewLB(prevBlock, lsd, b, bsd, i))
				}
			}
			changed := prevFilter != d.filter
			fc := 0.0
			if changed {
				fc = p.oh.filter
			}
			tot := math.Max(slew+p.oh.settle, fc) + p.oh.acq
			if p.oh.focus > 0 && (!focused || changed && p.oh.focusOnFilter) {
				tot += p.oh.focus
			}
			// A hair below: the solvers' axes interpolate in another order.
			kq := math.Ceil((tot-1e-6)/p.quantum - 1e-9)
			row[l] = uint8(math.Max(0, math.Min(255, kq)))
		}
	}
}

// slewLB is the least slew over grid step i from block l's pointing (on
// side ls, tracked as a previous target: -1 is the park position) to block
// b's (on side bs). Each axis's position is linear in time within the
// step (Problem.axes), so the least distance on an axis is zero when the
// difference changes sign (or, on a wrapping axis, crosses a whole turn)
// and otherwise at one end; the slew, the slower axis's time, is at least
// the larger of the two least axis times. NaN positions (a target far below
// the horizon) count as no slew.
func (y *pathDP) slewLB(l int, ls int8, b int, bs int8, i int) float64 {
	p := y.x.p
	a1u, a2u, a1v, a2v := y.axisEnds(l, ls, true, i)
	c1u, c2u, c1v, c2v := y.axisEnds(b, bs, false, i)
	o := &p.Site.Overheads
	wrap := !p.gem() // slewSeconds: only german mounts do not wrap
	d1 := leastDist(c1u-a1u, c1v-a1v, wrap)
	d2 := leastDist(c2u-a2u, c2v-a2v, false)
	s := math.Max(AxisSeconds(d1, o.Axis1RateDegS, o.Axis1AccelDegS2), AxisSeconds(d2, o.Axis2RateDegS, o.Axis2AccelDegS2))
	if math.IsNaN(s) {
		return 0
	}
	return s
}

// leastDist is the least |f| over a segment on which f goes linearly from
// u to v; with wrap, the least distance of f to a whole number of turns
// (360 deg).
func leastDist(u, v float64, wrap bool) float64 {
	if math.IsNaN(u) || math.IsNaN(v) {
		return 0
	}
	if !wrap {
		if u <= 0 && v >= 0 || u >= 0 && v <= 0 {
			return 0
		}
		return math.Min(math.Abs(u), math.Abs(v))
	}
	lo, hi := math.Min(u, v), math.Max(u, v)
	if math.Floor(hi/360) > math.Floor(lo/360) || math.Mod(lo, 360) == 0 {
		return 0 // a whole turn lies in [lo, hi]
	}
	return math.Min(math.Abs(math.Remainder(u, 360)), math.Abs(math.Remainder(v, 360)))
}

// axisEnds returns block b's axes (degrees) at both ends of grid step i on
// the given side, as Problem.axes interpolates them within the step: the
// value at the step's start and the limit at its end.
func (y *pathDP) axisEnds(b int, side int8, prev bool, i int) (u1, u2, v1, v2 float64) {
	p := y.x.p
	if b < 0 {
		u1, u2 = p.axesOf(b, 0, side, prev)
		return u1, u2, u1, u2
	}
	j := i + 1
	if j >= p.n {
		j = i
	}
	u1, u2, w1, w2 := p.axesSamples(b, i, j, side, prev)
	d := w1 - u1
	if p.gem() && math.Abs(d) > 180 {
		// Axis 1 of a german mount jumps inside this step (the hour angle
		// crosses the side's cut, see Problem.axes): no least distance is
		// claimed for it (NaN counts as none).
		return u1, u2, math.NaN(), w2
	}
	if d > 180 {
		d -= 360
	} else if d < -180 {
		d += 360
	}
	return u1, u2, u1 + d, w2
}

// solve runs the path DP for the multipliers (mu: frame budgets, nu: one
// short run per block, cad: cadence windows and series) and returns its
// value from the plan's start and the frames, short runs and cadence
// starts of an optimal path.
func (y *pathDP) solve(mu, nu, cad []float64) (float64, []int, []int, []int) {
	x := y.x
	A, L, qN := len(x.active), y.L, x.qN
	for l := 0; l < L; l++ {
		y.W[qN*L+l] = 0
		y.warg[qN*L+l] = -1
	}
	for i := range y.cand {
		y.cand[i] = math.Inf(-1)
	}
	coef := make([]float64, A)
	for a := range coef {
		coef[a] = x.bpf[a] - mu[a]
	}
	for q := qN - 1; q >= x.q0; q-- {
		// The best run of every block from q and the best rest after it.
		stepI := min(x.p.stepAt(float64(q)*x.p.quantum), y.nst-1)
		for a := 0; a < A; a++ {
			off := x.off[a]
			best, arg := math.Inf(-1), int32(-1)
			pen := 0.0
			if x.cwq[a] > 0 {
				pen = cad[x.cOff[a]+q/x.cwq[a]] + cad[x.sOff[a]]
			}
			for r := off[q]; r < off[q+1]; r++ {
				lr := &x.runs[r]
				v := float64(lr.val) + coef[a]*float64(lr.n) + y.W[int(lr.qe)*L+a] - pen
				if lr.short {
					v -= nu[a]
				}
				if v > best {
					best, arg = v, r
				}
			}
			y.R[q*A+a], y.Rarg[q*A+a] = best, arg
			if !(best > 0) {
				continue // never better than waiting (W >= 0)
			}
			// Offer it to every state from which the setup fits.
			row := y.k[(a*y.nst+stepI)*L : (a*y.nst+stepI+1)*L]
			id := int32(q*A + a)
			for l, k := range row {
				r := q - int(k)
				if r < x.q0 {
					continue
				}
				j := r*L + l
				if best > y.cand[j] {
					y.cand[j], y.carg[j] = best, id
				}
			}
		}
		for l := 0; l < L; l++ {
			j := q*L + l
			if c := y.cand[j]; c > y.W[j+L] {
				y.W[j], y.warg[j] = c, y.carg[j]
			} else {
				y.W[j], y.warg[j] = y.W[j+L], -1
			}
		}
	}
	frames := make([]int, A)
	shorts := make([]int, A)
	starts := make([]int, x.nCad)
	q, l := x.q0, L-1
	for q < qN {
		k := y.warg[q*L+l]
		if k < 0 {
			q++
			continue
		}
		s, a := int(k)/A, int(k)%A
		r := y.Rarg[s*A+a]
		lr := &x.runs[r]
		frames[a] += int(lr.n)
		if lr.short {
			shorts[a]++
		}
		if x.cwq[a] > 0 {
			starts[x.cOff[a]+s/x.cwq[a]]++
			starts[x.sOff[a]]++
		}
		q, l = int(lr.qe), a
	}
	return y.W[x.q0*L+L-1], frames, shorts, starts
}
