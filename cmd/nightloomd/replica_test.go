package main

// Several daemons on one PostgreSQL database (issue 18): two nightloomd
// processes share a throwaway cluster (internal/pgtest); eight clients are
// spread over both; the second daemon is killed with SIGKILL at a random
// moment (fixed seed) and restarted every round, while the first one keeps
// serving and its watchers keep watching. The ledger and its checks are the
// single-daemon crash test's (crash_test.go); calls whose fate a client could
// not know are retried on the surviving daemon, so that a report is counted
// once whichever daemon receives the retry.

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/durationpb"

	"github.com/nightloom/nightloom/internal/pgtest"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// versionLog collects the plan versions that MakePlan acknowledged and the
// ones each watcher received.
type versionLog struct {
	mu       sync.Mutex
	acked    map[int64]bool
	watchers [][]int64
	aborted  int // MakePlan calls that lost the planning lock (ABORTED) and were retried
	// unexpected lists MakePlan errors other than the daemon's death.
	unexpected []string
}

// TestReplicasUnderSIGKILL: 20 rounds (5 with -short). Daemon A serves for
// the whole test; daemon B is started, loaded and killed with SIGKILL each
// round. Clients 0-3 talk to A, 4-7 to B; each sends progress reports,
// QueueBlocks and MakePlan calls. After each kill the database must pass the
// same checks as after a single daemon's crash (no acknowledged call lost
// or doubled, none half applied, frames done = min(wanted, frames kept of
// stored reports)), and at the end plan versions must be 1..n, every
// acknowledged version stored, and each of A's watchers must have received
// every version 1..n exactly once, in order, whichever daemon stored it.
func TestReplicasUnderSIGKILL(t *testing.T) {
	rounds := 20
	if testing.Short() {
		rounds = 5
	}
	const clients, watchers = 8, 3
	began := time.Now()
	dsn := pgtest.NewDatabase(t)
	bin := buildNightloomd(t)
	tokens := map[string]string{}
	for _, r := range []string{"admin", "operator", "telescope", "viewer"} {
		tokens[r] = tokenCreate(t, bin, dsn, r)
	}
	args := []string{"--listen", "127.0.0.1:0", "--db", dsn, "--log-level", "info"}
	a := startProc(t, bin, args...)
	connA := a.dial(t, nil)
	ctx := bearer(context.Background(), tokens["admin"])
	site, err := nightloomv1.NewSiteServiceClient(connA).CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: &nightloomv1.Site{
		Name: "Brackenhollow Twin Domes", LatitudeDeg: 47.3, LongitudeDeg: 8.6, ElevationM: 520, TimeZone: "Europe/Zurich",
		Mount: &nightloomv1.Mount{Kind: nightloomv1.MountKind_MOUNT_KIND_FORK_EQUATORIAL,
			PrimaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 3}, SecondaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 3}},
		Instrument: &nightloomv1.Instrument{PixelScaleArcsec: 1.1, Filters: []string{"L", "R", "G", "B"}}}})
	if err != nil {
		t.Fatal(err)
	}
	siteID := site.GetSite().GetId()
	var targets []string
	for _, tg := range []*nightloomv1.Target{
		{Name: "Hazelrime Nebula", Position: &nightloomv1.Target_Fixed{Fixed: &nightloomv1.FixedPosition{RaDeg: 96, DecDeg: 14}}},
		{Name: "Cobblemoor Galaxy", Position: &nightloomv1.Target_Fixed{Fixed: &nightloomv1.FixedPosition{RaDeg: 170, DecDeg: 40}}},
	} {
		r, err := nightloomv1.NewTargetServiceClient(connA).CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: tg})
		if err != nil {
			t.Fatal(err)
		}
		targets = append(targets, r.GetTarget().GetId())
	}
	var initial []*nightloomv1.Block
	for i, wanted := range []int32{12, 25, 40, 5000, 5000, 5000} {
		initial = append(initial, &nightloomv1.Block{SiteId: siteID, TargetId: targets[i%2], Filter: "L",
			Exposure: durationpb.New(10 * time.Second), FramesWanted: wanted, MinRunFrames: 1, Priority: 3,
			Label: fmt.Sprintf("initial-%d", i)})
	}
	queueA := nightloomv1.NewQueueServiceClient(connA)
	q, err := queueA.QueueBlocks(bearer(context.Background(), tokens["operator"]),
		&nightloomv1.QueueBlocksRequest{Blocks: initial, RequestId: "initial"})
	if err != nil {
		t.Fatal(err)
	}
	L := &ledger{reports: map[string]*reportCall{}, queues: map[string]*queueCall{}}
	for _, b := range q.GetBlocks() {
		L.blocks = append(L.blocks, b.GetId())
	}

	// Watchers on A, subscribed before any plan exists.
	V := &versionLog{acked: map[int64]bool{}, watchers: make([][]int64, watchers)}
	wctx, wcancel := context.WithCancel(bearer(context.Background(), tokens["viewer"]))
	defer wcancel()
	var wwg sync.WaitGroup
	for w := range watchers {
		stream, err := nightloomv1.NewPlanServiceClient(connA).WatchPlans(wctx, &nightloomv1.WatchPlansRequest{SiteId: siteID})
		if err != nil {
			t.Fatal(err)
		}
		wwg.Add(1)
		go func() {
			defer wwg.Done()
			for {
				r, err := stream.Recv()
				if err != nil {
					return
				}
				V.mu.Lock()
				V.watchers[w] = append(V.watchers[w], r.GetPlan().GetVersion())
				V.mu.Unlock()
			}
		}()
	}

	// The server sends no header before the first version; give the
	// streams time to be subscribed (a late one would miss version 1 and
	// fail the test, not pass it).
	time.Sleep(300 * time.Millisecond)

	rng := rand.New(rand.NewPCG(2032, 0x7265706c)) // fixed seed
	for round := range rounds {
		b := startProc(t, bin, args...)
		connB := b.dial(t, nil)
		queueB := nightloomv1.NewQueueServiceClient(connB)
		// Retries go to the survivor: most calls in doubt were sent to B.
		crashRetries(t, L, queueA, tokens, rng)

		killAfter := int64(10 + rng.IntN(200))
		delay := time.Duration(rng.IntN(3000)) * time.Microsecond
		L.acks.Store(0)
		cctx, cancel := context.WithCancel(context.Background())
		// The survivor's clients finish the call they are in and then stop
		// (a call cancelled on a live daemon may still commit after the
		// check); the doomed daemon's clients are cut off by its death.
		stopA := &stopCtx{Context: context.Background()}
		var wg sync.WaitGroup
		for c := range clients {
			conn, queue, ctxC := connA, queueA, context.Context(stopA)
			if c >= clients/2 {
				conn, queue, ctxC = connB, queueB, cctx
			}
			plans := nightloomv1.NewPlanServiceClient(conn)
			wg.Add(2)
			go func() {
				defer wg.Done()
				crashClient(ctxC, L, queue, tokens, siteID, targets, round, c)
			}()
			go func() {
				defer wg.Done()
				replicaPlanner(ctxC, V, plans, tokens, siteID, round, c)
			}()
		}
		deadline := time.Now().Add(30 * time.Second)
		for L.acks.Load() < killAfter && time.Now().Before(deadline) {
			time.Sleep(200 * time.Microsecond)
		}
		time.Sleep(delay)
		b.kill()
		cancel()
		stopA.stop.Store(true)
		wg.Wait()
		if L.acks.Load() < killAfter {
			t.Fatalf("round %d: %d acknowledgements in 30 s, want %d\n%s", round, L.acks.Load(), killAfter, b.logs.String())
		}
		crashVerify(t, L, dsn, siteID, round)
		if t.Failed() {
			t.Logf("daemon A log:\n%s\ndaemon B log:\n%s", a.logs.String(), b.logs.String())
			return
		}
	}

	// Versions: 1..n stored, every acknowledged one among them, and every
	// watcher on A has all of them in order.
	st, err := store.OpenPostgres(dsn, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	latest, err := st.LatestPlan(context.Background(), siteID)
	if err != nil {
		t.Fatal(err)
	}
	n := latest.Version
	V.mu.Lock()
	for v := range V.acked {
		if v < 1 || v > n {
			t.Errorf("acknowledged version %d is not stored (latest %d)", v, n)
		}
	}
	acked, aborted := len(V.acked), V.aborted
	for _, u := range V.unexpected {
		t.Error(u)
	}
	V.mu.Unlock()
	want := make([]int64, n)
	for i := range want {
		want[i] = int64(i + 1)
	}
	deadline := time.Now().Add(10 * time.Second)
	for {
		V.mu.Lock()
		done := true
		for _, got := range V.watchers {
			if len(got) < int(n) {
				done = false
			}
		}
		V.mu.Unlock()
		if done || time.Now().After(deadline) {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	wcancel()
	wwg.Wait()
	for w, got := range V.watchers {
		if fmt.Sprint(got) != fmt.Sprint(want) {
			t.Errorf("watcher %d on the surviving daemon received versions %v, want 1..%d in order", w, got, n)
		}
	}
	L.mu.Lock()
	defer L.mu.Unlock()
	for _, u := range L.unexpected {
		t.Error(u)
	}
	t.Logf("%d rounds, daemon B killed with SIGKILL each round (%d clients over 2 daemons); acknowledged: %d progress reports, "+
		"%d QueueBlocks calls (%d blocks), %d plan versions (%d MakePlan calls lost the planning lock and were retried); "+
		"lost 0, doubled 0; in flight at a kill: %d calls, %d committed; retried on the survivor: %d calls, %d answered as duplicates; "+
		"%d watchers on the survivor each received versions 1..%d in order; total %v",
		rounds, clients, L.ackedReports, L.ackedQueues, L.ackedBlocks, acked, aborted, L.doubtful, L.doubtfulCommitted,
		L.retries, L.retryDuplicates, watchers, n, time.Since(began).Round(time.Millisecond))
}

// replicaPlanner makes plans now and then until ctx ends, recording each
// acknowledged version. A call that lost the site's planning lock to
// another daemon (ABORTED) is retried, as a client should.
func replicaPlanner(ctx context.Context, V *versionLog, plans nightloomv1.PlanServiceClient, tokens map[string]string,
	siteID string, round, client int) {
	rng := rand.New(rand.NewPCG(uint64(round), uint64(client)+100))
	opr := bearer(ctx, tokens["operator"])
	night := &nightloomv1.MakePlanRequest_Night{Night: &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 15}}
	for ctx.Err() == nil {
		t := time.NewTimer(time.Duration(20+rng.IntN(60)) * time.Millisecond)
		select {
		case <-ctx.Done():
			t.Stop()
			return
		case <-t.C:
		}
		r, err := plans.MakePlan(opr, &nightloomv1.MakePlanRequest{SiteId: siteID, Span: night,
			TimeBudget: durationpb.New(20 * time.Millisecond), Seed: int64(rng.IntN(1000))})
		switch status.Code(err) {
		case codes.OK:
			V.mu.Lock()
			for _, p := range r.GetPlans() {
				V.acked[p.GetVersion()] = true
			}
			V.mu.Unlock()
		case codes.Aborted:
			V.mu.Lock()
			V.aborted++
			V.mu.Unlock()
		case codes.Unavailable, codes.Canceled, codes.DeadlineExceeded:
			return // the daemon is gone or the round is over
		default:
			V.mu.Lock()
			V.unexpected = append(V.unexpected, fmt.Sprintf("MakePlan (round %d, client %d): %v", round, client, err))
			V.mu.Unlock()
			return
		}
	}
}

// stopCtx is a context that reports Canceled from Err once stop is set but
// never closes Done, so that a loop checking Err ends while the call in
// flight (whose context derives from it) runs to its end.
type stopCtx struct {
	context.Context
	stop atomic.Bool
}

func (c *stopCtx) Err() error {
	if c.stop.Load() {
		return context.Canceled
	}
	return nil
}

// TestCopyDBCommand: `nightloomd copy-db` copies a SQLite file with tokens
// into PostgreSQL and back; the tokens list the same from all three; the
// flags are checked before anything is opened.
func TestCopyDBCommand(t *testing.T) {
	dir := t.TempDir()
	src, back := dir+"/src.db", dir+"/back.db"
	for _, role := range []string{"admin", "telescope"} {
		if code, _, errs := runCmd(t, "token", "create", "--role", role, "--db", src); code != 0 {
			t.Fatalf("token create: %s", errs)
		}
	}
	if code, _, errs := runCmd(t, "token", "revoke", "--id", tokenIDs(t, src)[0], "--db", src); code != 0 {
		t.Fatalf("token revoke: %s", errs)
	}
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"copy-db", "--to", back}, "flag --from: required"},
		{[]string{"copy-db", "--from", src}, "flag --to: required"},
		{[]string{"copy-db", "--from", src, "--to", src}, "two different databases"},
		{[]string{"copy-db", "--from", dir + "/missing.db", "--to", back}, "flag --from"},
	}
	for _, c := range cases {
		code, _, errs := runCmd(t, c.args...)
		if code != 2 || !strings.Contains(errs, c.want) {
			t.Errorf("%v: exit %d, %q; want 2 and %q", c.args, code, errs, c.want)
		}
	}
	if _, err := os.Stat(back); err == nil {
		t.Fatal("a refused copy-db created the destination")
	}
	pg := pgtest.NewDatabase(t)
	for _, step := range [][2]string{{src, pg}, {pg, back}} {
		code, out, errs := runCmd(t, "copy-db", "--from", step[0], "--to", step[1])
		if code != 0 || !strings.Contains(out, "2 tokens") {
			t.Fatalf("copy-db: exit %d\n%s%s", code, out, errs)
		}
	}
	if code, _, _ := runCmd(t, "copy-db", "--from", src, "--to", pg); code != 1 {
		t.Errorf("copy-db into a database that is not empty: exit %d, want 1", code)
	}
	want := listTokens(t, src)
	for _, db := range []string{pg, back} {
		if got := listTokens(t, db); got != want {
			t.Errorf("token list of the copy %s:\n%s\nwant\n%s", db, got, want)
		}
	}
}

func listTokens(t *testing.T, db string) string {
	t.Helper()
	code, out, errs := runCmd(t, "token", "list", "--db", db)
	if code != 0 {
		t.Fatalf("token list --db %s: %s", db, errs)
	}
	return out
}

func tokenIDs(t *testing.T, db string) []string {
	var ids []string
	for _, line := range strings.Split(strings.TrimSpace(listTokens(t, db)), "\n")[1:] {
		ids = append(ids, strings.Fields(line)[0])
	}
	return ids
}
