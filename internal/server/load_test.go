package server

// Load on loopback TCP (issue 7): many concurrent clients making a fixed
// number of mixed calls within a time limit, with latency percentiles per
// method and no error allowed; and a WatchPlans fan-out in which every
// watcher receives every version. The default form fits the CI run of
// `go test ./...`; -short runs a smaller one and NIGHTLOOM_LOAD_LONG=1 a
// longer one:
//
//	NIGHTLOOM_LOAD_LONG=1 go test -run 'TestLoad|TestWatchFanOut' -v ./internal/server/

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/metadata"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// loadForm is the size of one form of the load tests.
type loadForm struct {
	name           string
	clients        int
	callsPerClient int
	watchers       int
	versions       int
	limit          time.Duration // the whole run, or the test fails
}

func loadSize() loadForm {
	switch {
	case os.Getenv("NIGHTLOOM_LOAD_LONG") == "1":
		return loadForm{"long", 32, 500, 100, 30, 10 * time.Minute}
	case testing.Short():
		return loadForm{"short", 32, 10, 50, 4, 60 * time.Second}
	}
	return loadForm{"default", 32, 40, 50, 12, 90 * time.Second}
}

// latencies collects call durations per method.
type latencies struct {
	mu   sync.Mutex
	by   map[string][]time.Duration
	errs map[string][]string
}

func newLatencies() *latencies {
	return &latencies{by: map[string][]time.Duration{}, errs: map[string][]string{}}
}

func (l *latencies) add(method string, d time.Duration, err error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.by[method] = append(l.by[method], d)
	if err != nil {
		l.errs[method] = append(l.errs[method], err.Error())
	}
}

// percentile is the nearest-rank percentile of sorted durations (p in
// (0, 100]).
func percentile(sorted []time.Duration, p float64) time.Duration {
	if len(sorted) == 0 {
		return 0
	}
	rank := int(float64(len(sorted))*p/100+0.999999) - 1
	return sorted[max(0, min(rank, len(sorted)-1))]
}

// table formats count, errors, p50 and p99 per method.
func (l *latencies) table() (string, int, int) {
	l.mu.Lock()
	defer l.mu.Unlock()
	var names []string
	for m := range l.by {
		names = append(names, m)
	}
	sort.Strings(names)
	var b strings.Builder
	fmt.Fprintf(&b, "%-16s %6s %6s %10s %10s\n", "method", "calls", "errors", "p50", "p99")
	total, errs := 0, 0
	for _, m := range names {
		d := slices.Clone(l.by[m])
		slices.Sort(d)
		fmt.Fprintf(&b, "%-16s %6d %6d %10v %10v\n", m, len(d), len(l.errs[m]),
			percentile(d, 50).Round(10*time.Microsecond), percentile(d, 99).Round(10*time.Microsecond))
		total += len(d)
		errs += len(l.errs[m])
	}
	return b.String(), total, errs
}

func TestPercentile(t *testing.T) {
	d := []time.Duration{1, 2, 3, 4, 5, 6, 7, 8, 9, 10}
	for _, c := range []struct {
		p    float64
		want time.Duration
	}{{50, 5}, {99, 10}, {10, 1}, {100, 10}, {91, 10}, {90, 9}} {
		if got := percentile(d, c.p); got != c.want {
			t.Errorf("percentile(1..10, %v) = %v, want %v (nearest rank)", c.p, got, c.want)
		}
	}
}

// dialTCP opens a client connection of its own to the server (one per
// simulated client, as separate processes would).
func dialTCP(t testing.TB, e *env) *grpc.ClientConn {
	t.Helper()
	conn, err := grpc.NewClient(e.srv.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = conn.Close() })
	return conn
}

// TestLoad: 32 clients, each on its own TCP connection, make a fixed
// number of calls drawn (with a fixed seed per client) from a mix of every
// unary RPC: reads, queued blocks, progress reports, withdrawals, night and
// ephemeris tables, visibility, plans and replans. Every call must succeed
// and the whole run must end within the form's time limit.
func TestLoad(t *testing.T) {
	form := loadSize()
	e := newEnv(t, "", withTCP(), func(c *Config) { c.ReplanPriority = -1 })
	f := e.seed(t, 12)
	site := f.site.GetId()
	op := as(RoleOperator, e)
	// Blocks that reports go to: many frames wanted, so they stay open.
	var sink []*nightloomv1.Block
	for i := 0; i < 8; i++ {
		b := testBlock(site, f.targets[i%4].GetId(), "L", MaxFramesWanted, 3)
		b.MinRunFrames = 1
		sink = append(sink, b)
	}
	q, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: sink})
	if err != nil {
		t.Fatal(err)
	}
	sink = q.GetBlocks()
	mk, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		LookaheadNights: proto.Int32(0), TimeBudget: dur(20 * time.Millisecond)})
	if err != nil {
		t.Fatal(err)
	}
	plan := mk.GetPlans()[0]
	nightStart := plan.GetInterval().GetStart().AsTime()
	t0 := nightStart.Add(time.Hour)
	e.clock.Set(t0.Add(time.Hour)) // progress reports come after their runs

	type weighted struct {
		name   string
		weight int
		call   func(c *loadClient) error
	}
	mix := []weighted{
		{"GetSite", 8, func(c *loadClient) error {
			_, err := c.sites.GetSite(c.ctx(RoleViewer), &nightloomv1.GetSiteRequest{SiteId: site})
			return err
		}},
		{"ListSites", 3, func(c *loadClient) error {
			_, err := c.sites.ListSites(c.ctx(RoleViewer), &nightloomv1.ListSitesRequest{})
			return err
		}},
		{"GetTarget", 6, func(c *loadClient) error {
			_, err := c.targets.GetTarget(c.ctx(RoleViewer), &nightloomv1.GetTargetRequest{TargetId: f.targets[c.rng.IntN(len(f.targets))].GetId()})
			return err
		}},
		{"ListTargets", 3, func(c *loadClient) error {
			_, err := c.targets.ListTargets(c.ctx(RoleViewer), &nightloomv1.ListTargetsRequest{})
			return err
		}},
		{"GetBlock", 8, func(c *loadClient) error {
			_, err := c.queue.GetBlock(c.ctx(RoleTelescope), &nightloomv1.GetBlockRequest{BlockId: sink[c.rng.IntN(len(sink))].GetId()})
			return err
		}},
		{"ListBlocks", 4, func(c *loadClient) error {
			_, err := c.queue.ListBlocks(c.ctx(RoleViewer), &nightloomv1.ListBlocksRequest{SiteId: site, PageSize: 50})
			return err
		}},
		{"QueueBlocks", 8, func(c *loadClient) error {
			c.n++
			r, err := c.queue.QueueBlocks(c.ctx(RoleOperator), &nightloomv1.QueueBlocksRequest{RequestId: fmt.Sprintf("load-c%d-%d", c.id, c.n),
				Blocks: []*nightloomv1.Block{testBlock(site, f.targets[c.rng.IntN(4)].GetId(), "R", 12, 2)}})
			if err == nil {
				c.mine = append(c.mine, r.GetBlocks()[0].GetId())
			}
			return err
		}},
		{"ReportProgress", 16, func(c *loadClient) error {
			c.n++
			_, err := c.queue.ReportProgress(c.ctx(RoleTelescope), &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
				ReportId: fmt.Sprintf("load-c%d-%d", c.id, c.n), BlockId: sink[c.rng.IntN(len(sink))].GetId(), FramesKept: 1 + int32(c.rng.IntN(3)),
				Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(10 * time.Minute))},
				Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
			return err
		}},
		{"WithdrawBlock", 2, func(c *loadClient) error {
			if len(c.mine) == 0 {
				return errSkip
			}
			id := c.mine[len(c.mine)-1]
			c.mine = c.mine[:len(c.mine)-1]
			_, err := c.queue.WithdrawBlock(c.ctx(RoleOperator), &nightloomv1.WithdrawBlockRequest{BlockId: id, Reason: "load test"})
			return err
		}},
		{"NextAssignment", 8, func(c *loadClient) error {
			_, err := c.plans.NextAssignment(c.ctx(RoleTelescope), &nightloomv1.NextAssignmentRequest{SiteId: site,
				Now: ts(nightStart.Add(time.Duration(c.rng.IntN(600)) * time.Minute))})
			return err
		}},
		{"GetPlan", 5, func(c *loadClient) error {
			_, err := c.plans.GetPlan(c.ctx(RoleTelescope), &nightloomv1.GetPlanRequest{PlanId: plan.GetId()})
			return err
		}},
		{"ListPlans", 3, func(c *loadClient) error {
			_, err := c.plans.ListPlans(c.ctx(RoleViewer), &nightloomv1.ListPlansRequest{SiteId: site, PageSize: 10})
			return err
		}},
		{"Night", 3, func(c *loadClient) error {
			_, err := c.sky.Night(c.ctx(RoleViewer), &nightloomv1.NightRequest{SiteId: site,
				Date: &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 1 + int32(c.rng.IntN(28))}})
			return err
		}},
		{"Ephemeris", 3, func(c *loadClient) error {
			_, err := c.sky.Ephemeris(c.ctx(RoleViewer), &nightloomv1.EphemerisRequest{SiteId: site,
				Subject:  &nightloomv1.EphemerisRequest_TargetId{TargetId: f.targets[4].GetId()},
				Interval: &nightloomv1.TimeInterval{Start: ts(nightStart), End: ts(nightStart.Add(24 * time.Hour))}})
			return err
		}},
		{"Visibility", 2, func(c *loadClient) error {
			_, err := c.sky.Visibility(c.ctx(RoleViewer), &nightloomv1.VisibilityRequest{SiteId: site,
				Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: f.targets[c.rng.IntN(4)].GetId()},
				Span:    &nightloomv1.VisibilityRequest_Night{Night: testNight}})
			return err
		}},
		{"MakePlan", 1, func(c *loadClient) error {
			_, err := c.plans.MakePlan(c.ctx(RoleOperator), &nightloomv1.MakePlanRequest{SiteId: site,
				Span:            &nightloomv1.MakePlanRequest_Night{Night: &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 16 + int32(c.rng.IntN(10))}},
				LookaheadNights: proto.Int32(0), TimeBudget: dur(20 * time.Millisecond)})
			return err
		}},
		{"Replan", 1, func(c *loadClient) error {
			_, err := c.plans.Replan(c.ctx(RoleOperator), &nightloomv1.ReplanRequest{SiteId: site, From: ts(t0),
				TimeBudget: dur(20 * time.Millisecond)})
			return err
		}},
	}
	totalWeight := 0
	for _, w := range mix {
		totalWeight += w.weight
	}

	lat := newLatencies()
	ctx, cancel := context.WithTimeout(context.Background(), form.limit)
	defer cancel()
	began := time.Now()
	var wg sync.WaitGroup
	for id := 0; id < form.clients; id++ {
		c := newLoadClient(t, e, id, ctx)
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := 0; k < form.callsPerClient; {
				if ctx.Err() != nil {
					return
				}
				r := c.rng.IntN(totalWeight)
				w := mix[0]
				for _, m := range mix {
					if r < m.weight {
						w = m
						break
					}
					r -= m.weight
				}
				start := time.Now()
				err := w.call(c)
				if err == errSkip {
					continue // nothing to withdraw yet: draw again
				}
				lat.add(w.name, time.Since(start), err)
				k++
			}
		}()
	}
	wg.Wait()
	elapsed := time.Since(began)
	tab, total, errs := lat.table()
	t.Logf("load (%s form): %d clients x %d calls = %d calls in %v (%.0f calls/s), %d errors\n%s",
		form.name, form.clients, form.callsPerClient, total, elapsed.Round(time.Millisecond), float64(total)/elapsed.Seconds(), errs, tab)
	if ctx.Err() != nil {
		t.Fatalf("the load did not finish within %v", form.limit)
	}
	if want := form.clients * form.callsPerClient; total != want {
		t.Errorf("%d calls made, want %d", total, want)
	}
	if errs > 0 {
		lat.mu.Lock()
		for m, es := range lat.errs {
			t.Errorf("%s: %d errors, first: %s", m, len(es), es[0])
		}
		lat.mu.Unlock()
	}
	// The store is consistent after the load.
	if err := e.srv.Storage().(interface{ IntegrityCheck(context.Context) error }).IntegrityCheck(context.Background()); err != nil {
		t.Errorf("integrity after the load: %v", err)
	}
}

// loadClient is one simulated client: its own connection, random stream
// and counters.
type loadClient struct {
	id      int
	e       *env
	base    context.Context
	rng     *rand.Rand
	n       int
	mine    []string // blocks it queued and has not withdrawn
	sites   nightloomv1.SiteServiceClient
	targets nightloomv1.TargetServiceClient
	queue   nightloomv1.QueueServiceClient
	plans   nightloomv1.PlanServiceClient
	sky     nightloomv1.SkyServiceClient
}

// errSkip: the drawn call has nothing to act on yet (draw again).
var errSkip = errors.New("skip")

// withToken adds a bearer token to a context.
func withToken(ctx context.Context, token string) context.Context {
	return metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer "+token)
}

func newLoadClient(t testing.TB, e *env, id int, base context.Context) *loadClient {
	conn := dialTCP(t, e)
	return &loadClient{id: id, e: e, base: base, rng: rand.New(rand.NewPCG(2031, uint64(id))),
		sites: nightloomv1.NewSiteServiceClient(conn), targets: nightloomv1.NewTargetServiceClient(conn),
		queue: nightloomv1.NewQueueServiceClient(conn), plans: nightloomv1.NewPlanServiceClient(conn),
		sky: nightloomv1.NewSkyServiceClient(conn)}
}

// ctx is the client's context with a role's token.
func (c *loadClient) ctx(r Role) context.Context {
	return withToken(c.base, c.e.tokens[r])
}

// TestWatchFanOut: 50 watchers of one site, each on its own connection,
// all receive every plan version in order, with the plan the MakePlan
// call returned.
func TestWatchFanOut(t *testing.T) {
	form := loadSize()
	e := newEnv(t, "", withTCP(), func(c *Config) { c.MaxWatchersPerSite = max(DefaultMaxWatchersPerSite, form.watchers) })
	f := e.seed(t, 4)
	site := f.site.GetId()
	ctx, cancel := context.WithTimeout(context.Background(), form.limit)
	defer cancel()
	got := make([][]*nightloomv1.Plan, form.watchers)
	errs := make([]error, form.watchers)
	var wg sync.WaitGroup
	for i := 0; i < form.watchers; i++ {
		pc := nightloomv1.NewPlanServiceClient(dialTCP(t, e))
		st, err := pc.WatchPlans(withToken(ctx, e.tokens[Roles[i%len(Roles)]]), &nightloomv1.WatchPlansRequest{SiteId: site})
		if err != nil {
			t.Fatal(err)
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			for len(got[i]) < form.versions {
				r, err := st.Recv()
				if err != nil {
					errs[i] = err
					return
				}
				got[i] = append(got[i], r.GetPlan())
			}
		}()
	}
	waitWatchers(t, e, form.watchers)
	began := time.Now()
	var made []*nightloomv1.Plan
	for v := 1; v <= form.versions; v++ {
		mk, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: site,
			Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
		if err != nil {
			t.Fatal(err)
		}
		made = append(made, mk.GetPlans()[0])
	}
	wg.Wait()
	delivered := 0
	for i := range got {
		if errs[i] != nil {
			t.Errorf("watcher %d: %v after %d versions", i, errs[i], len(got[i]))
			continue
		}
		for k, p := range got[i] {
			if p.GetVersion() != int64(k+1) || !proto.Equal(p, made[k]) {
				t.Fatalf("watcher %d, message %d: plan %s v%d, want %s v%d as MakePlan returned it", i, k, p.GetId(), p.GetVersion(),
					made[k].GetId(), made[k].GetVersion())
			}
		}
		delivered += len(got[i])
	}
	t.Logf("fan-out (%s form): %d watchers x %d versions = %d deliveries of %d wanted in %v", form.name, form.watchers, form.versions,
		delivered, form.watchers*form.versions, time.Since(began).Round(time.Millisecond))
	if delivered != form.watchers*form.versions {
		t.Errorf("%d deliveries, want %d", delivered, form.watchers*form.versions)
	}
}

// TestFramesCountedUnderConcurrentReports: concurrent reports for one
// block, more frames than it wants in all; each response's frames_counted
// is what that report added (queue.proto), so their sum must equal the
// frames done at the end, whatever the interleaving. The store is wrapped
// so that the reports' writes wait until all of them have reached the
// store (a barrier, at most 2 s): the interleaving that concurrent
// telescopes can produce, made certain. Sequential reports pass;
// these expose frames_counted computed from a read made outside the
// store's transaction (queue.go ReportProgress).
func TestFramesCountedUnderConcurrentReports(t *testing.T) {
	const trials, reporters, kept, wanted = 3, 8, 3, 10
	path := filepath.Join(t.TempDir(), "count.db")
	db, err := store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = db.Close() })
	bs := &barrierStore{DB: db, n: reporters}
	e := newEnv(t, path, withTCP(), func(c *Config) { c.Storage = bs })
	f := e.seed(t, 0)
	t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	for trial := 0; trial < trials; trial++ {
		e.clock.Set(t0.Add(-time.Minute)) // queued before the run, reported after it
		q, err := e.queue.QueueBlocks(as(RoleOperator, e), &nightloomv1.QueueBlocksRequest{
			Blocks: []*nightloomv1.Block{testBlock(f.site.GetId(), f.targets[0].GetId(), "L", wanted, 5)}})
		if err != nil {
			t.Fatal(err)
		}
		id := q.GetBlocks()[0].GetId()
		e.clock.Set(t0.Add(time.Hour))
		bs.arm()
		counted := make([]int32, reporters)
		var wg sync.WaitGroup
		for c := 0; c < reporters; c++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				r, err := e.queue.ReportProgress(as(RoleTelescope, e), &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
					ReportId: fmt.Sprintf("count-%d-%d", trial, c), BlockId: id, FramesKept: kept,
					Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(10 * time.Minute))},
					Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
				if err != nil {
					t.Error(err)
					return
				}
				counted[c] = r.GetFramesCounted()
			}()
		}
		wg.Wait()
		var sum int32
		for _, n := range counted {
			sum += n
		}
		b, err := e.queue.GetBlock(as(RoleTelescope, e), &nightloomv1.GetBlockRequest{BlockId: id})
		if err != nil {
			t.Fatal(err)
		}
		if b.GetBlock().GetFramesDone() != wanted || sum != b.GetBlock().GetFramesDone() {
			t.Fatalf("trial %d: %d concurrent reports of %d frames each counted %v (sum %d), the block has %d of %d frames done",
				trial, reporters, kept, counted, sum, b.GetBlock().GetFramesDone(), wanted)
		}
	}
}

// barrierStore holds each ReportProgress until n of them are waiting (or
// 2 s have passed) once armed.
type barrierStore struct {
	*store.DB
	n     int
	mu    sync.Mutex
	count int
	open  chan struct{}
}

func (b *barrierStore) arm() {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.count, b.open = 0, make(chan struct{})
}

func (b *barrierStore) ReportProgress(ctx context.Context, r store.ProgressReport) (store.Block, bool, error) {
	b.mu.Lock()
	open := b.open
	if open != nil {
		b.count++
		if b.count == b.n {
			close(open)
			b.open = nil
		}
	}
	b.mu.Unlock()
	if open != nil {
		select {
		case <-open:
		case <-time.After(2 * time.Second):
		}
	}
	return b.DB.ReportProgress(ctx, r)
}
