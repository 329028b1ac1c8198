package scheduler

import (
	"fmt"
	"math"
)

// ExactLimits bound the exact solver's work.
type ExactLimits struct {
	// MaxStates is the most memoised states (default 20 million, about
	// 1.5 GB at worst).
	MaxStates int
}

// Exact finds the optimum of the night by dynamic programming over
// (time quantum, last block, its pier side, its focus period, frames
// planned per block), with memoised recursion over the reachable states:
//
//	V(q, l, side, period, f) = max( 0,                     stop
//	                                V(q+1, l, side, period, f),     wait one quantum
//	                                max over b, s, n of val(b, s, n) + bonus + V(q', b, side', period(s), f + n e_b) )
//
// where a run of block b with n frames starts at a quantum s for which the
// setup after l fits from q but not from q+1 (later starts are reached
// through the wait), and q' is the first quantum at or after its end.
// The state holds everything the overheads and the objective depend on,
// so the recursion is exact for the model of this package with starts on
// the quantum grid, which is the space every solver here searches: its
// value is an upper bound on theirs, and equal to the best possible.
//
// It refuses (ErrTooLarge) cadence blocks, more than 30 blocks, and state
// spaces beyond the limits; it is meant for instances of about ten blocks.
func Exact(p *Problem, lim ExactLimits) (*Plan, error) {
	if lim.MaxStates <= 0 {
		lim.MaxStates = 20_000_000
	}
	x, err := newExact(p, lim)
	if err != nil {
		return nil, err
	}
	root := x.rootKey()
	x.value(root)
	if x.overflow {
		return nil, fmt.Errorf("%w: more than %d states", ErrTooLarge, lim.MaxStates)
	}
	sc := x.reconstruct(root)
	pl := p.toPlan(sc, "exact-dp", 0)
	return pl, nil
}

type exactRun struct {
	n    int
	qe   int // first quantum at or after the end
	val  float64
	side int8
	r    run
}

type exact struct {
	p        *Problem
	active   []int // block indices
	pos      []int // block -> active index (-1)
	radix    []uint64
	mult     []uint64
	q0, qN   int
	kmin     int
	kmax     int
	memo     map[uint64]float64
	runs     map[int][]exactRun // key b*qN + qs
	base     []float64          // (l+1)*2*A*qN ...: max(slew+settle, filter)
	lim      ExactLimits
	overflow bool
}

const (
	exactAnchor = 31
	exactQBits  = 14
	exactLBits  = 5
	exactPBits  = 8
	exactFBits  = 64 - exactQBits - exactLBits - 1 - exactPBits
)

func newExact(p *Problem, lim ExactLimits) (*exact, error) {
	x := &exact{p: p, lim: lim, pos: make([]int, len(p.Blocks)), memo: map[uint64]float64{}, runs: map[int][]exactRun{}}
	prod := uint64(1)
	for b := range p.Blocks {
		x.pos[b] = -1
		d := &p.bd[b]
		if d.rem <= 0 || p.ivNext(b, p.tFrom) >= p.tEnd {
			continue
		}
		if d.every > 0 {
			return nil, fmt.Errorf("%w: cadence block %q", ErrTooLarge, p.Blocks[b].ID)
		}
		x.pos[b] = len(x.active)
		x.active = append(x.active, b)
		x.mult = append(x.mult, prod)
		r := uint64(d.rem + 1)
		if d.minRun > 1 {
			// Twice: the frames planned, and whether a short run (fewer
			// than MinRun frames, not completing the block) has been
			// taken, which commits the plan to completing the block.
			r *= 2
		}
		x.radix = append(x.radix, r)
		if prod > math.MaxUint64/r {
			return nil, fmt.Errorf("%w: frame space overflows", ErrTooLarge)
		}
		prod *= r
	}
	if len(x.active) >= exactAnchor {
		return nil, fmt.Errorf("%w: %d blocks", ErrTooLarge, len(x.active))
	}
	if prod >= 1<<exactFBits {
		return nil, fmt.Errorf("%w: frame space of %d states", ErrTooLarge, prod)
	}
	x.qN = int(math.Floor(p.tEnd/p.quantum + 1e-9))
	if x.qN >= 1<<exactQBits {
		return nil, fmt.Errorf("%w: %d quanta", ErrTooLarge, x.qN)
	}
	if p.oh.focusEvery > 0 && p.tEnd/p.oh.focusEvery >= 1<<exactPBits-1 {
		return nil, fmt.Errorf("%w: too many focus periods", ErrTooLarge)
	}
	x.q0 = int(math.Round(p.ceilQ(p.anchor.free) / p.quantum))
	x.kmin = int(math.Floor((p.oh.settle + p.oh.acq) / p.quantum))
	x.kmax = int(math.Ceil(p.maxSetup/p.quantum)) + 1
	// Setup without focus and acquisition, for every previous block (or
	// the anchor), side, next block and start quantum.
	A := len(x.active)
	x.base = make([]float64, (A+1)*2*A*x.qN)
	for l := -1; l < A; l++ {
		for side := int8(0); side < 2; side++ {
			prev := x.prevOf(l, side, 0)
			for a, b := range x.active {
				for qs := 0; qs < x.qN; qs++ {
					s := float64(qs) * p.quantum
					su := p.setup(prev, b, s)
					x.base[x.baseIdx(l, side, a, qs)] = math.Max(su.slew+su.settle, su.filter)
				}
			}
		}
	}
	return x, nil
}

func (x *exact) baseIdx(l int, side int8, a, qs int) int {
	A := len(x.active)
	return (((l+1)*2+int(side))*A+a)*x.qN + qs
}

// prevOf is the previous state for active index l (-1 = the anchor).
func (x *exact) prevOf(l int, side int8, period int) prevState {
	p := x.p
	if l < 0 {
		return p.anchorState()
	}
	b := x.active[l]
	return prevState{block: b, side: side, start: float64(period) * p.oh.focusEvery, filter: p.bd[b].filter, focused: true}
}

func (x *exact) key(q, l int, side int8, period int, f uint64) uint64 {
	lc := uint64(exactAnchor)
	if l >= 0 {
		lc = uint64(l)
	}
	k := uint64(q)
	k = k<<exactLBits | lc
	k = k<<1 | uint64(side)
	k = k<<exactPBits | uint64(period+1)
	k = k<<exactFBits | f
	return k
}

func (x *exact) unkey(k uint64) (q, l int, side int8, period int, f uint64) {
	f = k & (1<<exactFBits - 1)
	k >>= exactFBits
	period = int(k&(1<<exactPBits-1)) - 1
	k >>= exactPBits
	side = int8(k & 1)
	k >>= 1
	l = int(k & (1<<exactLBits - 1))
	if l == exactAnchor {
		l = -1
	}
	k >>= exactLBits
	q = int(k)
	return
}

func (x *exact) rootKey() uint64 {
	a := x.p.anchor
	period := -1
	if a.block >= 0 {
		period = x.p.focusPeriod(a.start)
	}
	return x.key(x.q0, -1, a.side, period, 0)
}

// runsAt returns the runs of active block a starting at quantum qs.
func (x *exact) runsAt(a, qs int) []exactRun {
	b := x.active[a]
	id := b*x.qN + qs
	if rs, ok := x.runs[id]; ok {
		return rs
	}
	p := x.p
	var rs []exactRun
	if it, ok := p.newRun(b, float64(qs)*p.quantum); ok {
		nmax := min(p.bd[b].maxRun, p.bd[b].rem)
		for it.r.n < nmax && it.next() {
			qe := int(math.Round(p.ceilQ(it.r.e) / p.quantum))
			rs = append(rs, exactRun{n: it.r.n, qe: qe, val: it.r.val, side: it.r.side1, r: it.r})
		}
	}
	x.runs[id] = rs
	return rs
}

// choice is one option of a state, for reconstruction.
type choice struct {
	wait bool
	a    int
	er   exactRun
	next uint64
}

// options calls f with every option of a state and its immediate value
// (the continuation's key included); it returns early when f returns false.
func (x *exact) options(k uint64, f func(c choice, imm float64) bool) {
	p := x.p
	q, l, side, period, fv := x.unkey(k)
	if q+1 <= x.qN {
		if !f(choice{wait: true, next: x.key(q+1, l, side, period, fv)}, 0) {
			return
		}
	}
	prev := x.prevOf(l, side, period)
	if l < 0 && p.anchor.block < 0 {
		prev = p.anchorState()
	}
	for a, b := range x.active {
		d := &p.bd[b]
		fb, short := x.frames(fv, a)
		left := d.rem - fb
		if left <= 0 {
			continue
		}
		for kq := x.kmin; kq <= x.kmax; kq++ {
			qs := q + kq
			if qs >= x.qN {
				break
			}
			s := float64(qs) * p.quantum
			tot := x.base[x.baseIdx(l, side, a, qs)] + p.oh.acq
			if p.oh.focus > 0 && (!prev.focused || prev.filter != d.filter && p.oh.focusOnFilter ||
				p.oh.focusEvery > 0 && p.focusPeriod(prev.start) != p.focusPeriod(s)) {
				tot += p.oh.focus
			}
			hi := float64(kq) * p.quantum
			if !(tot <= hi+1e-9) || tot <= hi-p.quantum+1e-9 || !p.setupClear(s, tot) {
				continue
			}
			for _, er := range x.runsAt(a, qs) {
				if er.n > left {
					break
				}
				add := uint64(er.n) * x.mult[a]
				if er.n < d.minRun {
					// One short run per block, anywhere in time, when the
					// plan completes the block (as Validate has it).
					if short {
						continue
					}
					if er.n != left {
						if !splits(left-er.n, d.minRun, d.maxRun) {
							continue // the rest could not be completed
						}
						add += uint64(d.rem+1) * x.mult[a]
					}
				}
				imm := er.val
				if er.n == left {
					imm += d.bonus
				}
				nk := x.key(er.qe, a, er.side, p.focusPeriod(s), fv+add)
				if !f(choice{a: a, er: er, next: nk}, imm) {
					return
				}
			}
		}
	}
}

// frames decodes active block a's frames planned and its short-run flag
// from the frame part of a key.
func (x *exact) frames(fv uint64, a int) (int, bool) {
	v := int(fv / x.mult[a] % x.radix[a])
	n := x.p.bd[x.active[a]].rem + 1
	return v % n, v >= n
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

// committed reports whether a state holds a block with a short run that
// is not yet complete.
func (x *exact) committed(k uint64) bool {
	_, _, _, _, fv := x.unkey(k)
	for a, b := range x.active {
		if f, short := x.frames(fv, a); short && f < x.p.bd[b].rem {
			return true
		}
	}
	return false
}

// value is the memoised recursion.
func (x *exact) value(k uint64) float64 {
	if v, ok := x.memo[k]; ok {
		return v
	}
	if x.overflow {
		return 0
	}
	if len(x.memo) >= x.lim.MaxStates {
		x.overflow = true
		return 0
	}
	best := 0.0
	if x.committed(k) {
		best = math.Inf(-1) // a short run was taken: stopping is not allowed
	}
	x.options(k, func(c choice, imm float64) bool {
		if v := imm + x.value(c.next); v > best {
			best = v
		}
		return !x.overflow
	})
	x.memo[k] = best
	return best
}

// reconstruct follows the optimal choices from the root.
func (x *exact) reconstruct(k uint64) *sched {
	p := x.p
	sc := p.emptySched()
	for {
		v := x.memo[k]
		if v <= 0 && !x.committed(k) {
			return sc
		}
		var pick *choice
		x.options(k, func(c choice, imm float64) bool {
			if math.Abs(imm+x.memo[c.next]-v) <= 1e-9*math.Max(1, v) {
				cc := c
				pick = &cc
				return false
			}
			return true
		})
		if pick == nil {
			return sc
		}
		if !pick.wait {
			p.insert(sc, len(sc.runs), pick.er.r)
		}
		k = pick.next
	}
}
