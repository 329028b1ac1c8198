package scheduler

import (
	"fmt"
	"runtime"
	"syscall"
	"testing"
	"time"
)

// scalingBlocks and scalingNights span the published scaling curve
// (testdata/bench/scaling.sh draws it for the README).
var (
	scalingBlocks = []int{50, 200, 1000, 2000, 5000}
	scalingNights = []int{1, 7, 30}
)

// scalingBoundMax is the largest one-night instance whose objective is
// compared with UpperBound (the bound's own cost grows past it).
const scalingBoundMax = 1000

// BenchmarkScaling plans generated instances (GenerateInstance: the
// german-mount site at 38 N, load 2, a few cadence blocks, one comet) of
// every size in scalingBlocks over every horizon in scalingNights with
// Horizon's defaults (400 iterations or 150 ms per night, GOMAXPROCS
// workers), grids, tracks, visibility, intervals and the lookahead
// included. It reports the CPU time, the memory allocated and the memory
// the plans keep (per block and night too) and, for one night, the ratio
// of the objective to UpperBound.
//
//	go test -run '^$' -bench '^BenchmarkScaling$' -benchtime 1x ./scheduler/
func BenchmarkScaling(b *testing.B) {
	for _, nights := range scalingNights {
		for _, blocks := range scalingBlocks {
			b.Run(fmt.Sprintf("blocks=%d/nights=%d", blocks, nights), func(b *testing.B) {
				step := 120.0
				if nights == 1 {
					step = 60 // the one-night default
				}
				in, err := GenerateInstance(GenSpec{Name: "scaling", Seed: uint64(7000 + blocks + nights), Site: 0,
					Night: "2027-02-10", Nights: nights, Blocks: blocks, StepS: step, Load: 2, Cadence: 0.03, Comets: 1})
				if err != nil {
					b.Fatal(err)
				}
				site, err := in.SiteOf()
				if err != nil {
					b.Fatal(err)
				}
				bl, err := in.BlocksOf()
				if err != nil {
					b.Fatal(err)
				}
				day, _ := in.Date()
				var out []NightPlan
				var kept, alloc uint64
				var cpu time.Duration
				for b.Loop() {
					var before, after runtime.MemStats
					b.StopTimer()
					out = nil
					runtime.GC()
					runtime.ReadMemStats(&before)
					b.StartTimer()
					cpu0 := processCPU()
					out, err = Horizon(HorizonInput{Site: site, Blocks: bl, First: day, Nights: nights,
						Step: secs(step), Options: Options{Seed: 1}})
					if err != nil {
						b.Fatal(err)
					}
					cpu += processCPU() - cpu0
					b.StopTimer()
					runtime.GC()
					runtime.ReadMemStats(&after)
					kept = after.HeapAlloc - before.HeapAlloc
					alloc = after.TotalAlloc - before.TotalAlloc
					b.StartTimer()
				}
				sinkPlans = out
				total := 0.0
				for _, np := range out {
					if np.Plan != nil {
						total += np.Plan.Objective.Value
					}
				}
				b.ReportMetric(float64(cpu.Milliseconds())/float64(b.N), "cpu-ms/op")
				b.ReportMetric(float64(alloc)/1e6, "MB-alloc")
				b.ReportMetric(float64(kept)/1e6, "MB-kept")
				b.ReportMetric(float64(kept)/1e3/float64(blocks*nights), "KB-kept/block-night")
				b.ReportMetric(total, "objective")
				if nights == 1 && blocks <= scalingBoundMax && len(out) == 1 && out[0].Problem != nil {
					b.ReportMetric(total/UpperBound(out[0].Problem), "bound-ratio")
				}
			})
		}
	}
}

// scalingSites is the network axis of the scaling curve: sites planned
// jointly by SolveNetwork, 200 generated blocks per site.
var scalingSites = []int{1, 5, 10}

// scalingNetBoundMax is the largest network whose objective is compared
// with NetworkBound (BenchmarkNetwork's limit: past it the bound costs
// minutes).
const scalingNetBoundMax = 5

// BenchmarkScalingSites plans one night (2027-02-10) of generated networks
// (genNetwork: invented sites on several continents, 200 blocks per site,
// load 1.5) with SolveNetwork and the default search options, visibility at
// every site included. It reports what BenchmarkScaling does (CPU time,
// memory allocated and kept, per block and site-night too) and the
// objective over NetworkBound up to scalingNetBoundMax sites.
//
//	go test -run '^$' -bench '^BenchmarkScalingSites$' -benchtime 1x ./scheduler/
func BenchmarkScalingSites(b *testing.B) {
	for _, nSites := range scalingSites {
		b.Run(fmt.Sprintf("sites=%d/blocks=%d", nSites, 200*nSites), func(b *testing.B) {
			in := genNetwork(b, 41, nSites, 200, 1, 1.5)
			in.Options = Options{Seed: 1}
			var pl *NetworkPlan
			var kept, alloc uint64
			var cpu time.Duration
			for b.Loop() {
				var before, after runtime.MemStats
				b.StopTimer()
				pl = nil
				runtime.GC()
				runtime.ReadMemStats(&before)
				b.StartTimer()
				cpu0 := processCPU()
				var err error
				pl, err = SolveNetwork(in)
				if err != nil {
					b.Fatal(err)
				}
				cpu += processCPU() - cpu0
				b.StopTimer()
				runtime.GC()
				runtime.ReadMemStats(&after)
				kept = after.HeapAlloc - before.HeapAlloc
				alloc = after.TotalAlloc - before.TotalAlloc
				b.StartTimer()
			}
			b.StopTimer()
			sinkNetwork = pl
			b.ReportMetric(float64(cpu.Milliseconds())/float64(b.N), "cpu-ms/op")
			b.ReportMetric(float64(alloc)/1e6, "MB-alloc")
			b.ReportMetric(float64(kept)/1e6, "MB-kept")
			b.ReportMetric(float64(kept)/1e3/float64(200*nSites), "KB-kept/block-night")
			b.ReportMetric(pl.Objective, "objective")
			b.ReportMetric(pl.Objective/pl.Separate, "joint/separate")
			if nSites <= scalingNetBoundMax {
				bound, err := NetworkBound(in, pl.Objective, 0)
				if err != nil {
					b.Fatal(err)
				}
				b.ReportMetric(pl.Objective/bound, "bound-ratio")
			}
		})
	}
}

// processCPU returns the user+system CPU time the process has used (on
// a shared machine wall time also counts other processes' work).
func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
