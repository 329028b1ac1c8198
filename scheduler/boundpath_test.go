package scheduler

import (
	"fmt"
	"math"
	"testing"
	"time"
)

// leastDist against sampling: the least |f| (or distance to a whole turn)
// of a linear f over a segment, never above any sample. Rule of the
// relaxation (BoundPath's doc), checked by brute force, no outside source.
func TestLeastDist(t *testing.T) {
	cases := [][2]float64{{-5, 3}, {4, 9}, {-9, -4}, {350, 370}, {-20, -10}, {170, 190}, {725, 710}, {-359, -361}, {0, 0}, {12, 12}}
	for _, c := range cases {
		for _, wrap := range []bool{false, true} {
			got := leastDist(c[0], c[1], wrap)
			least := math.Inf(1)
			for k := 0; k <= 10000; k++ {
				f := c[0] + (c[1]-c[0])*float64(k)/10000
				v := math.Abs(f)
				if wrap {
					v = math.Abs(math.Remainder(f, 360))
				}
				least = math.Min(least, v)
			}
			// The sampled least is at most (c1-c0)/10000 above the true one.
			if got > least+1e-9 || got < least-math.Abs(c[1]-c[0])/1e4-1e-9 {
				t.Errorf("leastDist(%v, %v, %v) = %v, sampled %v", c[0], c[1], wrap, got, least)
			}
		}
	}
}

// The setup table of the path DP is a lower bound on the package's own
// setup (Problem.setup, the model Validate checks): for every pair of
// blocks, every pier side of the previous one and every start quantum of
// the night, on the three mounts, with and without an executed run as the
// anchor. The periodic focus is left out of the comparison (the relaxation
// drops it, which only makes the true setup longer).
func TestBoundPathSetupsBelowModel(t *testing.T) {
	for site := 0; site < 3; site++ {
		p := testProblem(t, GenSpec{Name: "setups", Seed: uint64(40 + site), Site: site, Night: "2027-02-10", Blocks: 7, StepS: 120,
			QuantumS: 60, Load: 1.5, Comets: 1}, testOpts(1))
		probs := []*Problem{p}
		if pl := Solve(p); len(pl.Assignments) > 2 {
			// A replan after the first run: the anchor is an executed block.
			q, err := p.WithState(nil, pl.Assignments[:1], pl.Assignments[1].Start)
			if err != nil {
				t.Fatal(err)
			}
			probs = append(probs, q)
		}
		for pi, p := range probs {
			x := newLagDP(p)
			y := newPathDP(x)
			checked := 0
			for a, b := range x.active {
				for q := x.q0; q < x.qN; q++ {
					s := float64(q) * p.quantum
					i := min(p.stepAt(s), y.nst-1)
					row := y.k[(a*y.nst+i)*y.L : (a*y.nst+i+1)*y.L]
					for l := 0; l < y.L; l++ {
						var prevs []prevState
						if l == y.L-1 {
							ps := p.anchorState()
							if ps.block >= 0 {
								ps.start = s
							}
							prevs = append(prevs, ps)
						} else {
							lb := x.active[l]
							for side := int8(0); side < 2; side++ {
								prevs = append(prevs, prevState{block: lb, side: side, start: s, filter: p.bd[lb].filter, focused: true})
							}
						}
						for _, prev := range prevs {
							tot := p.setup(prev, b, s).total()
							if math.IsInf(tot, 1) {
								continue
							}
							need := int(math.Ceil(tot/p.quantum - 1e-9))
							if int(row[l]) > need {
								t.Fatalf("site %d problem %d: block %d after %d (side %d) at %.0f s: table %d quanta, setup %.3f s = %d quanta",
									site, pi, b, prev.block, prev.side, s, row[l], tot, need)
							}
							checked++
						}
					}
				}
			}
			t.Logf("site %d problem %d: %d setups checked", site, pi, checked)
		}
	}
}

// BoundPath is at least the exact optimum (Exact, the dynamic program
// checked against brute force in TestExactAgainstBruteForceAndBounds) on
// that test's 8-block instance and on two more mounts, from the night's
// start and from a replan after executed runs.
func TestBoundPathAboveExact(t *testing.T) {
	specs := []GenSpec{
		{Name: "ex", Seed: 3, Site: 0, Night: "2027-02-10", Blocks: 8, StepS: 60, QuantumS: 60, Load: 1.6, AllOrNothing: 0.6, NoFocusEvery: true, Lookahead: 14},
		{Name: "ex1", Seed: 5, Site: 1, Night: "2027-02-10", Blocks: 5, StepS: 60, QuantumS: 60, Load: 1.5, AllOrNothing: 0.8, Lookahead: 14},
		{Name: "ex2", Seed: 7, Site: 2, Night: "2027-04-20", Blocks: 5, StepS: 60, QuantumS: 60, Load: 1.5, AllOrNothing: 0.8, Comets: 1},
	}
	if testing.Short() {
		specs = specs[:1]
	}
	for _, sp := range specs {
		p := testProblem(t, sp, Options{Seed: 1, Iterations: 600, Budget: -1})
		probs := []*Problem{p}
		names := []string{sp.Name}
		if pl := Solve(p); len(pl.Assignments) > 3 {
			q, err := p.WithState(nil, pl.Assignments[:2], pl.Assignments[2].Start.Add(-3*time.Minute))
			if err != nil {
				t.Fatal(err)
			}
			probs, names = append(probs, q), append(names, sp.Name+"/replan")
		}
		for i, q := range probs {
			x, err := Exact(q, ExactLimits{})
			if err != nil {
				t.Fatalf("%s: %v", names[i], err)
			}
			mustValidate(t, names[i], x, q)
			ex := x.Objective.Value
			st := BoundPathStats(q)
			// 1e-7: float32 run values (as for BoundDP).
			if st.Bound < ex*(1-1e-7) {
				t.Errorf("%s: BoundPath %.3f below the exact optimum %.3f", names[i], st.Bound, ex)
			}
			t.Logf("%s: exact %.1f, BoundPath %.1f (ratio %.4f), warm start %.1f, BoundDP %.1f", names[i], ex, st.Bound, ex/st.Bound, st.FilterDP, BoundDP(q))
		}
	}
}

// On random nights with cadence, periodic focus, closures, comets and all
// three mounts (TestBoundsHoldPlans's), no plan of the solver is above
// BoundPath, nor above the UpperBound that now includes it.
func TestBoundPathHoldsPlans(t *testing.T) {
	n := 4
	if testing.Short() {
		n = 2
	}
	for i := 0; i < n; i++ {
		sp := GenSpec{Name: fmt.Sprintf("hold%d", i), Seed: uint64(900 + i), Site: i % 3, Night: "2027-02-10", Blocks: 14 + 3*i,
			StepS: 60, Load: 2.5, Cadence: 0.2, Comets: i % 2, Lookahead: 14, CloseAtH: 1 + float64(i), CloseForH: 0.4 + 0.1*float64(i)}
		if i%3 == 2 {
			sp.Night = "2027-04-20"
		}
		p := testProblem(t, sp, testOpts(uint64(i+1)))
		pl := Solve(p)
		mustValidate(t, sp.Name, pl, p)
		v := pl.Objective.Value
		st := BoundPathStats(p)
		if v > st.Bound*(1+1e-7) {
			t.Errorf("%s: plan %.2f above BoundPath %.2f", sp.Name, v, st.Bound)
		}
		if ub := UpperBound(p); v > ub*(1+1e-7) || ub > st.Bound*(1+1e-12) {
			t.Errorf("%s: plan %.2f, UpperBound %.2f, BoundPath %.2f", sp.Name, v, ub, st.Bound)
		}
		t.Logf("%s: %d blocks, plan %.1f, BoundPath %.1f (ratio %.4f; %d+%d iterations, %v)", sp.Name, len(p.Blocks), v, st.Bound,
			v/st.Bound, st.WarmIterations, st.Iterations, st.Total.Round(time.Millisecond))
	}
}

// The committed medium instances: no plan above BoundPath, and the ratios
// of the plan to BoundPath and to the committed MILP reference bound
// (testdata/milp/reference.json) logged with the bound's time. The issue's
// target (plan >= 0.97 of either) is not met by the default solver, so it
// is reported, not asserted.
func TestBoundPathMedium(t *testing.T) {
	if testing.Short() {
		t.Skip("bounds two medium instances (about 10 and 20 s)")
	}
	for _, name := range []string{"medium", "medium150"} {
		in := loadInstance(t, name)
		p, err := in.Problem(Options{Seed: 1, Budget: -1})
		if err != nil {
			t.Fatal(err)
		}
		pl := Solve(p)
		mustValidate(t, name, pl, p)
		v := pl.Objective.Value
		st := BoundPathStats(p)
		if v > st.Bound*(1+1e-7) {
			t.Errorf("%s: plan %.1f above BoundPath %.1f", name, v, st.Bound)
		}
		ref := milpReference(t, name)
		old := math.Min(BoundDP(p), Bound(p, DefaultBoundSlot))
		t.Logf("%s: plan %.1f; old UpperBound %.1f (ratio %.4f); BoundPath %.1f (ratio %.4f; warm start %.1f; %d+%d iterations; %v, tables %v); MILP reference %.1f (ratio %.4f)",
			name, v, old, v/old, st.Bound, v/st.Bound, st.FilterDP, st.WarmIterations, st.Iterations,
			st.Total.Round(time.Millisecond), st.Setup.Round(time.Millisecond), ref, v/ref)
	}
}

// BenchmarkBoundPath times BoundPath on the committed medium instances
// (the problem prepared outside the loop) and reports the bound, its
// iterations and the process CPU time per bound (the machine is shared).
//
//	go test -run '^$' -bench '^BenchmarkBoundPath$' -benchtime 1x ./scheduler/
func BenchmarkBoundPath(b *testing.B) {
	for _, name := range []string{"medium", "medium150"} {
		b.Run(name, func(b *testing.B) {
			r := reference(b, name, false, false)
			b.ReportAllocs()
			b.ResetTimer()
			var st PathStats
			c0 := processCPU()
			for b.Loop() {
				st = BoundPathStats(r.p)
			}
			b.ReportMetric(float64((processCPU()-c0).Microseconds())/1e3/float64(b.N), "cpu-ms/op")
			b.ReportMetric(st.Bound, "bound")
			b.ReportMetric(float64(st.WarmIterations), "warm-iterations")
			b.ReportMetric(float64(st.Iterations), "path-iterations")
			b.ReportMetric(st.Total.Seconds()-st.Setup.Seconds(), "path-s")
		})
	}
}
