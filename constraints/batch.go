package constraints

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// batchChunk is how many targets a worker takes at a time: large enough
// that the shared counter is touched rarely, small enough that two workers
// finish together although targets below the horizon cost less.
const batchChunk = 16

// TrackAll samples every target on the grid, splitting the targets across
// workers goroutines (runtime.GOMAXPROCS(0) when workers <= 0). The fixed
// targets' tracks share one allocation. It returns the first error (a
// target that is neither fixed nor orbit) with the tracks it could make.
func (g *Grid) TrackAll(targets []*Target, workers int) ([]*Track, error) {
	tracks := make([]*Track, len(targets))
	n := g.N
	stars := 0
	for _, t := range targets {
		if t != nil && t.Star != nil && t.Orbit == nil {
			stars++
		}
	}
	slab := make([]float32, 8*n*stars)
	trs := make([]Track, stars)
	k := 0
	for i, t := range targets {
		if t != nil && t.Star != nil && t.Orbit == nil {
			buf := slab[8*n*k : 8*n*(k+1) : 8*n*(k+1)]
			trs[k] = Track{Target: t,
				Alt: buf[0*n : 1*n : 1*n], Az: buf[1*n : 2*n : 2*n], HA: buf[2*n : 3*n : 3*n], Dec: buf[3*n : 4*n : 4*n],
				Airmass: buf[4*n : 5*n : 5*n], MoonSep: buf[5*n : 6*n : 6*n], SunSep: buf[6*n : 7*n : 7*n], Sky: buf[7*n : 8*n : 8*n]}
			tracks[i] = &trs[k]
			k++
		}
	}
	var mu sync.Mutex
	var first error
	refresh := g.starRefreshSteps()
	forChunks(len(targets), workers, func(i int) {
		if tracks[i] != nil {
			g.trackStar(tracks[i], targets[i].Star, refresh)
			return
		}
		if targets[i] == nil {
			mu.Lock()
			if first == nil {
				first = ErrTarget
			}
			mu.Unlock()
			return
		}
		tr, err := g.Track(targets[i])
		if err != nil {
			mu.Lock()
			if first == nil {
				first = err
			}
			mu.Unlock()
			return
		}
		tracks[i] = tr
	})
	return tracks, first
}

// EvaluateAll evaluates tracks[i] against reqs[i] on workers goroutines
// (runtime.GOMAXPROCS(0) when workers <= 0); a nil track gives a nil
// visibility. It panics if the slices differ in length (a programmer
// error).
func (g *Grid) EvaluateAll(tracks []*Track, reqs []Request, workers int) []*Visibility {
	if len(tracks) != len(reqs) {
		panic("constraints: EvaluateAll needs one request per track")
	}
	vis := make([]*Visibility, len(tracks))
	forChunks(len(tracks), workers, func(i int) {
		if tracks[i] != nil {
			vis[i] = g.Evaluate(tracks[i], reqs[i])
		}
	})
	return vis
}

// forChunks calls f(0..n-1) on at most workers goroutines, each taking
// batchChunk consecutive indices at a time.
func forChunks(n, workers int, f func(int)) {
	forBlocks(n, batchChunk, workers, func(i0, i1 int) {
		for i := i0; i < i1; i++ {
			f(i)
		}
	})
}

// gridBlock is how many steps of a grid a worker fills at a time (an
// instant costs some microseconds, so blocks this size keep the shared
// counter quiet and still share a 720-step night evenly).
const gridBlock = 32

// forBlocks calls f on consecutive blocks [i0, i1) of at most block
// indices covering 0..n-1, on at most workers goroutines
// (runtime.GOMAXPROCS(0) when workers <= 0); a single block runs on the
// caller's goroutine.
func forBlocks(n, block, workers int, f func(i0, i1 int)) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, (n+block-1)/block)
	if workers <= 1 {
		for i0 := 0; i0 < n; i0 += block {
			f(i0, min(i0+block, n))
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				i0 := int(next.Add(int64(block))) - block
				if i0 >= n {
					return
				}
				f(i0, min(i0+block, n))
			}
		}()
	}
	wg.Wait()
}
