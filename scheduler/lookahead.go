package scheduler

import (
	"math"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// LookaheadStep is the coarse grid step of the urgency lookahead.
const LookaheadStep = 20 * time.Minute

// Lookahead says, for every block and each of a run of nights, whether the
// night has a window long enough for the block's shortest run. It is
// computed on a coarse grid (LookaheadStep) of each night, from the dusk
// of the weakest darkness any block asks for, without the sky-brightness
// model (so sky-brightness limits are not counted; every other constraint
// is, date limits included).
type Lookahead struct {
	First  time.Time // civil date of night 0
	Nights int
	usable [][]bool // [block][night]
}

// NewLookahead evaluates nights first, first+1 day, ... on coarse grids,
// nights at a time on at most workers goroutines. Closing cancel (nil:
// never) stops it with ErrCancelled.
func NewLookahead(site *Site, blocks []Block, first time.Time, nights int, step time.Duration, workers int, cancel <-chan struct{}) (*Lookahead, error) {
	la := &Lookahead{First: first, Nights: nights, usable: make([][]bool, len(blocks))}
	for i := range la.usable {
		la.usable[i] = make([]bool, nights)
	}
	dark := WeakestDarkness(blocks)
	errs := make([]error, nights)
	parallel(nights, workers, func(k int) {
		if cancelled(cancel) {
			return
		}
		day := first.AddDate(0, 0, k)
		g, err := NightGrid(site.Site, day.Year(), day.Month(), day.Day(), dark, step, constraints.Options{NoSkyBrightness: true})
		if err != nil {
			return // no night: nothing usable
		}
		tracks, vis := visibilities(g, blocks, 1, cancel)
		if cancelled(cancel) {
			return // some tracks are missing; the caller sees ErrCancelled
		}
		for i := range blocks {
			if tracks[i] == nil || vis[i] == nil {
				errs[k] = constraints.ErrTarget
				return
			}
			b := &blocks[i]
			need := float64(max(1, min(b.MinRun, b.FramesWanted-b.FramesDone))) *
				(b.Exposure.Seconds() + site.Readout.Seconds())
			for _, w := range vis[i].Windows {
				// One coarse step of slack: a window may reach up to a step
				// beyond its sampled ends.
				if float64(w.Len()+1)*step.Seconds() >= need {
					la.usable[i][k] = true
					break
				}
			}
		}
	})
	if cancelled(cancel) {
		return nil, ErrCancelled
	}
	for _, err := range errs {
		if err != nil {
			return nil, err
		}
	}
	return la, nil
}

// Usable reports whether block i has a usable window on night k.
func (la *Lookahead) Usable(i, k int) bool { return k >= 0 && k < la.Nights && la.usable[i][k] }

// Chances counts, for every block (or, when idx is not nil, the blocks
// whose lookahead rows idx names), the usable nights among first ..
// first+n-1.
func (la *Lookahead) Chances(first, n int, idx []int) []int {
	rows := len(la.usable)
	if idx != nil {
		rows = len(idx)
	}
	out := make([]int, rows)
	for r := range out {
		i := r
		if idx != nil {
			i = idx[r]
		}
		for k := first; k < first+n && k < la.Nights; k++ {
			if la.usable[i][k] {
				out[r]++
			}
		}
	}
	return out
}

// urgency is the factor of the package doc: 1 + lambda * min(1, need /
// chances), need = nights of one longest run each to finish the block.
func urgency(lambda float64, rem, maxRun, chances int) float64 {
	if rem <= 0 {
		return 1
	}
	runCap := min(maxRun, rem)
	need := float64((rem + runCap - 1) / runCap)
	return 1 + lambda*math.Min(1, need/math.Max(1, float64(chances)))
}
