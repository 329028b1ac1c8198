package scheduler

import (
	"math"
	"math/rand/v2"
	"sync"
)

// cand is a candidate insertion: a new run at a gap, or a longer version
// of the run just before the gap (extend).
type cand struct {
	r      run
	more   []run // further back-to-back runs of the same block (completion chains)
	extend bool
	delta  float64 // change of the objective
	span   float64 // time used from the gap's base to the run's end
	win    float64 // the part of the run's window inside the gap (byTightness)
	score  float64 // delta or delta/span, with noise, for ranking
	ok     bool
}

// Scoring modes of the insertion heuristics: the change of the
// objective, that change per second used, the change with the completion
// bonus prorated over frames (progress toward a bonus counts), or the
// change times the squared share of its window that the run needs (the
// least flexible insertions first: a block that fits only one narrow
// window goes in before a flexible one takes that window).
const (
	byValue = iota
	byDensity
	byProgress
	byTightness
)

func (p *Problem) score(c *cand, mode int) float64 {
	switch mode {
	case byDensity:
		return c.delta / math.Max(c.span, 1)
	case byTightness:
		share := math.Min(1, (c.r.e-c.r.s)/math.Max(c.win, 1))
		return c.delta * share * share
	case byProgress:
		d := &p.bd[c.r.b]
		if d.rem > 0 && !c.extend {
			n := c.r.n
			for _, r := range c.more {
				n += r.n
			}
			return c.delta + d.bonus*float64(n)/float64(d.rem)
		}
	}
	return c.delta
}

// bestInGap returns the best insertion of block b in the gap before
// runs[pos]: a run starting as early as possible (in each of the first few
// windows of the gap), as late as possible, or centred on the block's best
// quality, each with as many frames as fit; or the extension of the run
// just before the gap when it is of block b.
func (p *Problem) bestInGap(sc *sched, pos, b, mode int) cand {
	d := &p.bd[b]
	planned := sc.planned[b]
	nmax := p.maxFrames(b, planned)
	var best cand
	if nmax <= 0 && !(pos > 0 && sc.runs[pos-1].b == b) {
		return best
	}
	base := p.baseOf(sc, pos)
	nb, ns := p.nextOf(sc, pos)
	consider := func(c cand) {
		c.score = p.score(&c, mode)
		if c.ok && (!best.ok || c.score > best.score) {
			best = c
		}
	}
	var dl [2]float64
	var dlSet [2]bool
	fits := func(r *run) bool {
		if nb < 0 {
			return r.e <= ns+1e-9
		}
		sd := r.side1
		if !dlSet[sd] {
			su := p.setup(p.after(b, r.s, sd), nb, ns)
			tot := su.total()
			dl[sd] = ns - tot
			if !p.setupClear(ns, tot) {
				dl[sd] = math.Inf(-1)
			}
			dlSet[sd] = true
		}
		return p.ceilQ(r.e) <= dl[sd]+1e-9
	}

	// Extension of the run before the gap (not of a run that replanning
	// keeps from the old plan).
	if pos > 0 && sc.runs[pos-1].b == b && !p.keep[keyOf(&sc.runs[pos-1])] {
		old := sc.runs[pos-1]
		limit := min(d.maxRun, old.n+d.rem-planned)
		if limit > old.n {
			if it, ok := p.newRun(b, old.s); ok {
				dlSet = [2]bool{}
				var last run
				for it.r.n < limit && it.next() {
					if it.r.n < old.n {
						continue
					}
					if !fits(&it.r) {
						break
					}
					last = it.r
				}
				if last.n > old.n {
					consider(cand{r: last, extend: true, ok: true, span: last.e - old.e,
						delta: last.val - old.val + p.bonusDelta(b, planned, planned-old.n+last.n)})
				}
			}
		}
	}
	if nmax <= 0 {
		return best
	}
	nmin := p.minFrames(b, planned)
	if ns-base < d.minSetup+float64(nmin)*d.frame {
		return best
	}
	if g := p.ivNext(b, base); g >= p.tEnd || g > ns-float64(nmin)*d.frame {
		return best
	}
	lo, hi, ok := p.cadenceRange(sc, b, pos, base)
	if !ok {
		return best
	}
	prev := p.prevOf(sc, pos)
	var tryN func(s float64, nmax int, checked bool) (run, bool)
	try := func(s float64) (run, bool) { return tryN(s, nmax, false) }
	tryN = func(s float64, nmax int, checked bool) (run, bool) {
		if s < lo-1e-9 || s > hi+1e-9 {
			return run{}, false
		}
		if !checked {
			if _, ok := p.startOK(prev, b, base, s); !ok {
				return run{}, false
			}
		}
		it, ok := p.newRun(b, s)
		if !ok {
			return run{}, false
		}
		dlSet = [2]bool{}
		var last run
		for it.r.n < nmax && it.next() {
			if !fits(&it.r) {
				break
			}
			last = it.r
		}
		if last.n < nmin {
			return last, false
		}
		c := cand{r: last, ok: true, span: last.e - base,
			delta: last.val + p.bonusDelta(b, planned, planned+last.n)}
		if mode == byTightness {
			c.win = p.windowIn(b, last.s, base, ns)
			if d.every > 0 && !math.IsInf(lo, -1) {
				c.win = math.Min(c.win, hi-lo+(last.e-last.s))
			}
		}
		consider(c)
		return last, true
	}

	// As early as possible, in up to three windows.
	from := math.Max(base, lo)
	se := math.Inf(1)
	for w := 0; w < 3; w++ {
		s, _, ok := p.earliest(prev, b, base, from)
		if !ok || s >= ns || s > hi+1e-9 {
			break
		}
		if w == 0 {
			se = s
		}
		r, ok := tryN(s, nmax, true)
		if ok {
			break
		}
		// The window was too short: try the next one.
		end := p.ivEnd(b, s)
		if r.n > 0 {
			end = math.Max(end, r.e)
		}
		from = math.Max(end, s) + p.quantum
	}
	if math.IsInf(se, 1) {
		return best
	}
	// A chain of back-to-back runs from the earliest start that completes
	// the block: the bonus only comes with the last run, which one-run
	// insertions cannot see.
	if d.rem-planned > nmax && d.every <= 0 {
		p.chain(prev, b, base, se, planned, nb, ns, consider)
	}
	// As late as possible, and centred on the best quality.
	dur := float64(nmax) * d.frame
	if d.ditherEvery > 0 {
		dur += float64((nmax-1)/d.ditherEvery) * d.dither
	}
	next := 0.0
	if nb >= 0 {
		next = p.setup(p.after(b, ns-dur, sideEast), nb, ns).total()
	}
	sl := p.floorQ(math.Min(hi, ns-next-dur))
	if sl > se+p.quantum {
		try(sl)
	}
	// Centred on the best quality, with as many frames as fit, the
	// shortest useful run and half-way between (density-ranked repairs
	// may prefer a short run at the best time).
	tp := (float64(d.peak) + 0.5) * p.step
	for _, n := range []int{nmax, nmin, (nmin + nmax) / 2} {
		if n != nmax && (mode == byValue || n == nmax || n < nmin) {
			continue // by value, the longest run always wins
		}
		l := float64(n) * d.frame
		if sp := p.floorQ(tp - l/2); sp > se+p.quantum && sp+l < ns {
			tryN(sp, n, false)
		} else if n != nmax {
			tryN(se, n, true)
		}
	}
	return best
}

// windowIn is the length of block b's observable interval around s, cut
// to the gap [base, ns).
func (p *Problem) windowIn(b int, s, base, ns float64) float64 {
	d := &p.bd[b]
	k := p.ivFrom(d, s)
	if k >= len(d.iv)/2 || d.iv[2*k] > s+1e-9 {
		return 0
	}
	return math.Min(ns, d.iv[2*k+1]) - math.Max(base, d.iv[2*k])
}

// chain builds runs of block b back to back from s (each as long as it
// may be) until the block is complete, and offers them as one candidate
// when the last one still fits before the next run (nb at ns).
func (p *Problem) chain(prev prevState, b int, base, s float64, planned, nb int, ns float64, consider func(cand)) {
	d := &p.bd[b]
	var runs []run
	total := 0.0
	left := d.rem - planned
	for guard := 0; left > 0 && guard < 64; guard++ {
		if len(runs) > 0 {
			last := &runs[len(runs)-1]
			prev = p.after(b, last.s, last.side1)
			base = p.ceilQ(last.e)
			var ok bool
			if s, _, ok = p.earliest(prev, b, base, base); !ok || s >= ns {
				return
			}
			if p.ivEnd(b, base) < s {
				return // the window ended: the chain would not be back to back
			}
		}
		it, ok := p.newRun(b, s)
		if !ok {
			return
		}
		want := min(d.maxRun, left)
		for it.r.n < want && it.next() {
		}
		if it.r.n < min(d.minRun, left) || it.r.n == 0 {
			return
		}
		runs = append(runs, it.r)
		total += it.r.val
		left -= it.r.n
	}
	if left > 0 || len(runs) < 2 {
		return
	}
	last := &runs[len(runs)-1]
	if !p.fitsBefore(last, nb, ns) {
		return
	}
	consider(cand{r: runs[0], more: runs[1:], ok: true, span: last.e - base,
		delta: total + p.bonusDelta(b, planned, d.rem)})
}

// repairState holds the candidate insertions of every gap during one
// repair: per gap a max-heap of entries, each either an evaluated
// candidate (its score) or an unevaluated block (an upper bound on its
// score, boundInGap). Evaluating a block only when its bound reaches the
// top of every gap is the lazy greedy of Minoux (1978, "Accelerated greedy
// algorithms for maximizing submodular set functions"; citation from
// memory): the pick is the
// same as scoring every block in every gap, at a fraction of the
// insertions tried.
type repairState struct {
	gaps []gapHeap
	// members of each gap: the blocks entered there, including those whose
	// evaluation found no insertion (they are tried again in the gaps that
	// an insertion splits it into, where another next run may let them fit).
	members [][]int
	cands   []cand // evaluated candidates, indexed by gapEntry.ci
	ver     int    // bumped by every change of the timeline
	mode    int
	noise   float64
	rng     *rand.Rand
	// Buffers kept between repairs (repairPool): every block's index,
	// and released heaps and member lists.
	all   []int
	freeH []gapHeap
	freeM [][]int
}

// repairPool recycles repair states: a search repairs once per
// iteration, and its heaps would otherwise be garbage every time.
var repairPool = sync.Pool{New: func() any { return new(repairState) }}

// release keeps a gap's heap and member list for reuse.
func (rs *repairState) release(h gapHeap, m []int) {
	if h != nil {
		rs.freeH = append(rs.freeH, h[:0])
	}
	if m != nil {
		rs.freeM = append(rs.freeM, m[:0])
	}
}

// gapEntry is block b's entry in one gap: key is the (noisy) score of the
// candidate cands[ci] evaluated at timeline version ver, or, with ci < 0,
// an upper bound on the score.
type gapEntry struct {
	key float64
	b   int32
	ci  int32
	ver int
}

// gapHeap is a max-heap of entries by key.
type gapHeap []gapEntry

func (h gapHeap) up(i int) {
	for i > 0 {
		j := (i - 1) / 2
		if !(h[i].key > h[j].key) {
			return
		}
		h[i], h[j] = h[j], h[i]
		i = j
	}
}

func (h gapHeap) down(i int) {
	n := len(h)
	for {
		l := 2*i + 1
		if l >= n {
			return
		}
		m := l
		if r := l + 1; r < n && h[r].key > h[l].key {
			m = r
		}
		if !(h[m].key > h[i].key) {
			return
		}
		h[i], h[m] = h[m], h[i]
		i = m
	}
}

func (h *gapHeap) push(e gapEntry) {
	*h = append(*h, e)
	h.up(len(*h) - 1)
}

func (h *gapHeap) popTop() {
	old := *h
	n := len(old) - 1
	old[0] = old[n]
	*h = old[:n]
	h.down(0)
}

// repair inserts runs greedily (best score first) until nothing fits.
// dirty marks the gaps whose neighbours changed (every block is tried
// there); in the other gaps only the blocks in changed are tried.
func (p *Problem) repair(sc *sched, dirty []bool, changed []int, mode int, noise float64, rng *rand.Rand) {
	rs := repairPool.Get().(*repairState)
	rs.gaps = append(rs.gaps[:0], make([]gapHeap, len(sc.runs)+1)...)
	rs.members = append(rs.members[:0], make([][]int, len(sc.runs)+1)...)
	rs.cands, rs.ver, rs.mode, rs.noise, rs.rng = rs.cands[:0], 0, mode, noise, rng
	defer func() {
		for k := range rs.gaps {
			rs.release(rs.gaps[k], rs.members[k])
			rs.gaps[k], rs.members[k] = nil, nil
		}
		rs.rng = nil
		repairPool.Put(rs)
	}()
	var all []int
	for k := 0; k <= len(sc.runs); k++ {
		if k < len(dirty) && dirty[k] {
			if all == nil {
				if len(rs.all) != len(p.Blocks) {
					rs.all = make([]int, len(p.Blocks))
					for i := range rs.all {
						rs.all[i] = i
					}
				}
				all = rs.all
			}
			p.gapBounds(sc, k, all, rs)
		} else if len(changed) > 0 {
			p.gapBounds(sc, k, changed, rs)
		}
	}
	for guard := 0; guard < 1000000; guard++ {
		bk := -1
		for k, h := range rs.gaps {
			if len(h) > 0 && (bk < 0 || h[0].key > rs.gaps[bk][0].key) {
				bk = k
			}
		}
		if bk < 0 {
			return
		}
		e := &rs.gaps[bk][0]
		if e.ci < 0 || e.ver != rs.ver {
			// A bound, or a candidate of an older timeline: (re)evaluate.
			// A candidate whose score did not drop is still the best,
			// scores elsewhere being at most their keys (for a candidate
			// of an older timeline, as when every gap was scored eagerly).
			c := p.bestInGap(sc, bk, int(e.b), mode)
			if !c.ok || e.ci < 0 && !(c.delta > 0) {
				rs.gaps[bk].popTop()
				continue
			}
			c.score = rs.noisy(c.score)
			wasExact, old := e.ci >= 0, e.key
			e.ci, e.ver = int32(len(rs.cands)), rs.ver
			rs.cands = append(rs.cands, c)
			e.key = c.score
			rs.gaps[bk].down(0)
			if !wasExact || c.score < old-1e-9 {
				continue
			}
			// The same entry is still on top (its key did not drop).
		}
		fresh := rs.cands[rs.gaps[bk][0].ci]
		parent, oldH := rs.members[bk], rs.gaps[bk]
		rs.ver++
		if fresh.extend {
			p.replace(sc, bk-1, fresh.r)
			p.gapBounds(sc, bk, parent, rs)
			rs.release(oldH, parent)
			continue
		}
		all := append([]run{fresh.r}, fresh.more...)
		for i, r := range all {
			p.insert(sc, bk+i, r)
		}
		// The gap splits into len(all)+1 gaps; the ones between the runs of
		// a chain are too short for anything.
		add := make([]gapHeap, len(all))
		rs.gaps = append(rs.gaps[:bk], append(add, rs.gaps[bk:]...)...)
		rs.members = append(rs.members[:bk], append(make([][]int, len(all)), rs.members[bk:]...)...)
		p.gapBounds(sc, bk, parent, rs)
		p.gapBounds(sc, bk+len(all), parent, rs)
		rs.release(oldH, parent)
	}
}

func (rs *repairState) noisy(s float64) float64 {
	if rs.noise <= 0 || rs.rng == nil {
		return s
	}
	return s * (1 + rs.noise*(2*rs.rng.Float64()-1))
}

// gapBounds enters the given blocks in the gap before runs[k] (its heap
// and members) with an upper bound on their score (noise included),
// leaving out the blocks that certainly have no insertion there.
func (p *Problem) gapBounds(sc *sched, k int, blocks []int, rs *repairState) {
	var h gapHeap
	var mem []int
	if n := len(rs.freeH); n > 0 {
		h, rs.freeH = rs.freeH[n-1], rs.freeH[:n-1]
	}
	if n := len(rs.freeM); n > 0 {
		mem, rs.freeM = rs.freeM[n-1], rs.freeM[:n-1]
	}
	for _, b := range blocks {
		ub, ok := p.boundInGap(sc, k, b, rs.mode)
		if !ok {
			continue
		}
		if rs.noise > 0 && rs.rng != nil {
			ub *= 1 + rs.noise
		}
		h = append(h, gapEntry{key: ub, b: int32(b), ci: -1})
		mem = append(mem, b)
	}
	for i := len(h)/2 - 1; i >= 0; i-- {
		h.down(i)
	}
	rs.gaps[k], rs.members[k] = h, mem
}

// boundInGap is an upper bound on the score (before noise) of any
// candidate with a positive delta that bestInGap(sc, k, b, mode) may
// return, and false when there is certainly none. Every frame of an
// insertion in the gap (a new run, a chain, or the frames that extend
// the run before the gap) lies inside one of the block's observable
// intervals and inside the gap, so at most f frames fit, each worth at
// most w times the best quality of those stretches; a cadence point and
// the completion bonus come on top. By mode: the density divides by the
// time used (at least f' frames for f' frames' value), the tightness
// factor is at most 1, and progress adds at most the prorated bonus.
func (p *Problem) boundInGap(sc *sched, k, b, mode int) (float64, bool) {
	d := &p.bd[b]
	left := d.rem - sc.planned[b]
	if left <= 0 || !(d.frame > 0) {
		return 0, false
	}
	base := p.baseOf(sc, k)
	_, ns := p.nextOf(sc, k)
	from := base
	ext := k > 0 && sc.runs[k-1].b == b && !p.keep[keyOf(&sc.runs[k-1])]
	if ext {
		from = sc.runs[k-1].e
	} else if ns-base < d.minSetup+float64(min(d.minRun, left))*d.frame {
		return 0, false
	}
	// Blocks have few intervals: a scan touches less memory than ivFrom.
	obs, qmax := 0.0, float32(0)
	for j := 0; j < len(d.iv) && d.iv[j] < ns; j += 2 {
		a, z := math.Max(d.iv[j], from), math.Min(d.iv[j+1], ns)
		if z <= a {
			continue
		}
		obs += z - a
		for c, c1 := p.stepAt(a)/qChunk, p.stepAt(z)/qChunk; c <= c1; c++ {
			qmax = max(qmax, d.qc[c])
		}
	}
	f := min(left, int(obs/d.frame+1e-6))
	if f <= 0 || !ext && f < min(d.minRun, left) {
		return 0, false
	}
	extra := 0.0 // cadence point (of a new run) and bonus
	if d.every > 0 {
		extra += d.point
	}
	if d.rem > 0 && left <= f {
		extra += d.bonus
	}
	v := d.w*float64(qmax)*float64(f) + extra
	if !(v > 0) {
		return 0, false
	}
	switch mode {
	case byDensity:
		return d.w*float64(qmax)/d.frame + extra/math.Max(d.frame, 1), true
	case byProgress:
		if d.rem > 0 {
			v += d.bonus * float64(f) / float64(d.rem)
		}
	}
	return v, true
}
