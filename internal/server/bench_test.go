package server

import (
	"fmt"
	"sync/atomic"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

var (
	sinkPlan   *nightloomv1.MakePlanResponse
	sinkReport *nightloomv1.ReportProgressResponse
)

// BenchmarkMakePlan200 is MakePlan end to end over a loopback TCP
// connection: 200 open blocks on five targets, one night, the default 60 s
// grid, loading from the store, planning, storing the version and
// returning it. Regimes: the daemon's default budget (150 ms) with the default
// 14-night urgency lookahead and without it, and a zero budget (the
// constructive schedule only), which shows what the call costs besides the
// search.
func BenchmarkMakePlan200(b *testing.B) {
	e := newEnv(b, "", withTCP(), func(c *Config) { c.DefaultTimeBudget = DefaultTimeBudget })
	f := e.seed(b, 200)
	ctx := as(RoleOperator, e)
	for _, r := range []struct {
		look   int32
		budget *durationpb.Duration
	}{{DefaultLookaheadNights, nil}, {0, nil}, {DefaultLookaheadNights, dur(0)}} {
		name := fmt.Sprintf("lookahead=%d/budget=default", r.look)
		if r.budget != nil {
			name = fmt.Sprintf("lookahead=%d/budget=0", r.look)
		}
		b.Run(name, func(b *testing.B) {
			req := &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(), Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
				LookaheadNights: proto.Int32(r.look), Seed: 1, TimeBudget: r.budget}
			b.ReportAllocs()
			var assigned int
			for b.Loop() {
				resp, err := e.plans.MakePlan(ctx, req)
				if err != nil {
					b.Fatal(err)
				}
				sinkPlan = resp
				assigned = len(resp.GetPlans()[0].GetAssignments())
			}
			b.ReportMetric(float64(assigned), "assignments")
		})
	}
}

// BenchmarkPlanDefaults is MakePlan and Replan end to end over loopback TCP
// with every option at its default (the daemon's default budget, the 14-night
// lookahead, the 60 s grid) for the 200-block night of
// BenchmarkMakePlan200, against what a 5 s budget reaches: before the timed
// calls one MakePlan with a 5 s budget and the same seed gives the
// reference, and "objective/5s" reports the default call's objective over
// it (issue 15 asks for at least 0.99). Replan replans a fresh version from
// two hours after its start with a closure of 20 minutes ("objective/5s":
// over the same replan with a 5 s budget), warm: the lookahead of the night is cached by the first
// MakePlan, and the old plan is the search's first incumbent.
func BenchmarkPlanDefaults(b *testing.B) {
	// The daemon's default budgets (the test environment's are shorter).
	e := newEnv(b, "", withTCP(), func(c *Config) {
		c.DefaultTimeBudget, c.DefaultReplanBudget = DefaultTimeBudget, DefaultReplanBudget
	})
	f := e.seed(b, 200)
	ctx := as(RoleOperator, e)
	req := func(budget *durationpb.Duration) *nightloomv1.MakePlanRequest {
		return &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(), Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
			Seed: 1, TimeBudget: budget}
	}
	ref, err := e.plans.MakePlan(ctx, req(dur(5*time.Second)))
	if err != nil {
		b.Fatal(err)
	}
	refObj := ref.GetPlans()[0].GetObjective().GetTotal()
	b.Run("MakePlan", func(b *testing.B) {
		b.ReportAllocs()
		var obj float64
		for b.Loop() {
			resp, err := e.plans.MakePlan(ctx, req(nil))
			if err != nil {
				b.Fatal(err)
			}
			obj = resp.GetPlans()[0].GetObjective().GetTotal()
		}
		b.ReportMetric(obj/refObj, "objective/5s")
	})
	b.Run("Replan", func(b *testing.B) {
		pl := ref.GetPlans()[0]
		from := pl.GetInterval().GetStart().AsTime().Add(2 * time.Hour)
		closure := &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{Start: ts(from.Add(30 * time.Minute)),
			End: ts(from.Add(50 * time.Minute))}, Reason: "cloud"}
		// Each Replan replans a fresh MakePlan's version (same seed, so the
		// same old plan as far as the search is deterministic).
		replan := func(budget *durationpb.Duration) float64 {
			if _, err := e.plans.MakePlan(ctx, req(nil)); err != nil {
				b.Fatal(err)
			}
			b.StartTimer()
			resp, err := e.plans.Replan(ctx, &nightloomv1.ReplanRequest{SiteId: f.site.GetId(), From: ts(from),
				Closures: []*nightloomv1.Closure{closure}, Seed: 1, TimeBudget: budget})
			b.StopTimer()
			if err != nil {
				b.Fatal(err)
			}
			return resp.GetPlan().GetObjective().GetTotal()
		}
		b.StopTimer()
		refReplan := replan(dur(5 * time.Second))
		b.ResetTimer()
		b.StopTimer()
		b.ReportAllocs()
		var obj float64
		for i := 0; i < b.N; i++ {
			obj = replan(nil)
		}
		b.ReportMetric(obj/refReplan, "objective/5s")
	})
}

// BenchmarkReportProgress is ReportProgress over loopback gRPC with the
// store's synchronous=FULL: every acknowledged report has reached the disk
// (fsync of the WAL). Each report has its own id and adds one frame.
// "serial" is one client's latency; "parallel" is 8 concurrent callers per
// core (writes queue on the store's single writer connection).
func BenchmarkReportProgress(b *testing.B) {
	e := newEnv(b, "", withTCP())
	f := e.seed(b, 0)
	var bs []*nightloomv1.Block
	for i := 0; i < 20; i++ {
		blk := testBlock(f.site.GetId(), f.targets[i%4].GetId(), "L", MaxFramesWanted, 5)
		blk.MinRunFrames = 1
		bs = append(bs, blk)
	}
	q, err := e.queue.QueueBlocks(as(RoleOperator, e), &nightloomv1.QueueBlocksRequest{Blocks: bs})
	if err != nil {
		b.Fatal(err)
	}
	ctx := as(RoleTelescope, e)
	var seq atomic.Int64
	t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	// Reports of the future are refused: the clock reads just after the run.
	e.clock.Set(t0.Add(3 * time.Minute))
	report := func() *nightloomv1.ReportProgressRequest {
		n := seq.Add(1)
		return &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
			ReportId: fmt.Sprintf("bench-%d", n), BlockId: q.GetBlocks()[n%int64(len(bs))].GetId(), FramesKept: 1,
			Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(2 * time.Minute))},
			Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}}
	}
	b.Run("serial", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			r, err := e.queue.ReportProgress(ctx, report())
			if err != nil {
				b.Fatal(err)
			}
			sinkReport = r
		}
	})
	b.Run("parallel", func(b *testing.B) {
		b.ReportAllocs()
		b.SetParallelism(8)
		b.RunParallel(func(pb *testing.PB) {
			for pb.Next() {
				r, err := e.queue.ReportProgress(ctx, report())
				if err != nil {
					b.Error(err)
					return
				}
				sinkReport = r
			}
		})
	})
}

var sinkNetwork *nightloomv1.MakeNetworkPlanResponse

// BenchmarkMakeNetworkPlan is MakeNetworkPlan end to end over loopback TCP:
// the two sites of network_test.go (Spain and New Mexico, 7 h apart), 200
// network blocks on four targets, one night, the 60 s grid: loading,
// the joint search (scheduler.SolveNetwork), storing one version per site.
// Regimes: the daemon's default 1 s budget, and a zero budget (each site's
// constructive schedule, then the coordinate steps and relocations), which
// shows what the call costs besides the search. Metrics: runs planned over
// both sites and the joint objective over the separate start's.
func BenchmarkMakeNetworkPlan(b *testing.B) {
	e := newEnv(b, "", withTCP(), func(c *Config) { c.DefaultTimeBudget = DefaultTimeBudget; c.ReplanPriority = -1 })
	f := e.seed(b, 0)
	ctx := e.admin()
	west, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: testSiteWest()})
	if err != nil {
		b.Fatal(err)
	}
	n, err := nightloomv1.NewNetworkServiceClient(e.conn).CreateNetwork(ctx, &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{
		Name: "Bench Network", SiteIds: []string{f.site.GetId(), west.GetSite().GetId()}}})
	if err != nil {
		b.Fatal(err)
	}
	var bs []*nightloomv1.Block
	filters := []string{"L", "R", "G", "B"}
	for i := 0; i < 200; i++ {
		blk := testBlock("", f.targets[i%4].GetId(), filters[i%4], int32(10+i%7), int32(1+i%7))
		blk.NetworkId = n.GetNetwork().GetId()
		bs = append(bs, blk)
	}
	if _, err := e.queue.QueueBlocks(as(RoleOperator, e), &nightloomv1.QueueBlocksRequest{Blocks: bs}); err != nil {
		b.Fatal(err)
	}
	nets := nightloomv1.NewNetworkServiceClient(e.conn)
	for _, budget := range []*durationpb.Duration{nil, dur(0)} {
		name := "budget=default"
		if budget != nil {
			name = "budget=0"
		}
		b.Run(name, func(b *testing.B) {
			req := &nightloomv1.MakeNetworkPlanRequest{NetworkId: n.GetNetwork().GetId(), Night: testNight, Seed: 1, TimeBudget: budget}
			b.ReportAllocs()
			var runs int
			var ratio float64
			for b.Loop() {
				resp, err := nets.MakeNetworkPlan(as(RoleOperator, e), req)
				if err != nil {
					b.Fatal(err)
				}
				sinkNetwork = resp
				nn := resp.GetNights()[0]
				runs = 0
				for _, p := range nn.GetPlans() {
					runs += len(p.GetAssignments())
				}
				ratio = nn.GetObjective() / nn.GetSeparateObjective()
			}
			b.ReportMetric(float64(runs), "runs")
			b.ReportMetric(ratio, "joint/separate")
		})
	}
}
