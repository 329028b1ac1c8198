package server

import (
	"context"
	"fmt"
	"os"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/metadata"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/internal/pgtest"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// One throwaway PostgreSQL cluster serves the tests and benchmarks of this
// package that ask for one (pgtest.NewDatabase); the others never start it.
func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

// storeSetup is one way of running the service for the side-by-side
// benchmarks: one daemon on SQLite, one daemon on PostgreSQL, or two daemons
// (replicas) on one PostgreSQL database with the clients spread over both.
type storeSetup struct {
	name string
	envs func(b *testing.B) []*env
}

var storeSetups = []storeSetup{
	{"sqlite", func(b *testing.B) []*env { return []*env{newEnv(b, "", withTCP())} }},
	{"postgres", func(b *testing.B) []*env { return []*env{newEnv(b, pgtest.NewDatabase(b), withTCP())} }},
	{"postgres-2replicas", func(b *testing.B) []*env {
		dsn := pgtest.NewDatabase(b)
		return []*env{newEnv(b, dsn, withTCP()), newEnv(b, dsn, withTCP())}
	}},
}

// BenchmarkStoresReportProgress is ReportProgress over loopback gRPC with 1,
// 8 and 32 concurrent clients, SQLite and PostgreSQL side by side in one run.
// Every acknowledged report is durable: SQLite with synchronous=FULL (fsync
// of the WAL), PostgreSQL with its defaults (fsync on, synchronous_commit on).
// Each report has its own id and adds one frame to one of 20 blocks;
// "reports/s" is the throughput of all clients together. With two replicas
// client i talks to daemon i mod 2.
func BenchmarkStoresReportProgress(b *testing.B) {
	for _, su := range storeSetups {
		b.Run("store="+su.name, func(b *testing.B) {
			envs := su.envs(b)
			f := envs[0].seed(b, 0)
			var bs []*nightloomv1.Block
			for i := range 20 {
				blk := testBlock(f.site.GetId(), f.targets[i%4].GetId(), "L", MaxFramesWanted, 5)
				blk.MinRunFrames = 1
				bs = append(bs, blk)
			}
			q, err := envs[0].queue.QueueBlocks(as(RoleOperator, envs[0]), &nightloomv1.QueueBlocksRequest{Blocks: bs})
			if err != nil {
				b.Fatal(err)
			}
			var seq atomic.Int64
			t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
			for _, clients := range []int{1, 8, 32} {
				b.Run(fmt.Sprintf("clients=%d", clients), func(b *testing.B) {
					b.ReportAllocs()
					var next atomic.Int64
					var wg sync.WaitGroup
					began := time.Now()
					b.ResetTimer()
					for c := range clients {
						e := envs[c%len(envs)]
						ctx := as(RoleTelescope, e)
						wg.Add(1)
						go func() {
							defer wg.Done()
							for next.Add(1) <= int64(b.N) {
								n := seq.Add(1)
								r, err := e.queue.ReportProgress(ctx, &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
									ReportId: fmt.Sprintf("bench-%d", n), BlockId: q.GetBlocks()[n%int64(len(bs))].GetId(), FramesKept: 1,
									Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(2 * time.Minute))},
									Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
								if err != nil {
									b.Error(err)
									return
								}
								sinkReport = r
							}
						}()
					}
					wg.Wait()
					b.ReportMetric(float64(b.N)/time.Since(began).Seconds(), "reports/s")
				})
			}
		})
	}
}

// BenchmarkStoresMakePlan200 is MakePlan end to end over loopback gRPC for
// 200 open blocks (five targets, one night, the default grid and 14-night
// lookahead) with a zero solver budget, so that the figure is the call's
// cost around the search: loading the queue from the store, the night grid,
// the constructive schedule, storing the version (and, with replicas,
// taking the cross-daemon planning lock and announcing the version).
// "serial" is one client; with two replicas "parallel" is one client per
// daemon planning the same site at once (the planning lock serialises them).
func BenchmarkStoresMakePlan200(b *testing.B) {
	for _, su := range storeSetups {
		b.Run("store="+su.name, func(b *testing.B) {
			envs := su.envs(b)
			f := envs[0].seed(b, 200)
			req := &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(), Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
				LookaheadNights: proto.Int32(DefaultLookaheadNights), Seed: 1, TimeBudget: dur(0)}
			b.Run("serial", func(b *testing.B) {
				b.ReportAllocs()
				i := 0
				for b.Loop() {
					e := envs[i%len(envs)]
					i++
					resp, err := e.plans.MakePlan(as(RoleOperator, e), req)
					if err != nil {
						b.Fatal(err)
					}
					sinkPlan = resp
				}
			})
			if len(envs) < 2 {
				return
			}
			b.Run("parallel", func(b *testing.B) {
				b.ReportAllocs()
				var next atomic.Int64
				var wg sync.WaitGroup
				for _, e := range envs {
					wg.Add(1)
					go func() {
						defer wg.Done()
						for next.Add(1) <= int64(b.N) {
							resp, err := e.plans.MakePlan(as(RoleOperator, e), req)
							if err != nil {
								b.Error(err)
								return
							}
							sinkPlan = resp
						}
					}()
				}
				wg.Wait()
			})
		})
	}
}

// TestReplicasShareWatchersAndTokens: two servers on one PostgreSQL
// database. A watcher on the second receives, in order and once each, the
// versions stored by both; a token revoked through the store (as
// `nightloomd token revoke` does) is refused at once by the server that did
// not revoke it (no token cache); a planning call that cannot get the
// site's planning lock from the other daemon ends ABORTED.
func TestReplicasShareWatchersAndTokens(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	e1, e2 := newEnv(t, dsn), newEnv(t, dsn)
	f := e1.seed(t, 20)
	siteID := f.site.GetId()

	wctx, cancel := context.WithCancel(as(RoleViewer, e2))
	defer cancel()
	stream, err := e2.plans.WatchPlans(wctx, &nightloomv1.WatchPlansRequest{SiteId: siteID})
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, "watcher subscribed", func() bool { return e2.srv.hub.watched(siteID) })
	req := &nightloomv1.MakePlanRequest{SiteId: siteID, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, TimeBudget: dur(0)}
	var stored []int64
	for _, e := range []*env{e1, e1, e2, e1} {
		r, err := e.plans.MakePlan(as(RoleOperator, e), req)
		if err != nil {
			t.Fatal(err)
		}
		stored = append(stored, r.GetPlans()[0].GetVersion())
	}
	var got []int64
	for range stored {
		r, err := stream.Recv()
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, r.GetPlan().GetVersion())
	}
	if fmt.Sprint(got) != "[1 2 3 4]" || fmt.Sprint(stored) != "[1 2 3 4]" {
		t.Errorf("watcher on the second daemon got versions %v; stored %v; want [1 2 3 4] both", got, stored)
	}

	secret, rec, err := e1.srv.CreateToken(t.Context(), RoleViewer, "revoked on another daemon")
	if err != nil {
		t.Fatal(err)
	}
	viewer := metadata.AppendToOutgoingContext(context.Background(), "authorization", "Bearer "+secret)
	if _, err := e2.sites.GetSite(viewer, &nightloomv1.GetSiteRequest{SiteId: siteID}); err != nil {
		t.Fatalf("token before revocation: %v", err)
	}
	st, err := store.OpenPostgres(dsn, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if _, err := st.RevokeToken(t.Context(), rec.ID); err != nil {
		t.Fatal(err)
	}
	for _, e := range []*env{e2, e1} {
		_, err := e.sites.GetSite(viewer, &nightloomv1.GetSiteRequest{SiteId: siteID})
		wantCode(t, err, codes.Unauthenticated, "revoked token on a daemon")
	}

	// Another daemon holds the site's planning lock longer than
	// PlanLockTimeout: the call ends ABORTED and stores nothing.
	defer func(d time.Duration) { planLockTimeout = d }(planLockTimeout)
	planLockTimeout = 300 * time.Millisecond
	unlock, err := st.LockSitePlanning(t.Context(), siteID, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	_, err = e2.plans.Replan(as(RoleOperator, e2), &nightloomv1.ReplanRequest{SiteId: siteID, TimeBudget: dur(0)})
	unlock()
	wantCode(t, err, codes.Aborted, "replan while another daemon plans the site")
	if latest, err := st.LatestPlan(t.Context(), siteID); err != nil || latest.Version != 4 {
		t.Errorf("after the aborted replan: latest version %d, %v; want 4", latest.Version, err)
	}
}

// waitFor polls cond for up to 5 s.
func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(5 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not within 5 s", what)
		}
		time.Sleep(5 * time.Millisecond)
	}
}
