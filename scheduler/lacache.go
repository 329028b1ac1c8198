package scheduler

import (
	"crypto/sha256"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nightloom/nightloom/constraints"
)

// LookaheadCache keeps the urgency lookahead's work per site and night so
// that a replan, or the next MakePlan of the same site, does not redo it:
// each night's coarse grid (keyed by the site's parameters, the civil
// date, the darkness the grid starts from and the step) and, on it, each
// block spec's window lengths (keyed by the target, the constraint set,
// the exposure and the tracking). It is incremental: a call computes only
// the block specs a night has not seen, and the usable flags are derived
// from the cached windows with the block's current frames, so progress
// reports do not invalidate anything. Bounded (MaxNights nights, FIFO;
// maxSpecsPerNight specs per night) and safe for concurrent use. The zero
// value is ready to use.
type LookaheadCache struct {
	// MaxNights bounds the nights kept (0: DefaultLookaheadCacheNights).
	MaxNights int

	mu     sync.Mutex
	nights map[laNightKey]*laNight
	order  []laNightKey // insertion order, for eviction

	hits, misses atomic.Int64 // block-night evaluations reused / computed
}

// DefaultLookaheadCacheNights is the default bound of a LookaheadCache:
// two sites' 60-night lookahead, or ten sites' two weeks.
const DefaultLookaheadCacheNights = 150

// maxSpecsPerNight bounds one night's cached block specs; past it the
// night's specs are dropped and rebuilt. With DefaultLookaheadCacheNights
// the cache holds at most about 75 MB (a spec is a 32-byte digest and a
// few window lengths).
const maxSpecsPerNight = 5000

type laNightKey struct {
	site [sha256.Size]byte
	day  time.Time // civil date, midnight UTC
	dark constraints.Dark
	step time.Duration
}

// laNight is one night's coarse grid (nil when the site has no night then)
// and each block spec's window lengths on it, in steps.
type laNight struct {
	grid *constraints.Grid
	mu   sync.Mutex
	wins map[specDigest][]int
}

// specDigest is the SHA-256 of a block's visibility spec (specKey).
type specDigest [sha256.Size]byte

// LookaheadStats counts the block-night evaluations a cache reused and
// the ones it computed.
type LookaheadStats struct{ Hits, Misses int64 }

// Stats returns the cache's counters.
func (c *LookaheadCache) Stats() LookaheadStats {
	return LookaheadStats{Hits: c.hits.Load(), Misses: c.misses.Load()}
}

// Lookahead is NewLookahead through the cache: the same result, computed
// only for the nights and block specs the cache lacks.
func (c *LookaheadCache) Lookahead(site *Site, blocks []Block, first time.Time, nights int, step time.Duration, workers int, cancel <-chan struct{}) (*Lookahead, error) {
	la := &Lookahead{First: first, Nights: nights, usable: make([][]bool, len(blocks))}
	for i := range la.usable {
		la.usable[i] = make([]bool, nights)
	}
	for i := range blocks {
		if b := &blocks[i]; b.Target == nil || (b.Target.Star == nil) == (b.Target.Orbit == nil) {
			return nil, constraints.ErrTarget
		}
	}
	skey := siteKey(site.Site)
	dark := WeakestDarkness(blocks)
	specs := make([]specDigest, len(blocks))
	for i := range blocks {
		specs[i] = sha256.Sum256([]byte(specKey(&blocks[i])))
	}
	errs := make([]error, nights)
	parallel(nights, workers, func(k int) {
		if cancelled(cancel) {
			return
		}
		day := first.AddDate(0, 0, k)
		civil := time.Date(day.Year(), day.Month(), day.Day(), 0, 0, 0, 0, time.UTC)
		nt := c.night(laNightKey{site: skey, day: civil, dark: dark, step: step}, func() *constraints.Grid {
			g, err := NightGrid(site.Site, day.Year(), day.Month(), day.Day(), dark, step, constraints.Options{NoSkyBrightness: true})
			if err != nil {
				return nil // no night: nothing usable
			}
			return g
		})
		if nt.grid == nil {
			return
		}
		wins, err := c.windows(nt, blocks, specs, cancel)
		if err != nil {
			errs[k] = err
			return
		}
		for i := range blocks {
			b := &blocks[i]
			need := float64(max(1, min(b.MinRun, b.FramesWanted-b.FramesDone))) *
				(b.Exposure.Seconds() + site.Readout.Seconds())
			for _, w := range wins[i] {
				// One coarse step of slack, as NewLookahead.
				if float64(w+1)*step.Seconds() >= need {
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

// night returns the cached night, making its grid with mk on a miss.
func (c *LookaheadCache) night(key laNightKey, mk func() *constraints.Grid) *laNight {
	c.mu.Lock()
	if nt, ok := c.nights[key]; ok {
		c.mu.Unlock()
		return nt
	}
	c.mu.Unlock()
	nt := &laNight{grid: mk(), wins: map[specDigest][]int{}}
	c.mu.Lock()
	defer c.mu.Unlock()
	if old, ok := c.nights[key]; ok { // made meanwhile by another call
		return old
	}
	if c.nights == nil {
		c.nights = map[laNightKey]*laNight{}
	}
	limit := c.MaxNights
	if limit <= 0 {
		limit = DefaultLookaheadCacheNights
	}
	for len(c.order) >= limit {
		delete(c.nights, c.order[0])
		c.order = c.order[1:]
	}
	c.nights[key] = nt
	c.order = append(c.order, key)
	return nt
}

// windows returns every block's window lengths on the night, evaluating
// only the specs the night has not cached (one track per distinct target).
func (c *LookaheadCache) windows(nt *laNight, blocks []Block, specs []specDigest, cancel <-chan struct{}) ([][]int, error) {
	out := make([][]int, len(blocks))
	var missing []Block
	var missIdx []int
	nt.mu.Lock()
	seen := map[specDigest]bool{}
	for i, s := range specs {
		if w, ok := nt.wins[s]; ok {
			out[i] = w
			c.hits.Add(1)
			continue
		}
		c.misses.Add(1)
		if !seen[s] {
			seen[s] = true
			missing = append(missing, blocks[i])
			missIdx = append(missIdx, i)
		}
	}
	nt.mu.Unlock()
	if len(missing) > 0 {
		tracks, vis := visibilities(nt.grid, missing, 1, cancel)
		if cancelled(cancel) {
			return nil, ErrCancelled
		}
		nt.mu.Lock()
		if len(nt.wins)+len(missing) > maxSpecsPerNight {
			nt.wins = map[specDigest][]int{}
		}
		for j := range missing {
			if tracks[j] == nil {
				nt.mu.Unlock()
				return nil, constraints.ErrTarget
			}
			w := make([]int, len(vis[j].Windows))
			for k, x := range vis[j].Windows {
				w[k] = x.Len()
			}
			nt.wins[specs[missIdx[j]]] = w
		}
		nt.mu.Unlock()
		for i, s := range specs {
			if out[i] == nil {
				nt.mu.Lock()
				out[i] = nt.wins[s]
				nt.mu.Unlock()
			}
		}
	}
	return out, nil
}

// siteKey digests every site parameter the lookahead's grids depend on.
func siteKey(s *constraints.Site) [sha256.Size]byte {
	loc := "UTC"
	if s.Location != nil {
		loc = s.Location.String()
	}
	return sha256.Sum256(fmt.Appendf(nil, "%+v|%s|%+v|%+v|%v|%v|%v|%v|%v", s.Observer, loc, s.Horizon, s.Sky,
		s.SolarFloorDeg, s.Mount, s.FlipStartHADeg, s.FlipEndHADeg, s.PixelScaleArcsec))
}

// specKey is a block's visibility spec: what its windows on a night
// depend on besides the site (the frames it needs are applied later).
func specKey(b *Block) string {
	var set constraints.Set
	if b.Set != nil {
		set = *b.Set
	}
	t := b.Target
	if t.Star != nil {
		return fmt.Sprintf("s%+v|%+v|%v|%v", *t.Star, set, b.Exposure, b.NonSidereal)
	}
	return fmt.Sprintf("o%+v|%+v|%v|%v", t.Orbit, set, b.Exposure, b.NonSidereal) // a *Conic or a body prints its fields
}
