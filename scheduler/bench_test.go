package scheduler

import (
	"fmt"
	"github.com/nightloom/nightloom/constraints"
	"os"
	"path/filepath"
	"runtime"
	"sync"
	"testing"
	"time"
)

// Benchmarks read the committed instances of testdata/scheduler (written
// by testdata/scheduler/gen). Reference values (exact optimum, upper
// bound, greedy) are computed once per process, outside the timed loop.
// Metrics: objective (the plan's Value), opt-ratio = objective / exact
// optimum, bound-ratio = objective / UpperBound, ref-ratio = objective /
// the committed MILP reference bound (testdata/milp/reference.json, an
// upper bound too), greedy-ratio = objective / greedy objective.

var (
	sinkPlan  *Plan
	sinkPlans []NightPlan
)

func loadInstance(tb testing.TB, name string) *Instance {
	tb.Helper()
	f, err := os.Open(filepath.Join("..", "testdata", "scheduler", name+".json"))
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	in, err := ReadInstance(f)
	if err != nil {
		tb.Fatal(err)
	}
	return in
}

type benchRef struct {
	p      *Problem
	greedy float64
	exact  float64
	bound  float64
}

var (
	refMu sync.Mutex
	refs  = map[string]*benchRef{}
)

// reference prepares an instance and its reference values.
func reference(b *testing.B, name string, exact, bound bool) *benchRef {
	refMu.Lock()
	defer refMu.Unlock()
	if r, ok := refs[name]; ok && (!exact || r.exact > 0) && (!bound || r.bound > 0) {
		return r
	}
	r := refs[name]
	if r == nil {
		in := loadInstance(b, name)
		p, err := in.Problem(Options{Seed: 1})
		if err != nil {
			b.Fatal(err)
		}
		r = &benchRef{p: p, greedy: Greedy(p).Objective.Value}
		refs[name] = r
	}
	if exact && r.exact == 0 {
		x, err := Exact(r.p, ExactLimits{})
		if err != nil {
			b.Fatal(err)
		}
		r.exact = x.Objective.Value
	}
	if bound && r.bound == 0 {
		r.bound = UpperBound(r.p)
	}
	return r
}

// BenchmarkInstances plans each committed instance with the default
// options and reports the quality metrics.
func BenchmarkInstances(b *testing.B) {
	for _, c := range []struct {
		name         string
		exact, bound bool
	}{{"small", true, false}, {"medium", false, true}, {"medium150", false, true}, {"large", false, false}} {
		b.Run(c.name, func(b *testing.B) {
			r := reference(b, c.name, c.exact, c.bound)
			b.ReportAllocs()
			b.ResetTimer()
			var pl *Plan
			for b.Loop() {
				pl = Solve(r.p)
			}
			sinkPlan = pl
			v := pl.Objective.Value
			b.ReportMetric(v, "objective")
			b.ReportMetric(v/r.greedy, "greedy-ratio")
			if c.exact {
				b.ReportMetric(v/r.exact, "opt-ratio")
			}
			if c.bound {
				b.ReportMetric(v/r.bound, "bound-ratio")
				if ref := milpReference(b, c.name); ref > 0 {
					b.ReportMetric(v/ref, "ref-ratio")
				}
			}
			b.ReportMetric(float64(len(r.p.Blocks)), "blocks")
		})
	}
}

// BenchmarkPlan200 plans one night of 200 blocks (the problem, with its
// tracks and visibility, is prepared outside the loop).
func BenchmarkPlan200(b *testing.B) {
	r := reference(b, "plan200", false, false)
	b.ReportAllocs()
	b.ResetTimer()
	var pl *Plan
	c0 := processCPU()
	for b.Loop() {
		pl = Solve(r.p)
	}
	b.ReportMetric(float64((processCPU()-c0).Microseconds())/1e3/float64(b.N), "cpu-ms/op")
	sinkPlan = pl
	b.ReportMetric(pl.Objective.Value, "objective")
	b.ReportMetric(pl.Objective.Value/r.greedy, "greedy-ratio")
	b.ReportMetric(float64(pl.Iterations), "iterations")
}

// BenchmarkReplan200 re-plans the 200-block night a third of the way in,
// after the first runs were executed and a 70-minute closure came up.
func BenchmarkReplan200(b *testing.B) {
	r := reference(b, "plan200", false, false)
	// A well-converged plan of the night, so that the replan measures the
	// closure's effect rather than the first plan's time budget.
	conv := *r.p
	conv.Options.Iterations, conv.Options.Budget = 4000, -1
	base := Solve(&conv)
	k := len(base.Assignments) / 3
	st := State{Now: base.Assignments[k].Start.Add(-2 * time.Minute), Executed: base.Assignments[:k]}
	st.Closures = []Closure{{Start: st.Now.Add(30 * time.Minute), End: st.Now.Add(100 * time.Minute), Note: "cloud"}}
	b.ReportAllocs()
	b.ResetTimer()
	var pl *Plan
	var rep ReplanReport
	for b.Loop() {
		var err error
		if pl, rep, err = Replan(r.p, base, st); err != nil {
			b.Fatal(err)
		}
	}
	sinkPlan = pl
	b.ReportMetric(pl.Objective.Value, "objective")
	b.ReportMetric(float64(rep.Kept), "kept")
	b.ReportMetric(float64(rep.Changed), "changed")
}

// BenchmarkHorizon2000x30 plans 30 nights of 2000 blocks, grids, tracks
// and visibility included (computed concurrently, GOMAXPROCS workers).
// Besides wall time it reports the process's CPU time (getrusage: the
// machine may be shared), the 1-minute load average when the run began
// (Linux /proc/loadavg; -1 elsewhere), and the heap the plans keep per
// block and night (after a GC, as BenchmarkScaling).
func BenchmarkHorizon2000x30(b *testing.B) {
	in := loadInstance(b, "horizon2000")
	site, err := in.SiteOf()
	if err != nil {
		b.Fatal(err)
	}
	blocks, err := in.BlocksOf()
	if err != nil {
		b.Fatal(err)
	}
	day, _ := in.Date()
	b.ReportAllocs()
	b.ResetTimer()
	var out []NightPlan
	var cpu time.Duration
	var kept uint64
	load := loadAverage()
	for b.Loop() {
		var before, after runtime.MemStats
		b.StopTimer()
		out = nil
		runtime.GC()
		runtime.ReadMemStats(&before)
		b.StartTimer()
		c0 := processCPU()
		out, err = Horizon(HorizonInput{Site: site, Blocks: blocks, First: day, Nights: in.Nights,
			Step: secs(in.StepS), NoSky: in.NoSky, Options: Options{Seed: 1}})
		if err != nil {
			b.Fatal(err)
		}
		cpu += processCPU() - c0
		b.StopTimer()
		runtime.GC()
		runtime.ReadMemStats(&after)
		kept = after.HeapAlloc - before.HeapAlloc
		b.StartTimer()
	}
	sinkPlans = out
	total, runs := 0.0, 0
	for _, np := range out {
		if np.Plan != nil {
			total += np.Plan.Objective.Value
			runs += len(np.Plan.Assignments)
		}
	}
	b.ReportMetric(total, "objective")
	b.ReportMetric(float64(runs), "runs")
	b.ReportMetric(float64(cpu.Microseconds())/1e3/float64(b.N), "cpu-ms/op")
	b.ReportMetric(float64(kept)/1e3/float64(len(blocks)*in.Nights), "KB-kept/block-night")
	b.ReportMetric(load, "load1")
}

// loadAverage is the 1-minute load average (Linux), -1 when unknown.
func loadAverage() float64 {
	buf, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return -1
	}
	var l float64
	if _, err := fmt.Sscan(string(buf), &l); err != nil {
		return -1
	}
	return l
}

// BenchmarkPrepare200 prepares the 200-block night: tracks, visibility
// and the continuous intervals with their refined edges (what every
// MakePlan pays before the search).
func BenchmarkPrepare200(b *testing.B) {
	in := loadInstance(b, "plan200")
	b.ReportAllocs()
	b.ResetTimer()
	var p *Problem
	c0 := processCPU()
	for b.Loop() {
		var err error
		if p, err = in.Problem(Options{Seed: 1, LookaheadNights: 1}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64((processCPU()-c0).Microseconds())/1e3/float64(b.N), "cpu-ms/op")
	sinkProblem = p
}

var sinkProblem *Problem

// BenchmarkIntervals200 is the exact-edges share of BenchmarkPrepare200:
// every block's continuous intervals (Grid.Intervals: bisection to 1 s and
// the Lipschitz certificate), one block after another, on a fresh grid
// each time (so the per-instant cache of one-step grids starts empty, as
// in a MakePlan). The rule of issue 10: at most 20 % of planning time
// (BenchmarkPrepare200 + BenchmarkPlan200).
func BenchmarkIntervals200(b *testing.B) {
	in := loadInstance(b, "plan200")
	p, err := in.Problem(Options{Seed: 1, LookaheadNights: 1})
	if err != nil {
		b.Fatal(err)
	}
	g0 := p.Grid
	reqs := make([]constraints.Request, len(p.Blocks))
	for i := range p.Blocks {
		bl := &p.Blocks[i]
		reqs[i] = constraints.Request{Set: bl.Set, Exposure: bl.Exposure, NonSidereal: bl.NonSidereal}
	}
	b.ReportAllocs()
	var n int
	var cpu time.Duration
	for b.Loop() {
		b.StopTimer()
		g, err := constraints.NewGrid(g0.Site, g0.Start, g0.End(), g0.Step, g0.Opts)
		if err != nil {
			b.Fatal(err)
		}
		vis := make([]*constraints.Visibility, len(p.Blocks))
		for i := range p.Blocks {
			vis[i] = g.Evaluate(p.Tracks[i], reqs[i])
		}
		b.StartTimer()
		c0 := processCPU()
		n = 0
		for i := range p.Blocks {
			n += len(g.Intervals(p.Tracks[i], reqs[i], vis[i]))
		}
		cpu += processCPU() - c0
	}
	b.ReportMetric(float64(n), "intervals")
	b.ReportMetric(float64(cpu.Microseconds())/1e3/float64(b.N), "cpu-ms/op")
}

// milpReference is the MILP reference bound of an instance from
// testdata/milp/reference.json (0 when the table has none).
func milpReference(tb testing.TB, name string) float64 {
	for _, r := range readMILPTable(tb).Instances {
		if r.Name == name && r.Bound != nil {
			return *r.Bound
		}
	}
	return 0
}
