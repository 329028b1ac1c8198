package scheduler

import (
	"container/heap"
	"fmt"
	"math"
	"time"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize/convex/lp"
)

// relaxation is the time-indexed linear relaxation behind Bound and
// BoundLP. The night from the plan's start is cut into slots of a few grid
// steps; x[b][k] is the frame time (exposure plus readout, seconds) block
// b spends in slot k:
//
//	maximise   sum_bk c[b][k] x[b][k]
//	subject to sum_b x[b][k]          <= open[k]     (one telescope)
//	           0 <= x[b][k]           <= use[b][k]   (observable, not closed, in a window
//	                                                  long enough for a run)
//	           sum_k x[b][k]          <= cap[b]      (frames left * frame time)
//	           sum_bk (1+a[b]) x[b][k] <= total      (frames and setups fit in the open time)
//
// c[b][k] = w_b q_max / frame_b + bonus_b / cap_b, with q_max the best
// quality of the block's usable steps within one frame time of the slot (a
// frame's value is taken at its mid-exposure step, which lies there); the
// bonus term is exact for the relaxation because the bonus fraction y_b <=
// sum_k x[b][k] / cap_b is then tight. a[b] = (settle + acquisition) /
// (longest run * frame_b) spreads the least possible setup of a run over
// its frames (Bound refines a per slot: see amortised). Every plan of the model maps to a feasible x with at least
// its value (dithers, slews beyond the minimum, flips and waiting only use
// more time), so the optimum is an upper bound on the plan's objective.
type relaxation struct {
	blocks []int
	slots  int
	open   []float64
	total  float64
	use    [][]float64
	c      [][]float64
	qmax   [][]float64 // best quality within one frame of each slot
	cap    []float64
	a      [][]float64 // global row: setups, dithers and periodic focus
	aw     [][]float64 // window rows: setups and dithers
	// Windows of winSlots slots: sum over the window of (1+aw) x <= openW
	// + slack. The slack is one least setup (settle + acquisition): only
	// the run that straddles the window's start, or else the first run
	// starting in it, can have its setup before the window; dithers and
	// the other setups that the shares aw stand for lie inside it (in m
	// consecutive frames of a run there are at least floor((m-1)/D)
	// dithers, and aw is at most the rate of an m-frame run).
	winSlots int
	openW    []float64
	slack    float64
}

// boundWindow is the length of the setup-inclusive windows of Bound.
const boundWindow = time.Hour

// DefaultBoundSlot is the slot length of Bound, in grid steps.
const DefaultBoundSlot = 5

func (p *Problem) relaxation(slotSteps int) *relaxation {
	if slotSteps <= 0 {
		slotSteps = DefaultBoundSlot
	}
	i0 := p.stepAt(p.tFrom)
	K := (p.n - i0 + slotSteps - 1) / slotSteps
	rx := &relaxation{slots: K, open: make([]float64, K)}
	rx.winSlots = max(1, int(math.Round(boundWindow.Seconds()/(float64(slotSteps)*p.step))))
	rx.openW = make([]float64, (K+rx.winSlots-1)/rx.winSlots)
	rx.slack = p.oh.settle + p.oh.acq
	stepSec := func(i int) float64 { // seconds of step i after the plan's start
		return math.Max(0, math.Min(p.step, float64(i+1)*p.step-p.tFrom))
	}
	for i := i0; i < p.n; i++ {
		if !p.closed[i] {
			rx.open[(i-i0)/slotSteps] += stepSec(i)
			rx.openW[(i-i0)/slotSteps/rx.winSlots] += stepSec(i)
			rx.total += stepSec(i)
		}
	}
	// Periodic focus: runs starting in one focus period lie within that
	// period plus the longest run, so m distinct start periods hold at most
	// m (P + Dmax) of frame time: every frame second needs at least
	// focus / (P + Dmax) of focus.
	focusRate := 0.0
	if p.oh.focus > 0 && p.oh.focusEvery > 0 {
		focusRate = p.oh.focus / (p.oh.focusEvery + p.longestRun())
	}
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.rem <= 0 {
			continue
		}
		minFrames := d.rem
		if d.rem > d.minRun {
			minFrames = 1 // a remainder run may be that short
		}
		minLen := float64(minFrames) * d.frame
		usable := make([]bool, p.n)
		win := make([]float64, p.n) // length of the usable window holding each step
		any := false
		for i := i0; i < p.n; {
			if int(d.bad[i]) == i {
				i = max(i+1, int(d.good[i]))
				continue
			}
			j := int(d.bad[i])
			l := 0.0
			for s := i; s < j; s++ {
				l += stepSec(s)
			}
			if l >= minLen-1e-9 {
				for s := i; s < j; s++ {
					usable[s] = true
					win[s] = l
				}
				any = true
			}
			i = j
		}
		if !any {
			continue
		}
		use := make([]float64, K)
		c := make([]float64, K)
		qm := make([]float64, K)
		a := make([]float64, K)
		aw := make([]float64, K)
		capb := float64(d.rem) * d.frame
		reach := int(math.Ceil(d.frame / p.step))
		nmax := min(d.maxRun, d.rem)
		bonusOK := p.framesPossible(b) >= d.rem
		for k := 0; k < K; k++ {
			lo, hi := i0+k*slotSteps, min(p.n, i0+(k+1)*slotSteps)
			wmax := 0.0 // the longest usable window that meets the slot
			for i := lo; i < hi; i++ {
				if usable[i] {
					use[k] += stepSec(i)
					wmax = math.Max(wmax, win[i])
				}
			}
			if use[k] == 0 {
				continue
			}
			aw[k] = p.amortised(d, min(nmax, max(1, int(wmax/d.frame))))
			a[k] = aw[k] + focusRate
			qmax := 0.0
			for i := max(i0, lo-reach); i < min(p.n, hi+reach); i++ {
				if usable[i] {
					qmax = math.Max(qmax, float64(d.q[i]))
				}
			}
			qm[k] = qmax
			c[k] = d.w * qmax / d.frame
			if bonusOK {
				c[k] += d.bonus / capb
			}
		}
		rx.blocks = append(rx.blocks, b)
		rx.use = append(rx.use, use)
		rx.c = append(rx.c, c)
		rx.qmax = append(rx.qmax, qm)
		rx.cap = append(rx.cap, capb)
		rx.a = append(rx.a, a)
		rx.aw = append(rx.aw, aw)
	}
	return rx
}

// amortised is the least overhead per second of frame time of a run of
// at most nmax frames: min over n <= nmax of (minimal setup + dithers of
// an n-frame run) / (n frame). Any run of the block in a window that holds
// at most nmax frames spends at least this much per frame second.
func (p *Problem) amortised(d *bdat, nmax int) float64 {
	best := math.Inf(1)
	for n := 1; n <= nmax; n++ {
		extra := d.minSetup
		if d.ditherEvery > 0 {
			extra += float64((n-1)/d.ditherEvery) * d.dither
		}
		best = math.Min(best, extra/(float64(n)*d.frame))
	}
	return best
}

// longestRun bounds the duration of any run (frames, dithers and a flip).
func (p *Problem) longestRun() float64 {
	m := 0.0
	for b := range p.bd {
		d := &p.bd[b]
		n := min(d.maxRun, d.rem)
		if n <= 0 {
			continue
		}
		t := float64(n) * d.frame
		if d.ditherEvery > 0 {
			t += float64((n-1)/d.ditherEvery) * d.dither
		}
		m = math.Max(m, t)
	}
	if p.gem() {
		m += p.oh.flp + 2*math.Abs(p.flip1-p.flip0)/siderealRate
	}
	return math.Min(m, p.tEnd)
}

// Bound returns an upper bound on the objective of any plan of the night
// (see relaxation): the Lagrangian dual of the relaxation with its
// coupling time constraints (the global one and one per window) priced at
// multipliers lambda >= 0,
//
//	L(lambda) = sum_i lambda_i rhs_i + max over the transportation polytope of
//	            sum_bk (c[b][k] - (lambda_0 + lambda_w(k)) (1+a[b][k])) x[b][k],
//
// an upper bound for every lambda (weak duality) that equals the
// relaxation's optimum at the best lambda (strong duality of linear
// programs). Each L is a maximum-cost flow (source -> block -> slot ->
// sink) by successive shortest paths with Johnson potentials and Dijkstra
// (Ahuja, Magnanti & Orlin, Network Flows, 1993, sec. 9.7). lambda is
// improved by the subgradient method with Polyak steps toward the greedy
// plan's value and step halving after stalls (Held, Wolfe & Crowder 1974,
// Math. Programming 6, 62); the least L seen is returned. slotSteps is the
// slot length in grid steps (0 = DefaultBoundSlot).
func Bound(p *Problem, slotSteps int) float64 {
	rx := p.relaxation(slotSteps)
	if len(rx.blocks) == 0 {
		return 0
	}
	M := len(rx.openW)
	lambda := make([]float64, M+1)
	price := make([]float64, rx.slots)
	g := make([]float64, M+1)
	lb := p.greedy().val
	best := math.Inf(1)
	theta, stall := 1.0, 0
	for it := 0; it < 80; it++ {
		for k := range price {
			price[k] = lambda[1+k/rx.winSlots]
		}
		val, useG, useW := rx.flow(lambda[0], price)
		L := val + lambda[0]*rx.total
		g[0] = rx.total - useG
		for m := 0; m < M; m++ {
			L += lambda[1+m] * (rx.openW[m] + rx.slack)
			g[1+m] = rx.openW[m] + rx.slack
		}
		for k, u := range useW {
			g[1+k/rx.winSlots] -= u
		}
		if math.IsInf(best, 1) || L < best-1e-9*math.Abs(best) {
			best, stall = L, 0
		} else if stall++; stall >= 5 {
			theta, stall = theta/2, 0
		}
		if !polyakStep(lambda, g, theta, 1e-4, L, lb) {
			break
		}
	}
	return best + p.pointsBound()
}

// pointsBound bounds the value of the cadence points (package doc) that
// any plan can deliver: per cadence block, no more runs than its frames
// allow (all but one of at least MinRun frames) nor than fit Every less
// Tolerance apart between its first and last observable instants. The
// slot relaxation has no runs, so it adds this to its bound.
func (p *Problem) pointsBound() float64 {
	v := 0.0
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.point == 0 || d.rem <= 0 || len(d.iv) == 0 {
			continue
		}
		first := p.ivNext(b, p.tFrom)
		if first >= p.tEnd {
			continue
		}
		span := d.iv[len(d.iv)-1] - first
		n := min(d.rem, d.rem/d.minRun+1, int(math.Floor(span/(d.every-d.tol)))+1)
		v += float64(n) * d.point
	}
	return v
}

// flow is the maximum-cost flow of the transportation problem with costs
// c - price0 (1+a) - priceW[k] (1+aw); it returns the value and the
// priced times sum (1+a) x (all slots) and sum_b (1+aw) x (per slot).
func (rx *relaxation) flow(price0 float64, priceW []float64) (float64, float64, []float64) {
	B, K := len(rx.blocks), rx.slots
	g := newFlowGraph(2 + B + K)
	src, sink := 0, 1+B+K
	type arc struct{ e, j, k int }
	var arcs []arc
	for j := range rx.blocks {
		g.add(src, 1+j, rx.cap[j], 0)
		for k := 0; k < K; k++ {
			if rx.use[j][k] > 0 {
				if c := rx.c[j][k] - price0*(1+rx.a[j][k]) - priceW[k]*(1+rx.aw[j][k]); c > 0 {
					arcs = append(arcs, arc{len(g.to), j, k})
					g.add(1+j, 1+B+k, rx.use[j][k], -c)
				}
			}
		}
	}
	for k := 0; k < K; k++ {
		if rx.open[k] > 0 {
			g.add(1+B+k, sink, rx.open[k], 0)
		}
	}
	val := -g.minCost(src, sink)
	useG := 0.0
	useW := make([]float64, K)
	for _, a := range arcs {
		x := g.capa[g.rev[a.e]] // flow = residual of the reverse arc
		useG += x * (1 + rx.a[a.j][a.k])
		useW[a.k] += x * (1 + rx.aw[a.j][a.k])
	}
	return val, useG, useW
}

// flowGraph is a residual graph for successive shortest paths.
type flowGraph struct {
	head       [][]int
	to, rev    []int
	capa, cost []float64
	pot, dist  []float64
	prevE      []int
}

func newFlowGraph(n int) *flowGraph {
	return &flowGraph{head: make([][]int, n), pot: make([]float64, n), dist: make([]float64, n), prevE: make([]int, n)}
}

func (g *flowGraph) add(u, v int, c, cost float64) {
	g.head[u] = append(g.head[u], len(g.to))
	g.to, g.capa, g.cost, g.rev = append(g.to, v), append(g.capa, c), append(g.cost, cost), append(g.rev, len(g.to)+1)
	g.head[v] = append(g.head[v], len(g.to))
	g.to, g.capa, g.cost, g.rev = append(g.to, u), append(g.capa, 0), append(g.cost, -cost), append(g.rev, len(g.to)-1)
}

type pqItem struct {
	v int
	d float64
}
type pq []pqItem

func (q pq) Len() int           { return len(q) }
func (q pq) Less(i, j int) bool { return q[i].d < q[j].d }
func (q pq) Swap(i, j int)      { q[i], q[j] = q[j], q[i] }
func (q *pq) Push(x any)        { *q = append(*q, x.(pqItem)) }
func (q *pq) Pop() any          { o := *q; x := o[len(o)-1]; *q = o[:len(o)-1]; return x }

// minCost sends flow from s to t along shortest paths while they have
// negative cost, and returns the total cost. Initial potentials come from
// one Bellman-Ford pass over the (acyclic, layered) graph.
func (g *flowGraph) minCost(s, t int) float64 {
	n := len(g.head)
	const eps = 1e-12
	for i := range g.pot {
		g.pot[i] = math.Inf(1)
	}
	g.pot[s] = 0
	for pass := 0; pass < n; pass++ {
		changed := false
		for u := 0; u < n; u++ {
			if math.IsInf(g.pot[u], 1) {
				continue
			}
			for _, e := range g.head[u] {
				if g.capa[e] > eps && g.pot[u]+g.cost[e] < g.pot[g.to[e]]-1e-15 {
					g.pot[g.to[e]] = g.pot[u] + g.cost[e]
					changed = true
				}
			}
		}
		if !changed {
			break
		}
	}
	for i := range g.pot {
		if math.IsInf(g.pot[i], 1) {
			g.pot[i] = 0
		}
	}
	total := 0.0
	for iter := 0; iter < 1_000_000; iter++ {
		for i := range g.dist {
			g.dist[i] = math.Inf(1)
			g.prevE[i] = -1
		}
		g.dist[s] = 0
		q := &pq{{s, 0}}
		for q.Len() > 0 {
			it := heap.Pop(q).(pqItem)
			if it.d > g.dist[it.v] {
				continue
			}
			u := it.v
			for _, e := range g.head[u] {
				if g.capa[e] <= eps {
					continue
				}
				v := g.to[e]
				rc := math.Max(0, g.cost[e]+g.pot[u]-g.pot[v])
				if nd := g.dist[u] + rc; nd < g.dist[v]-1e-15 {
					g.dist[v] = nd
					g.prevE[v] = e
					heap.Push(q, pqItem{v, nd})
				}
			}
		}
		if math.IsInf(g.dist[t], 1) {
			break
		}
		for i := range g.pot {
			if !math.IsInf(g.dist[i], 1) {
				g.pot[i] += g.dist[i]
			}
		}
		// True cost of the path and its bottleneck.
		pathCost, f := 0.0, math.Inf(1)
		for v := t; v != s; v = g.to[g.rev[g.prevE[v]]] {
			e := g.prevE[v]
			pathCost += g.cost[e]
			f = math.Min(f, g.capa[e])
		}
		if pathCost >= -1e-12 || f <= eps {
			break
		}
		for v := t; v != s; v = g.to[g.rev[g.prevE[v]]] {
			e := g.prevE[v]
			g.capa[e] -= f
			g.capa[g.rev[e]] += f
		}
		total += f * pathCost
	}
	return total
}

// BoundLP solves the same relaxation as Bound directly with gonum's
// simplex (optimize/convex/lp, dense): a cross-check of Bound for small
// instances and coarse slots (it is cubic in the number of variables).
func BoundLP(p *Problem, slotSteps int) (float64, error) {
	rx := p.relaxation(slotSteps)
	type v struct{ j, k int }
	var vars []v
	for j := range rx.blocks {
		for k := 0; k < rx.slots; k++ {
			if rx.use[j][k] > 0 {
				vars = append(vars, v{j, k})
			}
		}
	}
	nv := len(vars)
	if nv == 0 {
		return 0, nil
	}
	// Standard form with x >= 0 built in: [G I] (x, slack) = h. (lp.Convert
	// would treat x as free.)
	M := len(rx.openW)
	bnd := rx.slots + len(rx.blocks) // first bound row
	glob := bnd + nv                 // the global row, then the windows
	rows := glob + 1 + M
	A := mat.NewDense(rows, nv+rows, nil)
	h := make([]float64, rows)
	c := make([]float64, nv+rows)
	for i, x := range vars {
		c[i] = -rx.c[x.j][x.k]
		A.Set(x.k, i, 1)
		A.Set(rx.slots+x.j, i, 1)
		A.Set(bnd+i, i, 1)
		h[bnd+i] = rx.use[x.j][x.k]
		A.Set(glob, i, 1+rx.a[x.j][x.k])
		A.Set(glob+1+x.k/rx.winSlots, i, 1+rx.aw[x.j][x.k])
	}
	for r := 0; r < rows; r++ {
		A.Set(r, nv+r, 1)
	}
	copy(h, rx.open)
	for j := range rx.blocks {
		h[rx.slots+j] = rx.cap[j]
	}
	h[glob] = rx.total
	for m := 0; m < M; m++ {
		h[glob+1+m] = rx.openW[m] + rx.slack
	}
	// The all-slack basis is feasible (h >= 0).
	basic := make([]int, rows)
	for r := range basic {
		basic[r] = nv + r
	}
	opt, _, err := lp.Simplex(c, A, h, 1e-10, basic)
	if err != nil {
		return 0, fmt.Errorf("%w: %w", ErrNoLP, err)
	}
	return -opt + p.pointsBound(), nil
}
