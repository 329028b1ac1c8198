package scheduler

import (
	"math"
)

// run is one run of one block inside the solvers, times in seconds from
// the grid's start.
type run struct {
	b            int
	s, e         float64 // first exposure start, last readout end
	n            int     // frames
	side0, side1 int8    // pier side at start and end
	flipAt       float64 // start of the flip (wait included), -1 if none
	flipBefore   int     // the flip comes before this frame
	val          float64 // the cadence point (if any) + sum of w * quality over frames
}

// runIter grows a run of one block frame by frame, following the frame
// layout of the package doc.
type runIter struct {
	p     *Problem
	d     *bdat
	r     run
	t     float64 // when the next frame could start
	limit float64 // the run must end by here (the end of its observable interval)
	side  int8
}

// newRun starts a run of block b at s; ok is false when s is not
// observable.
func (p *Problem) newRun(b int, s float64) (runIter, bool) {
	if s < 0 || s >= p.tEnd {
		return runIter{}, false
	}
	d := &p.bd[b]
	limit := p.ivEnd(b, s)
	if limit < 0 {
		return runIter{}, false
	}
	side := p.startSide(b, s)
	it := runIter{p: p, d: d, t: s, limit: limit, side: side,
		r: run{b: b, s: s, e: s, side0: side, side1: side, flipAt: -1, val: d.point}}
	return it, true
}

// next adds one frame; it returns false (leaving the run as it was) when
// the frame does not fit before the limit or the mount cannot flip.
func (it *runIter) next() bool {
	p, d := it.p, it.d
	t := it.t
	j := it.r.n
	if j > 0 && d.ditherEvery > 0 && j%d.ditherEvery == 0 {
		t += d.dither
	}
	side := it.side
	flipAt := -1.0
	if p.gem() && side == sideEast && p.haAt(it.r.b, t+d.frame) > p.flip1-flipMargin {
		if j == 0 || d.avoidFlip {
			return false // a block that avoids the flip zone never flips inside a run
		}
		tf := t
		if p.haAt(it.r.b, tf) < p.flip0 {
			tf = p.timeOfHA(it.r.b, p.flip0, tf)
		}
		flipAt = tf
		t = tf + p.oh.flp
		side = sideWest
	}
	end := t + d.frame
	if end > it.limit+1e-9 {
		return false
	}
	if flipAt >= 0 {
		it.r.flipAt, it.r.flipBefore = flipAt, j
	}
	it.side = side
	mid := t + d.exp/2
	it.r.val += d.w * float64(d.q[p.stepAt(mid)])
	it.r.n++
	it.r.e = end
	it.r.side1 = side
	it.t = end
	return true
}

// flipMargin keeps east-side frames this far (radians of hour angle, 30
// arcsec, 2 s of sidereal time) before the flip zone's end: the hour angle
// between grid samples is interpolated from float32 tracks.
const flipMargin = 30.0 / 3600 * math.Pi / 180

// frameStarts replays a run's layout and returns the start of every
// exposure.
func (p *Problem) frameStarts(r *run) []float64 {
	it, ok := p.newRun(r.b, r.s)
	if !ok {
		return nil
	}
	out := make([]float64, 0, r.n)
	for it.r.n < r.n && it.next() {
		// The exposure starts one frame length before the new end.
		out = append(out, it.r.e-it.d.frame)
	}
	return out
}

// timeOfHA returns the first instant at or after from when block b's hour
// angle reaches ha (radians).
func (p *Problem) timeOfHA(b int, ha, from float64) float64 {
	x := from + (ha-p.haAt(b, from))/siderealRate
	for k := 0; k < 4; k++ {
		x += (ha - p.haAt(b, x)) / siderealRate
	}
	x = math.Max(x, from)
	for p.haAt(b, x) < ha {
		x += 0.25
	}
	return x
}

// minFrames is the fewest frames of a run of block b when planned frames
// (of this plan) are already taken: MinRun, or what completes the block.
func (p *Problem) minFrames(b, planned int) int {
	left := p.bd[b].rem - planned
	return min(p.bd[b].minRun, left)
}

// maxFrames is the most frames of one run of block b.
func (p *Problem) maxFrames(b, planned int) int {
	return min(p.bd[b].maxRun, p.bd[b].rem-planned)
}

// setupClear reports whether the setup interval [s-tot, s) avoids every
// closure.
func (p *Problem) setupClear(s, tot float64) bool {
	return len(p.cl) == 0 || p.closureIn(math.Max(0, s-tot), s) < 0
}

// earliest returns the earliest start at or after notBefore of a run of
// block b after prev, the mount being free from base (a quantum boundary):
// the setup fits between base and the start, avoids closures, and the
// start is observable. ok is false when no such start exists before the
// grid ends.
func (p *Problem) earliest(prev prevState, b int, base, notBefore float64) (s float64, su setupParts, ok bool) {
	s = p.ceilQ(math.Max(base, notBefore))
	for iter := 0; iter < 64; iter++ {
		if s >= p.tEnd {
			return 0, su, false
		}
		if p.ivEnd(b, s) < 0 {
			g := p.ivNext(b, s)
			if g >= p.tEnd {
				return 0, su, false
			}
			s = p.ceilQ(g)
			continue
		}
		su = p.setup(prev, b, s)
		tot := su.total()
		if need := p.ceilQ(base + tot); !(need <= s+1e-9) {
			s = need
			continue
		}
		if c := p.closureIn(math.Max(0, s-tot), s); c >= 0 {
			// Start the setup after the closure that it overlaps.
			s = p.ceilQ(c + tot)
			base = math.Max(base, c)
			continue
		}
		return s, su, true
	}
	return 0, su, false
}

// startOK reports whether a run of b may start exactly at s after prev with
// the mount free from base, returning the setup.
func (p *Problem) startOK(prev prevState, b int, base, s float64) (setupParts, bool) {
	if s < base-1e-9 || s >= p.tEnd {
		return setupParts{}, false
	}
	su := p.setup(prev, b, s)
	tot := su.total()
	if !(s-base >= tot-1e-9) || !p.setupClear(s, tot) {
		return su, false
	}
	return su, true
}

// fitsBefore reports whether the next run (block nb starting at ns) still
// fits after run r: the mount is free at ceilQ(r.e) and the setup of the
// next run fits before ns, clear of closures.
func (p *Problem) fitsBefore(r *run, nb int, ns float64) bool {
	if nb < 0 {
		return r.e <= ns+1e-9
	}
	su := p.setup(p.after(r.b, r.s, r.side1), nb, ns)
	tot := su.total()
	return ns-p.ceilQ(r.e) >= tot-1e-9 && p.setupClear(ns, tot)
}
