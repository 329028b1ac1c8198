package constraints

import (
	"math/rand/v2"
	"runtime"
	"syscall"
	"testing"
	"time"

	"github.com/nightloom/nightloom/ephem"
)

var sinkVis *Visibility

// benchSite is an invented mid-latitude site with a horizon profile.
func benchSite(b testing.TB) *Site {
	o, err := ephem.NewObserver(46.52, 7.41, 1410)
	if err != nil {
		b.Fatal(err)
	}
	s := NewSite(o)
	s.Horizon, err = NewHorizon([]HorizonPoint{{0, 5}, {80, 14}, {110, 9}, {170, 18}, {200, 12}, {270, 4}, {330, 6}})
	if err != nil {
		b.Fatal(err)
	}
	s.PixelScaleArcsec = 1.2
	s.FlipEndHADeg = 5
	return s
}

// fullSet exercises every check.
func fullSet() *Set {
	return &Set{MaxAirmass: 2.2, MinAltDeg: 20, MaxAltDeg: 88, MinMoonSepDeg: 30, MaxMoonIllum: 0.9,
		MoonIllumWhenUp: true, MinSolarElongDeg: 40, Darkness: DarkNautical, MinSkyMag: 19.5,
		LocalStart: 18 * time.Hour, LocalEnd: 7 * time.Hour, MaxHourAngleDeg: 90, AvoidFlipZone: true}
}

// BenchmarkNightGrid: 1000 fixed targets x 720 steps (60 s over 12 h), the
// full constraint set, with and without the sky-brightness model; the grid
// itself is built inside the loop, and the targets are split across
// GOMAXPROCS goroutines (run with -cpu 1 for one core). Reports ns per (target, step) and the
// memory that 1000 tracks and visibilities keep.
func BenchmarkNightGrid(b *testing.B) {
	site := benchSite(b)
	start := time.Date(2026, 12, 24, 17, 0, 0, 0, time.UTC)
	end := start.Add(12 * time.Hour)
	rng := rand.New(rand.NewPCG(1, 2))
	targets := make([]*Target, 1000)
	reqs := make([]Request, len(targets))
	for i := range targets {
		st, _ := ephem.NewStar(rng.Float64()*360, -30+rng.Float64()*120, 0, 0)
		targets[i] = &Target{Star: &st}
		reqs[i] = Request{Set: fullSet(), Exposure: 300 * time.Second}
	}
	for _, mode := range []struct {
		name string
		opts Options
	}{{"sky", Options{}}, {"no-sky", Options{NoSkyBrightness: true}}} {
		b.Run(mode.name, func(b *testing.B) {
			b.ReportAllocs()
			var kept uint64
			var cpu time.Duration
			for b.Loop() {
				var before, after runtime.MemStats
				b.StopTimer()
				runtime.GC()
				runtime.ReadMemStats(&before)
				b.StartTimer()
				cpu0 := processCPU()
				g, err := NewGrid(site, start, end, time.Minute, mode.opts)
				if err != nil {
					b.Fatal(err)
				}
				// Targets split across GOMAXPROCS goroutines (-cpu 1: one).
				tracks, err := g.TrackAll(targets, 0)
				if err != nil {
					b.Fatal(err)
				}
				vis := g.EvaluateAll(tracks, reqs, 0)
				cpu += processCPU() - cpu0
				b.StopTimer()
				runtime.ReadMemStats(&after)
				kept = after.HeapAlloc - before.HeapAlloc
				b.StartTimer()
				sinkVis = vis[len(vis)-1]
				runtime.KeepAlive(tracks)
			}
			// CPU time of the process per op, over the timed work only (not
			// the forced collection that measures MB-kept): on this shared
			// 2-core machine wall time also counts other processes' work.
			b.ReportMetric(float64(cpu.Milliseconds())/float64(b.N), "cpu-ms/op")
			b.ReportMetric(float64(cpu.Nanoseconds())/float64(b.N)/float64(720*len(targets)), "cpu-ns/target-step")
			b.ReportMetric(float64(kept)/1e6, "MB-kept")
		})
	}
}

// processCPU returns the user+system CPU time the process has used.
func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
