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
// workers goroutines (runtime.GOMAXPROCS(0) when workers <= 0). The targets
// are cut into one range per worker, and the fixed targets of a range share
// one allocation, made (and so zeroed) by the first worker to reach the
// range: a night's tracks are tens of megabytes, and zeroing them in one
// allocation before the workers start held two cores to one for a few
// milliseconds (smaller allocations per chunk fault fresh pages in
// instead, which costs more). Workers take batchChunk targets at a time,
// from their own range first and then from the others', so that a range
// of cheap targets (below the horizon all night) does not leave a core
// idle. It returns the first error (a target that is neither fixed nor
// orbit) with the tracks it could make.
func (g *Grid) TrackAll(targets []*Target, workers int) ([]*Track, error) {
	tracks := make([]*Track, len(targets))
	n, nt := g.N, len(targets)
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = max(min(workers, (nt+batchChunk-1)/batchChunk), 1)
	star := func(t *Target) bool { return t != nil && t.Star != nil && t.Orbit == nil }
	// slot[i] is target i's place in its range's slab (fixed targets).
	slot := make([]int32, nt)
	type span struct {
		i0, i1, stars int
		next          atomic.Int64
		slab          func() ([]float32, []Track)
	}
	ranges := make([]span, workers)
	for w := range ranges {
		r := &ranges[w]
		r.i0, r.i1 = w*nt/workers, (w+1)*nt/workers
		r.next.Store(int64(r.i0))
		for i := r.i0; i < r.i1; i++ {
			if star(targets[i]) {
				slot[i] = int32(r.stars)
				r.stars++
			}
		}
		r.slab = sync.OnceValues(func() ([]float32, []Track) {
			return make([]float32, 8*n*r.stars), make([]Track, r.stars)
		})
	}
	var mu sync.Mutex
	var first error
	fail := func(err error) {
		mu.Lock()
		if first == nil {
			first = err
		}
		mu.Unlock()
	}
	refresh := g.starRefreshSteps()
	do := func(r *span, i int) {
		t := targets[i]
		switch {
		case t == nil:
			fail(ErrTarget)
		case star(t):
			slab, trs := r.slab()
			k := int(slot[i])
			buf := slab[8*n*k : 8*n*(k+1) : 8*n*(k+1)]
			trs[k] = Track{Target: t,
				Alt: buf[0*n : 1*n : 1*n], Az: buf[1*n : 2*n : 2*n], HA: buf[2*n : 3*n : 3*n], Dec: buf[3*n : 4*n : 4*n],
				Airmass: buf[4*n : 5*n : 5*n], MoonSep: buf[5*n : 6*n : 6*n], SunSep: buf[6*n : 7*n : 7*n], Sky: buf[7*n : 8*n : 8*n]}
			tracks[i] = &trs[k]
			g.trackStar(tracks[i], t.Star, refresh)
		default:
			tr, err := g.Track(t)
			if err != nil {
				fail(err)
				return
			}
			tracks[i] = tr
		}
	}
	work := func(w int) {
		for d := range workers {
			r := &ranges[(w+d)%workers]
			for {
				i0 := int(r.next.Add(batchChunk)) - batchChunk
				if i0 >= r.i1 {
					break
				}
				for i := i0; i < min(i0+batchChunk, r.i1); i++ {
					do(r, i)
				}
			}
		}
	}
	// One goroutine per range (a single one runs on the caller's).
	forBlocks(workers, 1, workers, func(w, _ int) { work(w) })
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
	n := g.N
	// One allocation per chunk for its visibilities, reasons and
	// qualities, instead of three per track.
	forBlocks(len(tracks), batchChunk, workers, func(i0, i1 int) {
		vs := make([]Visibility, i1-i0)
		rs := make([]Reason, (i1-i0)*n)
		qs := make([]float32, (i1-i0)*n)
		for i := i0; i < i1; i++ {
			if tracks[i] == nil {
				continue
			}
			k := i - i0
			v := &vs[k]
			v.Reason, v.Quality = rs[k*n:(k+1)*n:(k+1)*n], qs[k*n:(k+1)*n:(k+1)*n]
			g.evaluate(v, tracks[i], reqs[i])
			vis[i] = v
		}
	})
	return vis
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
