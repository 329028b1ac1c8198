package scheduler

import (
	"fmt"
	"math"
	"sort"
	"time"
)

// ExactLimits bound the exact solver's work.
type ExactLimits struct {
	// MaxStates is the most memoised states (default 20 million, a few
	// GB at worst).
	MaxStates int
	// Incumbent is the value of a plan known to be possible (Solve's,
	// say): states that cannot beat it are pruned from the start. 0 means
	// the constructive schedule's value. A value above the optimum costs
	// a second pass, never a wrong answer.
	Incumbent float64
}

// ExactStats describe one run of the exact solver.
type ExactStats struct {
	// States are the memoised (expanded) states, Visited the calls of the
	// recursion, Pruned the states cut because their upper bound could
	// not beat what their caller needed.
	States, Visited, Pruned int
	// Vectors are the distinct canonical frame vectors.
	Vectors int
	// Incumbent is the first incumbent's value, RootBound the upper bound
	// at the root.
	Incumbent, RootBound float64
	// Passes is 1, or 2 when the incumbent was not beaten and the search
	// ran again without it to build the plan.
	Passes int
	Time   time.Duration
}

// Exact finds the optimum of the night (ExactWithStats without the
// statistics).
func Exact(p *Problem, lim ExactLimits) (*Plan, error) {
	pl, _, err := ExactWithStats(p, lim)
	return pl, err
}

// ExactWithStats finds the optimum of the night by dynamic programming over
// states (time quantum q, last block l, its pier side, its focus period,
// and per block the frames still wanted, whether its one short run is
// taken and, for cadence blocks, the start of its last run), with memoised
// recursion over the reachable states:
//
//	V(q, l, side, period, f) = max( 0,                          stop
//	                                V(q+1, l, side, period, f), wait one quantum
//	                                max over b, s, n of val(b, s, n) + bonus + V(q', b, side', period(s), f') )
//
// where a run of block b with n frames starts at a quantum s for which the
// setup after l fits from q but not from q+1 (later starts are reached
// through the wait), and q' is the first quantum at or after its end. The
// state holds everything the overheads and the objective depend on: the
// setup table is kept for both focus decisions (focusDue), a cadence run
// must lie in a slot of the block's last run (onSlot, as Validate has it)
// and earns the point, and a short run commits the plan to completing its
// block (Validate's rule). The recursion is therefore exact for the model
// of this package with starts on the quantum grid, the space every solver
// here searches.
//
// States are canonical, so that equivalent ones merge: frames still
// wanted beyond what the block's remaining observable time can hold
// (maxFramesFrom) count as "more than that" (no bonus and no short run can
// follow), a block that cannot be observed any more drops out, a cadence
// block's last start moves forward by whole periods once its passed slots
// can no longer be used, and a focus period before the current one counts
// as "stale".
//
// Branch and bound: every call carries the value its subtree must exceed
// to matter (the incumbent's value less what the path has earned, or the
// best sibling found so far); a state whose admissible upper bound
// (exactBound: fractional knapsacks of the remaining frames, points and
// bonuses over the remaining observable time and the remaining free
// time) cannot exceed it is cut, and a state searched under such a need
// stores its value as an upper bound only. This is the memoised form of
// depth-first branch and bound (e.g. Morin & Marsten 1976, Operations
// Research 24, 611, branch-and-bound strategies for dynamic programming).
//
// It refuses (ErrTooLarge) more than 62 blocks with frames left and state
// spaces beyond the limits.
func ExactWithStats(p *Problem, lim ExactLimits) (*Plan, ExactStats, error) {
	t0 := time.Now()
	if lim.MaxStates <= 0 {
		lim.MaxStates = 20_000_000
	}
	x, err := newExact(p, lim)
	if err != nil {
		return nil, ExactStats{}, err
	}
	inc := lim.Incumbent
	if !(inc > 0) {
		inc = p.constructive().val
	}
	x.st.Incumbent = inc
	root, ok := x.rootKey()
	if !ok {
		return nil, x.st, fmt.Errorf("%w: the executed runs leave an incomplete short run", ErrInput)
	}
	x.st.RootBound = x.bound(x.unkeyVec(root))
	x.st.Passes = 1
	need := inc - 1e-9*math.Max(1, math.Abs(inc))
	x.value(root, need)
	if e := x.memo[root]; !x.overflow && !e.exact {
		// The incumbent was not beaten: search again for the plan itself
		// (the memoised upper bounds stay valid).
		x.st.Passes = 2
		x.value(root, math.Inf(-1))
	}
	if x.overflow {
		return nil, x.st, fmt.Errorf("%w: more than %d states", ErrTooLarge, lim.MaxStates)
	}
	sc := x.reconstruct(root)
	pl := p.toPlan(sc, "exact-dp", 0)
	x.st.States = len(x.memo)
	x.st.Vectors = len(x.vecIdx)
	x.st.Time = time.Since(t0)
	return pl, x.st, nil
}

// exactRun is one run of an active block from a start quantum.
type exactRun struct {
	n    int32
	qe   int32 // first quantum at or after the end
	val  float64
	side int8
}

// memoEntry is a state's value: exact, or an upper bound when the state
// was searched under a need it could not exceed.
type memoEntry struct {
	v     float64
	exact bool
}

type exact struct {
	p      *Problem
	active []int // block indices with frames left and observable time
	cadOff []int // per active block: offset of its cadence code in a vector, -1 without cadence
	everyQ []int // cadence period in quanta when whole (canonical phases), else 0
	tolQ   []int // cadence tolerance in quanta, rounded up
	vlen   int   // bytes of a vector
	q0, qN int
	kmin   int
	kmax   int
	// base is max(slew + settle, filter change) before a run, per previous
	// active block (or the anchor), side, focus decision, next block and
	// start quantum; NaN until computed.
	base []float64
	// runs per active block and start quantum (computed when first asked).
	runs     [][]exactRun
	runsDone []bool
	// Bound tables per active block and quantum: the most frames that
	// runs from there can hold, the best quality, the first observable
	// instant; and per quantum the observable time of any block and the
	// time without closures to the end.
	maxF     []int32
	qmax     []float64
	firstObs []float64
	lastObs  []float64 // per active block: end of its last interval
	avail    []float64
	free     []float64
	memo     map[uint64]memoEntry
	vecIdx   map[string]uint32
	vecs     [][]byte
	lim      ExactLimits
	st       ExactStats
	overflow bool
	items    []knapItem
	items2   []knapItem
	items3   []knapItem
	runItems []knapItem // cadence runs of one bound: value in dens until priced
	capS     []float64
	// The Lagrangian bounds (lagrange): per active block and step the
	// value per second a frame there can earn (-1 where the block is not
	// observable), per quantum the open seconds left in its step, and the
	// bounds' multipliers and suffix sums.
	dens     []float64
	openRest []float64
	// vtab[a][j*(kmax_a+1)+k] is the most block a's best k frames' worth
	// of seconds from step j on can earn (dens over open seconds), with
	// kmax_a = vk[a].
	vtab [][]float64
	vk   []int

	lags []lagBound
}

// lagBound is one Lagrangian bound of the time-indexed relaxation: the
// multiplier (value per second) of each active block's frame budget and,
// per step, the open seconds times the best reduced density, summed from
// the step to the end of the night.
type lagBound struct {
	lam []float64
	m   []float64 // per step: max over blocks of (dens - lam)+
	suf []float64 // per step j: sum over steps from j of open seconds * m
}

// Key layout: quantum (16 bits), last active block + 1 (6), side (1),
// focus period + 1 (8), vector id (32).
const (
	exactVBits = 32
	exactPBits = 8
	exactLBits = 6
	exactQBits = 16
)

func newExact(p *Problem, lim ExactLimits) (*exact, error) {
	x := &exact{p: p, lim: lim, memo: map[uint64]memoEntry{}, vecIdx: map[string]uint32{}}
	x.qN = int(math.Floor(p.tEnd/p.quantum + 1e-9))
	if x.qN >= 1<<exactQBits-1 {
		return nil, fmt.Errorf("%w: %d quanta", ErrTooLarge, x.qN)
	}
	if p.oh.focusEvery > 0 && p.tEnd/p.oh.focusEvery >= 1<<exactPBits-2 {
		return nil, fmt.Errorf("%w: too many focus periods", ErrTooLarge)
	}
	for b := range p.Blocks {
		d := &p.bd[b]
		if d.rem <= 0 || p.ivNext(b, p.tFrom) >= p.tEnd {
			continue
		}
		if d.rem >= 1<<15 {
			return nil, fmt.Errorf("%w: block %q wants %d frames", ErrTooLarge, p.Blocks[b].ID, d.rem)
		}
		x.active = append(x.active, b)
		off := -1
		eq, tq := 0, 0
		if d.every > 0 {
			off = 0 // set below
			if r := d.every / p.quantum; math.Abs(r-math.Round(r)) < 1e-9 {
				eq = int(math.Round(r))
			}
			tq = int(math.Ceil(d.tol/p.quantum - 1e-9))
		}
		x.cadOff = append(x.cadOff, off)
		x.everyQ = append(x.everyQ, eq)
		x.tolQ = append(x.tolQ, tq)
	}
	A := len(x.active)
	if A >= 1<<exactLBits-1 {
		return nil, fmt.Errorf("%w: %d blocks", ErrTooLarge, A)
	}
	x.vlen = 2 * A
	for a := range x.active {
		if x.cadOff[a] >= 0 {
			x.cadOff[a] = x.vlen
			x.vlen += 2
		}
	}
	x.q0 = int(math.Round(p.ceilQ(p.anchor.free) / p.quantum))
	x.kmin = int(math.Floor((p.oh.settle + p.oh.acq) / p.quantum))
	x.kmax = int(math.Ceil(p.maxSetup/p.quantum)) + 1
	x.base = make([]float64, (A+1)*2*2*A*x.qN)
	for i := range x.base {
		x.base[i] = math.NaN()
	}
	x.runs = make([][]exactRun, A*x.qN)
	x.runsDone = make([]bool, A*x.qN)
	x.capS = make([]float64, A)
	x.tables()
	x.lagrange()
	return x, nil
}

// tables fills the bound's tables.
func (x *exact) tables() {
	p := x.p
	A, Q := len(x.active), x.qN+1
	x.maxF = make([]int32, A*Q)
	x.qmax = make([]float64, A*Q)
	x.firstObs = make([]float64, A*Q)
	x.lastObs = make([]float64, A)
	var union []float64
	for a, b := range x.active {
		d := &p.bd[b]
		if k := len(d.iv); k > 0 {
			x.lastObs[a] = d.iv[k-1]
		}
		for i := 0; i+1 < len(d.iv); i += 2 {
			union = append(union, d.iv[i], d.iv[i+1])
		}
		// Best quality from each step on, over the steps an interval
		// overlaps (where a frame's mid-exposure can fall).
		best := make([]float64, p.n+1)
		for s := p.n - 1; s >= 0; s-- {
			best[s] = best[s+1]
			if d.bad[s] != int32(s) && float64(d.q[s]) > best[s] {
				best[s] = float64(d.q[s])
			}
		}
		for q := 0; q < Q; q++ {
			t := float64(q) * p.quantum
			n := 0
			for i := 0; i+1 < len(d.iv); i += 2 {
				if d.iv[i+1] <= t {
					continue
				}
				l := d.iv[i+1] - math.Max(t, p.ceilQ(d.iv[i]))
				if l > 0 {
					n += int(math.Floor(l/d.frame + 1e-9))
				}
			}
			fo := p.ivNext(b, t)
			if d.every > 0 && n > 0 {
				// A cadence block's runs start at least Every - Tolerance
				// apart, from its first observable instant to the end of its
				// last interval: so many runs of at most MaxRun frames.
				runs := int(math.Floor((x.lastObs[a]-fo)/(d.every-d.tol)+1e-9)) + 1
				n = min(n, runs*d.maxRun)
			}
			x.maxF[a*Q+q] = int32(n)
			x.qmax[a*Q+q] = best[min(p.n, int(math.Floor(t/p.step)))]
			x.firstObs[a*Q+q] = fo
		}
	}
	// The union of the active blocks' intervals.
	sort.Sort(pairs(union))
	var merged []float64
	for i := 0; i+1 < len(union); i += 2 {
		if k := len(merged); k > 0 && union[i] <= merged[k-1] {
			merged[k-1] = math.Max(merged[k-1], union[i+1])
		} else {
			merged = append(merged, union[i], union[i+1])
		}
	}
	x.avail = make([]float64, Q)
	x.free = make([]float64, Q)
	for q := 0; q < Q; q++ {
		t := float64(q) * p.quantum
		for i := 0; i+1 < len(merged); i += 2 {
			x.avail[q] += math.Max(0, merged[i+1]-math.Max(t, merged[i]))
		}
		x.free[q] = math.Max(0, p.tEnd-t)
		for i := 0; i+1 < len(p.cl); i += 2 {
			x.free[q] -= math.Max(0, math.Min(p.tEnd, p.cl[i+1])-math.Max(t, p.cl[i]))
		}
	}
}

// pairs sorts a flat list of (start, end) pairs by start.
type pairs []float64

func (s pairs) Len() int           { return len(s) / 2 }
func (s pairs) Less(i, j int) bool { return s[2*i] < s[2*j] }
func (s pairs) Swap(i, j int) {
	s[2*i], s[2*j] = s[2*j], s[2*i]
	s[2*i+1], s[2*j+1] = s[2*j+1], s[2*i+1]
}

// Vector fields: per active block, the frames still wanted (15 bits)
// and the short-run flag (bit 15); per cadence block, the code of its
// last start: 0 none, 1 the last executed run, 2+k quantum k.
func getU16(v []byte, i int) int    { return int(v[i]) | int(v[i+1])<<8 }
func setU16(v []byte, i int, x int) { v[i], v[i+1] = byte(x), byte(x>>8) }
func (x *exact) left(v []byte, a int) (int, bool) {
	u := getU16(v, 2*a)
	return u & 0x7fff, u&0x8000 != 0
}
func (x *exact) setLeft(v []byte, a, left int, short bool) {
	u := left
	if short {
		u |= 0x8000
	}
	setU16(v, 2*a, u)
}

// canon puts vector v in its canonical form at quantum q; it reports
// false when the state is dead (a short run taken and the block can no
// longer be completed).
func (x *exact) canon(v []byte, q int) bool {
	Q := x.qN + 1
	for a := range x.active {
		left, short := x.left(v, a)
		m := int(x.maxF[a*Q+q])
		if short && left > m {
			return false
		}
		if left > m {
			left = m + 1
			short = false
		}
		if m == 0 {
			left = min(left, 1)
		}
		x.setLeft(v, a, left, short)
		if off := x.cadOff[a]; off >= 0 {
			c := getU16(v, off)
			switch {
			case left == 0 || m == 0:
				c = 0
			case c >= 2 && x.everyQ[a] > 0:
				// Slots up to the j-th after the last start all end before q:
				// move the start forward by j periods.
				l := c - 2
				if j := (q - 1 - x.tolQ[a] - l) / x.everyQ[a]; q-1-x.tolQ[a]-l >= 0 && j > 0 {
					c += j * x.everyQ[a]
				}
			}
			setU16(v, off, c)
		}
	}
	return true
}

// intern returns the id of a canonical vector.
func (x *exact) intern(v []byte) uint32 {
	if id, ok := x.vecIdx[string(v)]; ok {
		return id
	}
	id := uint32(len(x.vecs))
	s := string(v)
	x.vecIdx[s] = id
	x.vecs = append(x.vecs, []byte(s))
	return id
}

// stalePeriod canonicalises the focus period of the last run: a period
// before q's makes the next run focus whatever it was.
func (x *exact) stalePeriod(q, period int) int {
	p := x.p
	if p.oh.focusEvery <= 0 || period < 0 {
		return period
	}
	if cur := p.focusPeriod(float64(q) * p.quantum); period < cur-1 {
		return cur - 1
	}
	return period
}

func (x *exact) key(q, l int, side int8, period int, vid uint32) uint64 {
	k := uint64(q)
	k = k<<exactLBits | uint64(l+1)
	k = k<<1 | uint64(side)
	k = k<<exactPBits | uint64(period+1)
	k = k<<exactVBits | uint64(vid)
	return k
}

func (x *exact) unkey(k uint64) (q, l int, side int8, period int, vid uint32) {
	vid = uint32(k & (1<<exactVBits - 1))
	k >>= exactVBits
	period = int(k&(1<<exactPBits-1)) - 1
	k >>= exactPBits
	side = int8(k & 1)
	k >>= 1
	l = int(k&(1<<exactLBits-1)) - 1
	k >>= exactLBits
	q = int(k)
	return
}

// unkeyVec is the quantum and vector of a key.
func (x *exact) unkeyVec(k uint64) (int, []byte) {
	q, _, _, _, vid := x.unkey(k)
	return q, x.vecs[vid]
}

// rootKey is the state when the plan starts: every active block's frames
// left, a cadence block's series continuing its last executed run.
func (x *exact) rootKey() (uint64, bool) {
	p := x.p
	v := make([]byte, x.vlen)
	for a, b := range x.active {
		x.setLeft(v, a, p.bd[b].rem, false)
		if off := x.cadOff[a]; off >= 0 && !math.IsNaN(p.execStart[b]) {
			setU16(v, off, 1)
		}
	}
	q := min(x.q0, x.qN)
	if !x.canon(v, q) {
		return 0, false
	}
	return x.key(q, -1, p.anchor.side, -1, x.intern(v)), true
}

// prevOf is the mount's state after active block l's last run (-1 = the
// anchor: the parked mount or the last executed run).
func (x *exact) prevOf(l int, side int8, period int) prevState {
	p := x.p
	if l < 0 {
		return p.anchorState()
	}
	b := x.active[l]
	return prevState{block: b, side: side, start: float64(period) * p.oh.focusEvery, filter: p.bd[b].filter, focused: true}
}

// baseAt is the setup without focus and acquisition from the previous
// state (active block l, side) to active block a at quantum qs.
func (x *exact) baseAt(prev prevState, l int, side int8, focus bool, a, qs int) float64 {
	A := len(x.active)
	f := 0
	if focus {
		f = 1
	}
	i := ((((l+1)*2+int(side))*2+f)*A+a)*x.qN + qs
	if v := x.base[i]; !math.IsNaN(v) {
		return v
	}
	su := x.p.setupFocus(prev, x.active[a], float64(qs)*x.p.quantum, focus)
	v := math.Max(su.slew+su.settle, su.filter)
	x.base[i] = v
	return v
}

// runsAt returns the runs of active block a starting at quantum qs, by
// frames (1, 2, ...).
func (x *exact) runsAt(a, qs int) []exactRun {
	id := a*x.qN + qs
	if x.runsDone[id] {
		return x.runs[id]
	}
	p := x.p
	b := x.active[a]
	var rs []exactRun
	if it, ok := p.newRun(b, float64(qs)*p.quantum); ok {
		nmax := min(p.bd[b].maxRun, p.bd[b].rem)
		for it.r.n < nmax && it.next() {
			qe := int(math.Round(p.ceilQ(it.r.e) / p.quantum))
			rs = append(rs, exactRun{n: int32(it.r.n), qe: int32(qe), val: it.r.val, side: it.r.side1})
		}
	}
	x.runs[id], x.runsDone[id] = rs, true
	return rs
}

// choice is one option of a state, for reconstruction.
type choice struct {
	wait bool
	a    int
	qs   int
	n    int
	// The next state: quantum, last block, side, period and canonical
	// vector (valid during the callback only).
	nq, nl, nperiod int
	nside           int8
	vec             []byte
}

// next is the key of a choice's next state.
func (x *exact) next(c *choice) uint64 {
	return x.key(c.nq, c.nl, c.nside, c.nperiod, x.intern(c.vec))
}

// options calls f with every option of a state (key k) whose next state
// is alive, and its immediate value; it returns early when f returns
// false.
func (x *exact) options(k uint64, f func(c *choice, imm float64) bool) {
	p := x.p
	q, l, side, period, vid := x.unkey(k)
	vec := x.vecs[vid]
	buf := make([]byte, x.vlen)
	if q+1 <= x.qN {
		copy(buf, vec)
		if x.canon(buf, q+1) {
			if !f(&choice{wait: true, nq: q + 1, nl: l, nside: side, nperiod: x.stalePeriod(q+1, period), vec: buf}, 0) {
				return
			}
		}
	}
	prev := x.prevOf(l, side, period)
	Q := x.qN + 1
	for a, b := range x.active {
		d := &p.bd[b]
		left, short := x.left(vec, a)
		m := int(x.maxF[a*Q+q])
		if left == 0 || m == 0 {
			continue
		}
		last := math.NaN()
		if off := x.cadOff[a]; off >= 0 {
			switch c := getU16(vec, off); c {
			case 0:
			case 1:
				last = p.execStart[b]
			default:
				last = float64(c-2) * p.quantum
			}
		}
		for kq := x.kmin; kq <= x.kmax; kq++ {
			qs := q + kq
			if qs >= x.qN {
				break
			}
			s := float64(qs) * p.quantum
			if !math.IsNaN(last) && !onSlot(s-last, d.every, d.tol, 1e-9) {
				continue
			}
			focus := p.focusDue(prev, b, s)
			tot := x.baseAt(prev, l, side, focus, a, qs) + p.oh.acq
			if focus {
				tot += p.oh.focus
			}
			hi := float64(kq) * p.quantum
			if !(tot <= hi+1e-9) || tot <= hi-p.quantum+1e-9 || !p.setupClear(s, tot) {
				continue
			}
			for _, er := range x.runsAt(a, qs) {
				n := int(er.n)
				if n > left || n > m {
					break
				}
				nshort := short
				if n < d.minRun {
					// One short run per block, anywhere in time, when the
					// plan completes the block (as Validate has it).
					if short || left > m {
						continue
					}
					if n != left {
						if !splits(left-n, d.minRun, d.maxRun) {
							continue // the rest could not be completed
						}
						nshort = true
					}
				}
				imm := er.val
				if n == left {
					imm += d.bonus
				}
				copy(buf, vec)
				x.setLeft(buf, a, left-n, nshort)
				if off := x.cadOff[a]; off >= 0 {
					setU16(buf, off, qs+2)
				}
				qe := int(er.qe)
				if !x.canon(buf, qe) {
					continue
				}
				c := choice{a: a, qs: qs, n: n, nq: qe, nl: a, nside: er.side, nperiod: x.stalePeriod(qe, p.focusPeriod(s)), vec: buf}
				if !f(&c, imm) {
					return
				}
			}
		}
	}
}

// splits reports whether m frames can be planned as runs of lo to hi
// frames each: some k has k lo <= m <= k hi.
func splits(m, lo, hi int) bool {
	if m <= 0 {
		return m == 0
	}
	k := (m + hi - 1) / hi // fewest runs
	return k*lo <= m
}

// committed reports whether a vector holds a block with a short run that
// is not yet complete (stopping is then not allowed).
func (x *exact) committed(v []byte) bool {
	for a := range x.active {
		if left, short := x.left(v, a); short && left > 0 {
			return true
		}
	}
	return false
}

// knapItem is one item of the bound's fractional knapsacks.
type knapItem struct {
	dens, capS float64 // value per second, seconds
}

// bound is an admissible upper bound on the value still reachable from
// quantum q with vector v: the cadence points that the remaining slots
// and frames allow, plus the smaller of two fractional knapsacks of the
// frames (each worth its block's weight at the best quality still ahead,
// the bonus spread over the frames left when the block can still be
// completed, at most the frames its remaining observable time holds):
// one that fills the observable time left (any block's), one that fills
// the time left without closures with each frame also charged its share
// of the shortest setup (settle and acquisition once per longest run; a
// cadence point carries its whole run's setup).
func (x *exact) bound(q int, v []byte) float64 {
	p := x.p
	Q := x.qN + 1
	x.items = x.items[:0]
	minSetup := p.oh.settle + p.oh.acq
	points, pointSetup, bonus, cadBonus, discount := 0.0, 0.0, 0.0, 0.0, 0.0
	x.runItems = x.runItems[:0]
	frames2 := x.items2[:0]
	capS := x.capS[:len(x.active)]
	for a, b := range x.active {
		capS[a] = 0
		left, _ := x.left(v, a)
		m := int(x.maxF[a*Q+q])
		if left == 0 || m == 0 {
			continue
		}
		d := &p.bd[b]
		nf := min(left, m)
		if d.every > 0 {
			// A series: its points and frames are bounded together, run
			// by run; each run takes at least a shortest setup and MinRun
			// frames (one short run per block: its saving is added to the
			// capacity of the third knapsack).
			n0 := len(x.runItems)
			points += x.slotTerm(a, q, getU16(v, x.cadOff[a]), nf)
			pointSetup += float64(len(x.runItems)-n0) * minSetup
			cost := minSetup + float64(min(d.minRun, nf))*d.frame
			for i := n0; i < len(x.runItems); i++ {
				x.runItems[i] = knapItem{dens: x.runItems[i].dens / cost, capS: cost}
			}
			discount += float64(min(d.minRun, nf)-1) * d.frame
			if left <= m && d.rem > 0 {
				cadBonus += d.bonus
			}
			continue
		}
		capS[a] = float64(nf) * d.frame
		per := d.w * x.qmax[a*Q+q]
		if left <= m && d.rem > 0 {
			per += d.bonus / float64(left)
			bonus += d.bonus
		}
		x.items = append(x.items, knapItem{dens: per / d.frame, capS: float64(nf) * d.frame})
		share := 0.0
		if d.maxRun < math.MaxInt32 {
			share = minSetup / float64(min(d.maxRun, nf))
		}
		cost := d.frame + share
		frames2 = append(frames2, knapItem{dens: per / cost, capS: float64(nf) * cost})
	}
	b1 := fillKnapsack(x.items, x.avail[q])
	b2 := fillKnapsack(frames2, math.Max(0, x.free[q]-pointSetup))
	if pointSetup > x.free[q] {
		// The points alone do not fit: fall back to the first form.
		b2 = b1
	}
	x.items2 = frames2
	fr := math.Min(b1, b2)
	if len(x.lags) > 0 {
		j := min(p.n-1, int(math.Floor(float64(q)*p.quantum/p.step)))
		open := x.openRest[q]
		for k := range x.lags {
			lb := &x.lags[k]
			v := lb.m[j]*open + lb.suf[j+1] + bonus
			for a := range x.active {
				if capS[a] > 0 {
					v += lb.lam[a] * capS[a]
				}
			}
			fr = math.Min(fr, v)
		}
	}
	if x.vtab != nil {
		j := min(p.n-1, int(math.Floor(float64(q)*p.quantum/p.step)))
		v := bonus
		for a := range x.active {
			if capS[a] > 0 {
				K := x.vk[a]
				k := min(K, int(math.Round(capS[a]/p.bd[x.active[a]].frame)))
				v += x.vtab[a][j*(K+1)+k]
			}
		}
		fr = math.Min(fr, v)
	}
	ub := points + cadBonus + fr
	// The third form: cadence runs and the other frames share the time
	// left without closures.
	x.items3 = append(append(x.items3[:0], frames2...), x.runItems...)
	ub = math.Min(ub, cadBonus+fillKnapsack(x.items3, x.free[q]+discount))

	return ub*(1+1e-9) + 1e-9
}

// slotTerm bounds what the runs of cadence block a can still earn from
// quantum q (last start code c): consecutive runs start at least Every -
// Tolerance apart, the next one not before the first slot of the last
// start that ends at or after q (or the first observable instant), all
// before the end of the block's last interval, at most as many as its
// frames left allow (one run may be short); the i-th is worth at most its
// point plus min(MaxRun, frames) frames at the best quality from its
// earliest start on.
func (x *exact) slotTerm(a, q, c, nf int) float64 {
	p := x.p
	b := x.active[a]
	d := &p.bd[b]
	Q := x.qN + 1
	tq := float64(q) * p.quantum
	s1 := x.firstObs[a*Q+q]
	if c != 0 {
		last := p.execStart[b]
		if c >= 2 {
			last = float64(c-2) * p.quantum
		}
		m := math.Max(1, math.Ceil((tq-d.tol-last)/d.every-1e-9))
		s1 = math.Max(s1, last+m*d.every-d.tol)
	}
	f := float64(min(d.maxRun, nf))
	sum := 0.0
	for i := 0; i < (nf-1)/d.minRun+1; i++ {
		t := s1 + float64(i)*(d.every-d.tol)
		if t >= x.lastObs[a] || t >= p.tEnd {
			break
		}
		qq := min(x.qN, int(math.Floor(t/p.quantum+1e-9)))
		r := d.point + f*d.w*x.qmax[a*Q+qq]
		sum += r
		x.runItems = append(x.runItems, knapItem{dens: r})
	}
	return sum
}

// lagrange builds the Lagrangian bounds of the time-indexed relaxation:
// every second of the open night holds at most one frame, a frame of
// block a covering step j earns at most dens[a][j] per second (its
// weight at the best quality within a frame of step j, over its length),
// and block a's frames take at most capS_a seconds; dualising the
// budgets with multipliers lam >= 0,
//
//	value <= sum over steps j of open_j * max_a (dens[a][j] - lam_a)+ + sum_a lam_a capS_a
//
// for any lam (weak duality; the relaxation is the time-indexed
// formulation of Sousa & Wolsey 1992, Mathematical Programming 54, 353).
// The multipliers are fitted by subgradient descent (Held, Wolfe &
// Crowder 1974, Mathematical Programming 6, 62) at the plan's start and
// at later anchors with the frame budgets of the start; lam = 0 is kept
// as well. Each state takes the smallest of the bounds with its own
// budgets.
func (x *exact) lagrange() {
	p := x.p
	A, n := len(x.active), p.n
	if A == 0 {
		return
	}
	x.dens = make([]float64, A*n)
	for a, b := range x.active {
		d := &p.bd[b]
		r := int(math.Ceil(d.frame / p.step))
		for j := 0; j < n; j++ {
			x.dens[a*n+j] = -1
			if d.bad[j] == int32(j) {
				continue // not observable in step j
			}
			qm := 0.0
			for i := max(0, j-r); i <= min(n-1, j+r); i++ {
				if d.bad[i] != int32(i) && float64(d.q[i]) > qm {
					qm = float64(d.q[i])
				}
			}
			x.dens[a*n+j] = d.w * qm / d.frame
		}
	}
	open := func(a, b float64) float64 { // open seconds of [a, b)
		if b <= a {
			return 0
		}
		o := b - a
		for i := 0; i+1 < len(p.cl); i += 2 {
			o -= math.Max(0, math.Min(b, p.cl[i+1])-math.Max(a, p.cl[i]))
		}
		return o
	}
	capJ := make([]float64, n)
	for j := range capJ {
		capJ[j] = open(float64(j)*p.step, math.Min(p.tEnd, float64(j+1)*p.step))
	}
	x.openRest = make([]float64, x.qN+1)
	for q := range x.openRest {
		t := float64(q) * p.quantum
		j := min(n-1, int(math.Floor(t/p.step)))
		x.openRest[q] = open(t, math.Min(p.tEnd, float64(j+1)*p.step))
	}
	mk := func(lam []float64) lagBound {
		lb := lagBound{lam: lam, m: make([]float64, n), suf: make([]float64, n+1)}
		for j := 0; j < n; j++ {
			for a := 0; a < A; a++ {
				if d := x.dens[a*n+j]; d >= 0 && d-lam[a] > lb.m[j] {
					lb.m[j] = d - lam[a]
				}
			}
		}
		for j := n - 1; j >= 0; j-- {
			lb.suf[j] = lb.suf[j+1] + capJ[j]*lb.m[j]
		}
		return lb
	}
	x.blockTables(capJ)
	x.lags = append(x.lags, mk(make([]float64, A)))
	Q := x.qN + 1
	for q := x.q0; q < x.qN; q += int(math.Ceil(5400 / p.quantum)) {
		c := make([]float64, A)
		for a, b := range x.active {
			c[a] = float64(min(p.bd[b].rem, int(x.maxF[a*Q+q]))) * p.bd[b].frame
		}
		x.lags = append(x.lags, mk(x.subgradient(q, c, capJ)))
	}
}

// blockTables fills vtab: for every active block and step, the value of
// its best k frames' worth of seconds of the rest of the night, each
// second at the block's density there (the relaxation of lagrange for
// one block alone, exact for it: the best seconds first).
func (x *exact) blockTables(capJ []float64) {
	p := x.p
	n := p.n
	x.vtab = make([][]float64, len(x.active))
	x.vk = make([]int, len(x.active))
	type piece struct{ dens, capS float64 }
	for a, b := range x.active {
		d := &p.bd[b]
		K := min(d.rem, int(x.maxF[a*(x.qN+1)]))
		x.vk[a] = K
		tab := make([]float64, (n+1)*(K+1))
		var sorted []piece // steps from j on, best first
		for j := n - 1; j >= 0; j-- {
			if dj := x.dens[a*n+j]; dj >= 0 && capJ[j] > 0 {
				i := sort.Search(len(sorted), func(i int) bool { return sorted[i].dens < dj })
				sorted = append(sorted, piece{})
				copy(sorted[i+1:], sorted[i:])
				sorted[i] = piece{dj, capJ[j]}
			}
			row := tab[j*(K+1) : (j+1)*(K+1)]
			v, used, k := 0.0, 0.0, 1
			for i := 0; i < len(sorted) && k <= K; i++ {
				c := sorted[i].capS
				for c > 0 && k <= K {
					want := float64(k)*d.frame - used
					t := math.Min(c, want)
					v += t * sorted[i].dens
					used += t
					c -= t
					if used >= float64(k)*d.frame-1e-9 {
						row[k] = v
						k++
					}
				}
			}
			for ; k <= K; k++ {
				row[k] = v
			}
		}
		x.vtab[a] = tab
	}
}

// subgradient fits multipliers that make the Lagrangian bound from
// quantum q small for the frame budgets c (seconds).
func (x *exact) subgradient(q int, c, capJ []float64) []float64 {
	p := x.p
	A, n := len(x.active), p.n
	j0 := min(n-1, int(math.Floor(float64(q)*p.quantum/p.step)))
	scale := 0.0
	for _, d := range x.dens {
		scale = math.Max(scale, d)
	}
	lam := make([]float64, A)
	best := append([]float64(nil), lam...)
	bestL := math.Inf(1)
	g := make([]float64, A)
	for it := 0; it < 200; it++ {
		L := 0.0
		copy(g, c)
		for a := range lam {
			L += lam[a] * c[a]
		}
		for j := j0; j < n; j++ {
			cj := capJ[j]
			if j == j0 {
				cj = x.openRest[q]
			}
			bv, ba := 0.0, -1
			for a := 0; a < A; a++ {
				if d := x.dens[a*n+j]; d >= 0 && d-lam[a] > bv {
					bv, ba = d-lam[a], a
				}
			}
			L += cj * bv
			if ba >= 0 {
				g[ba] -= cj
			}
		}
		if L < bestL {
			bestL = L
			copy(best, lam)
		}
		norm := 0.0
		for a := range g {
			if g[a] < 0 || lam[a] > 0 {
				norm += g[a] * g[a]
			}
		}
		if norm == 0 {
			break
		}
		norm = math.Sqrt(norm)
		step := scale * 0.3 / (1 + float64(it)/10)
		for a := range lam {
			lam[a] = math.Max(0, lam[a]-step*g[a]/norm)
		}
	}
	return best
}

// fillKnapsack is the fractional knapsack: items by value per second,
// best first, into capacity seconds.
func fillKnapsack(items []knapItem, capacity float64) float64 {
	for i := 1; i < len(items); i++ { // insertion sort: a few dozen items
		for j := i; j > 0 && items[j].dens > items[j-1].dens; j-- {
			items[j], items[j-1] = items[j-1], items[j]
		}
	}
	v := 0.0
	for _, it := range items {
		if capacity <= 0 {
			break
		}
		c := math.Min(it.capS, capacity)
		v += c * it.dens
		capacity -= c
	}
	return v
}

// value is the memoised recursion with branch and bound: it returns the
// state's value when that exceeds need, and otherwise an upper bound on
// it that is at most need.
func (x *exact) value(k uint64, need float64) float64 {
	q, vec := x.unkeyVec(k)
	return x.valueB(k, need, x.bound(q, vec))
}

// valueB is value with the state's bound ub computed.
func (x *exact) valueB(k uint64, need, ub float64) float64 {
	x.st.Visited++
	if e, ok := x.memo[k]; ok && (e.exact || e.v <= need) {
		return e.v
	}
	if x.overflow {
		return 0
	}
	_, vec := x.unkeyVec(k)
	if e, ok := x.memo[k]; ok {
		ub = math.Min(ub, e.v)
	}
	if ub <= need {
		x.st.Pruned++
		return ub
	}
	if len(x.memo) >= x.lim.MaxStates {
		x.overflow = true
		return 0
	}
	best := 0.0
	if x.committed(vec) {
		best = math.Inf(-1) // a short run was taken: stopping is not allowed
	}
	// The children's bounds first: most are cut before their vector is
	// interned; the others are searched best bound first, so that the
	// best value found early cuts their siblings.
	type kid struct {
		c       choice
		imm, ub float64
	}
	var kids []kid
	var arena []byte
	x.options(k, func(c *choice, imm float64) bool {
		ub := x.bound(c.nq, c.vec)
		if imm+ub <= math.Max(need, best) {
			x.st.Pruned++
			x.st.Visited++
			if imm+ub > best {
				best = imm + ub // an upper bound, at most need
			}
			return true
		}
		cc := *c
		off := len(arena)
		arena = append(arena, c.vec...)
		cc.vec = arena[off:len(arena):len(arena)]
		kids = append(kids, kid{cc, imm, ub})
		return true
	})
	// The arena may have moved while growing: re-slice the vectors.
	off := 0
	for i := range kids {
		kids[i].c.vec = arena[off : off+x.vlen]
		off += x.vlen
	}
	sort.Slice(kids, func(i, j int) bool { return kids[i].imm+kids[i].ub > kids[j].imm+kids[j].ub })
	for i := range kids {
		kd := &kids[i]
		th := math.Max(need, best) - kd.imm
		if kd.ub <= th {
			x.st.Pruned++
			continue
		}
		if v := kd.imm + x.valueB(x.next(&kd.c), th, kd.ub); v > best {
			best = v
		}
		if x.overflow {
			break
		}
	}
	x.memo[k] = memoEntry{v: best, exact: best > need || math.IsInf(best, -1)}
	return best
}

// reconstruct follows the optimal choices from the root.
func (x *exact) reconstruct(k uint64) *sched {
	p := x.p
	sc := p.emptySched()
	for {
		v := x.memo[k].v
		if _, vec := x.unkeyVec(k); v <= 1e-12 && !x.committed(vec) {
			return sc
		}
		var pick *choice
		var nk uint64
		x.options(k, func(c *choice, imm float64) bool {
			k2 := x.next(c)
			if e, ok := x.memo[k2]; ok && e.exact && math.Abs(imm+e.v-v) <= 1e-9*math.Max(1, math.Abs(v)) {
				cc := *c
				pick, nk = &cc, k2
				return false
			}
			return true
		})
		if pick == nil {
			return sc
		}
		if !pick.wait {
			b := x.active[pick.a]
			it, _ := p.newRun(b, float64(pick.qs)*p.quantum)
			for it.r.n < pick.n && it.next() {
			}
			p.insert(sc, len(sc.runs), it.r)
		}
		k = nk
	}
}
