package server

// Resource limits (issue 7): each limit of limits.go is met at its value
// and refused one step beyond, with the status and field of the .proto
// comments, while another client of the same daemon keeps being served.
// validation_test.go checks several refusals on their own; this file adds
// the boundaries, the other client, idle and garbage connections, a long
// solve beside short calls, and a slow stream reader.

import (
	"context"
	"fmt"
	"net"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// bystander is another client of the daemon, on its own connection, that
// reads a site every few milliseconds while a test runs; every one of its
// calls must succeed.
type bystander struct {
	stop  chan struct{}
	done  chan struct{}
	mu    sync.Mutex
	calls int
	errs  []error
	lat   []time.Duration
}

func startBystander(t *testing.T, e *env, siteID string) *bystander {
	t.Helper()
	b := &bystander{stop: make(chan struct{}), done: make(chan struct{})}
	sites := nightloomv1.NewSiteServiceClient(dialTCP(t, e))
	ctx := withToken(context.Background(), e.tokens[RoleViewer])
	go func() {
		defer close(b.done)
		for {
			select {
			case <-b.stop:
				return
			case <-time.After(5 * time.Millisecond):
			}
			cctx, cancel := context.WithTimeout(ctx, 10*time.Second)
			began := time.Now()
			_, err := sites.GetSite(cctx, &nightloomv1.GetSiteRequest{SiteId: siteID})
			cancel()
			b.mu.Lock()
			b.calls++
			b.lat = append(b.lat, time.Since(began))
			if err != nil {
				b.errs = append(b.errs, err)
			}
			b.mu.Unlock()
		}
	}()
	return b
}

// finish stops the bystander and fails the test unless it made calls and
// none failed; it returns the calls and their p99 latency.
func (b *bystander) finish(t *testing.T, what string) (int, time.Duration) {
	t.Helper()
	close(b.stop)
	<-b.done
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.calls == 0 {
		t.Errorf("%s: the other client made no call", what)
	}
	for _, err := range b.errs {
		t.Errorf("%s: the other client's call failed: %v", what, err)
	}
	lat := slices.Clone(b.lat)
	slices.Sort(lat)
	return b.calls, percentile(lat, 99)
}

// limitCase is one request at or just past a limit.
type limitCase struct {
	limit     string // the limit and its value, for the log and README
	call      func(ctx context.Context) error
	wantCode  codes.Code
	wantField string // INVALID_ARGUMENT: a field the violations name
}

func TestLimitsWhileServingOthers(t *testing.T) {
	e := newEnv(t, "", withTCP(), func(c *Config) { c.ReplanPriority = -1 })
	f := e.seed(t, 2)
	site, fixed := f.site.GetId(), f.targets[0].GetId()
	// A second site takes the blocks queued at the limit, so that the
	// planning calls on the first stay small.
	other, err := e.sites.CreateSite(e.admin(), &nightloomv1.CreateSiteRequest{Site: testSite()})
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	span := func(d time.Duration) *nightloomv1.TimeInterval {
		return &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(d))}
	}
	night := &nightloomv1.MakePlanRequest_Night{Night: testNight}
	blocks := func(n int) []*nightloomv1.Block {
		out := make([]*nightloomv1.Block, n)
		for i := range out {
			out[i] = testBlock(other.GetSite().GetId(), fixed, "L", 10, 1)
		}
		return out
	}
	closures := func(n int) []*nightloomv1.Closure {
		out := make([]*nightloomv1.Closure, n)
		for i := range out {
			s := t0.Add(time.Duration(i) * 2 * time.Minute)
			out[i] = &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{Start: ts(s), End: ts(s.Add(time.Minute))}, Reason: "cloud"}
		}
		return out
	}
	const tenYears = 3653 * 24 * time.Hour
	const month = 30 * 24 * time.Hour
	sky, plans, queue := e.sky, e.plans, e.queue
	mkPlan := func(r *nightloomv1.MakePlanRequest) func(ctx context.Context) error {
		return func(ctx context.Context) error {
			if r.SiteId == "" {
				r.SiteId = site
			}
			if r.LookaheadNights == nil {
				r.LookaheadNights = proto.Int32(0)
			}
			if r.TimeBudget == nil {
				r.TimeBudget = dur(0)
			}
			_, err := plans.MakePlan(ctx, r)
			return err
		}
	}
	ephemeris := func(iv *nightloomv1.TimeInterval, step time.Duration) func(ctx context.Context) error {
		return func(ctx context.Context) error {
			_, err := sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site,
				Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: fixed}, Interval: iv, Step: dur(step)})
			return err
		}
	}
	visibility := func(sp *nightloomv1.TimeInterval, step time.Duration) func(ctx context.Context) error {
		return func(ctx context.Context) error {
			_, err := sky.Visibility(ctx, &nightloomv1.VisibilityRequest{SiteId: site,
				Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: fixed},
				Span:    &nightloomv1.VisibilityRequest_Interval{Interval: sp}, Step: dur(step)})
			return err
		}
	}
	cases := []limitCase{
		// Message size (--max-recv-bytes, DefaultMaxRecvBytes = 4 MiB).
		{fmt.Sprintf("request of %d bytes + 1 (max_recv_bytes)", DefaultMaxRecvBytes), func(ctx context.Context) error {
			b := testBlock(site, fixed, "L", 10, 1)
			b.Label = strings.Repeat("x", DefaultMaxRecvBytes)
			_, err := queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
			return err
		}, codes.ResourceExhausted, ""},
		{"request of 4 MiB - 64 KiB: passes gRPC, refused by validation", func(ctx context.Context) error {
			b := testBlock(site, fixed, "L", 10, 1)
			b.Label = strings.Repeat("x", DefaultMaxRecvBytes-64<<10)
			_, err := queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
			return err
		}, codes.InvalidArgument, "blocks[0].label"},
		// Blocks per call (MaxBlocksPerCall = 500).
		{fmt.Sprintf("%d blocks in one call", MaxBlocksPerCall+1), func(ctx context.Context) error {
			_, err := queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: blocks(MaxBlocksPerCall + 1)})
			return err
		}, codes.InvalidArgument, "blocks"},
		{fmt.Sprintf("%d blocks in one call", MaxBlocksPerCall), func(ctx context.Context) error {
			_, err := queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: blocks(MaxBlocksPerCall)})
			return err
		}, codes.OK, ""},
		// Plan horizon: nights (MaxPlanNights = 30), an interval
		// (MaxPlanInterval = 48 h), the lookahead (MaxLookaheadNights = 60).
		{"plan of 3653 nights (10 years)", mkPlan(&nightloomv1.MakePlanRequest{Span: night, Nights: 3653}), codes.InvalidArgument, "nights"},
		{fmt.Sprintf("plan of %d nights", MaxPlanNights+1), mkPlan(&nightloomv1.MakePlanRequest{Span: night, Nights: MaxPlanNights + 1}), codes.InvalidArgument, "nights"},
		{fmt.Sprintf("plan of %d nights", MaxPlanNights), mkPlan(&nightloomv1.MakePlanRequest{Span: night, Nights: MaxPlanNights}), codes.OK, ""},
		{"plan over a 10-year interval", mkPlan(&nightloomv1.MakePlanRequest{Span: &nightloomv1.MakePlanRequest_Interval{Interval: span(tenYears)}}),
			codes.InvalidArgument, "interval"},
		{fmt.Sprintf("plan over %v + 1 s", MaxPlanInterval), mkPlan(&nightloomv1.MakePlanRequest{
			Span: &nightloomv1.MakePlanRequest_Interval{Interval: span(MaxPlanInterval + time.Second)}}), codes.InvalidArgument, "interval"},
		{"lookahead of 3653 nights", mkPlan(&nightloomv1.MakePlanRequest{Span: night, LookaheadNights: proto.Int32(3653)}), codes.InvalidArgument, "lookahead_nights"},
		{fmt.Sprintf("lookahead of %d nights", MaxLookaheadNights), mkPlan(&nightloomv1.MakePlanRequest{Span: night, LookaheadNights: proto.Int32(MaxLookaheadNights)}),
			codes.OK, ""},
		{"visibility over a 10-year interval", visibility(span(tenYears), time.Minute), codes.InvalidArgument, "interval"},
		{"ephemeris over 10 years, daily", ephemeris(span(tenYears), 24*time.Hour), codes.InvalidArgument, "interval"},
		// Grid size: the step (MinGridStep = 10 s) and block-steps.
		{"1 s grid over a month (30 nights)", mkPlan(&nightloomv1.MakePlanRequest{Span: night, Nights: 30, GridStep: dur(time.Second)}),
			codes.InvalidArgument, "grid_step"},
		{fmt.Sprintf("grid step %v", MinGridStep-time.Second), mkPlan(&nightloomv1.MakePlanRequest{Span: night, GridStep: dur(MinGridStep - time.Second)}),
			codes.InvalidArgument, "grid_step"},
		{fmt.Sprintf("grid step %v", MinGridStep), mkPlan(&nightloomv1.MakePlanRequest{Span: night, GridStep: dur(MinGridStep)}), codes.OK, ""},
		{"visibility with a 1 s step", visibility(span(12*time.Hour), time.Second), codes.InvalidArgument, "step"},
		{"ephemeris at 1 s over a month (2.6 million rows)", ephemeris(span(month), time.Second), codes.InvalidArgument, "step"},
		{fmt.Sprintf("ephemeris of %d rows", MaxEphemerisRows+1), ephemeris(span(time.Duration(MaxEphemerisRows+1)*time.Minute), time.Minute),
			codes.InvalidArgument, "step"},
		{fmt.Sprintf("ephemeris of %d rows", MaxEphemerisRows), ephemeris(span(time.Duration(MaxEphemerisRows)*time.Minute), time.Minute), codes.OK, ""},
		// Solver budget (MaxTimeBudget = 60 s) and closures per call (100).
		{fmt.Sprintf("time budget %v + 1 ms", MaxTimeBudget), mkPlan(&nightloomv1.MakePlanRequest{Span: night, TimeBudget: dur(MaxTimeBudget + time.Millisecond)}),
			codes.InvalidArgument, "time_budget"},
		{fmt.Sprintf("%d closures", MaxClosuresPerCall+1), mkPlan(&nightloomv1.MakePlanRequest{Span: night, Closures: closures(MaxClosuresPerCall + 1)}),
			codes.InvalidArgument, "closures"},
		{fmt.Sprintf("%d closures", MaxClosuresPerCall), mkPlan(&nightloomv1.MakePlanRequest{Span: night, Closures: closures(MaxClosuresPerCall)}), codes.OK, ""},
		// Horizon profile (MaxHorizonPoints = 720).
		{fmt.Sprintf("horizon of %d points", MaxHorizonPoints), func(ctx context.Context) error {
			s := testSite()
			s.Horizon = nil
			for i := 0; i < MaxHorizonPoints; i++ {
				s.Horizon = append(s.Horizon, &nightloomv1.HorizonPoint{AzimuthDeg: float64(i) * 0.5, AltitudeDeg: float64(i % 7)})
			}
			_, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: s})
			return err
		}, codes.OK, ""},
		// Page sizes (MaxPageSize = 500, MaxBlockPageSize = 1000).
		{fmt.Sprintf("block page of %d", MaxBlockPageSize+1), func(ctx context.Context) error {
			_, err := queue.ListBlocks(ctx, &nightloomv1.ListBlocksRequest{PageSize: MaxBlockPageSize + 1})
			return err
		}, codes.InvalidArgument, "page_size"},
		{fmt.Sprintf("block page of %d", MaxBlockPageSize), func(ctx context.Context) error {
			_, err := queue.ListBlocks(ctx, &nightloomv1.ListBlocksRequest{PageSize: MaxBlockPageSize})
			return err
		}, codes.OK, ""},
	}
	by := startBystander(t, e, site)
	var table strings.Builder
	for _, c := range cases {
		before := e.snapshot(t)
		began := time.Now()
		ctx, cancel := context.WithTimeout(e.admin(), 60*time.Second)
		err := c.call(ctx)
		cancel()
		took := time.Since(began)
		if got := status.Code(err); got != c.wantCode {
			t.Errorf("%s: code %v, want %v (%v)", c.limit, got, c.wantCode, err)
			continue
		}
		if c.wantCode != codes.OK {
			if after := e.snapshot(t); after != before {
				t.Errorf("%s: the refused call wrote", c.limit)
			}
			if len(status.Convert(err).Message()) == 0 {
				t.Errorf("%s: refused without a message", c.limit)
			}
		}
		if c.wantCode == codes.InvalidArgument && !slices.Contains(violationFields(err), c.wantField) {
			t.Errorf("%s: violations %v, want %q", c.limit, violationFields(err), c.wantField)
		}
		msg := status.Convert(err).Message()
		if len(msg) > 90 {
			msg = msg[:90] + "..."
		}
		fmt.Fprintf(&table, "%-58s %-18v %6dms  %s\n", c.limit, c.wantCode, took.Milliseconds(), msg)
	}
	n, p99 := by.finish(t, "limits")
	t.Logf("limits (while another client made %d calls, all OK, p99 %v):\n%s", n, p99.Round(time.Millisecond), table.String())
}

// TestIdleAndGarbageConnections: many TCP connections that never speak,
// and some that send garbage instead of HTTP/2, do not stop the daemon
// from serving a proper client; the garbage ones are closed by the server.
func TestIdleAndGarbageConnections(t *testing.T) {
	e := newEnv(t, "", withTCP())
	f := e.seed(t, 0)
	addr := e.srv.Addr().String()
	const idle, garbage = 200, 20
	var conns []net.Conn
	defer func() {
		for _, c := range conns {
			_ = c.Close()
		}
	}()
	for i := 0; i < idle; i++ {
		c, err := net.Dial("tcp", addr)
		if err != nil {
			t.Fatalf("idle connection %d: %v", i, err)
		}
		conns = append(conns, c)
	}
	closed := 0
	for i := 0; i < garbage; i++ {
		c, err := net.Dial("tcp", addr)
		if err != nil {
			t.Fatal(err)
		}
		conns = append(conns, c)
		if _, err := c.Write([]byte("GET / HTTP/1.1\r\nHost: x\r\n\r\n" + strings.Repeat("\x00\xff", 512))); err != nil {
			continue
		}
		_ = c.SetReadDeadline(time.Now().Add(5 * time.Second))
		buf := make([]byte, 4096)
		for {
			if _, err := c.Read(buf); err != nil {
				if ne, ok := err.(net.Error); !ok || !ne.Timeout() {
					closed++
				}
				break
			}
		}
	}
	if closed != garbage {
		t.Errorf("%d of %d garbage connections were closed by the server", closed, garbage)
	}
	by := startBystander(t, e, f.site.GetId())
	time.Sleep(200 * time.Millisecond)
	n, p99 := by.finish(t, "idle connections")
	t.Logf("%d idle and %d garbage connections open; another client made %d calls, all OK, p99 %v", idle, garbage, n, p99.Round(time.Millisecond))
}

// TestLongSolveBesideShortCalls: a MakePlan that uses a 2 s solver budget
// on 200 blocks does not starve short calls of other clients; their p99
// stays under 1 s (the solver runs GOMAXPROCS workers, and Go preempts
// them).
func TestLongSolveBesideShortCalls(t *testing.T) {
	if testing.Short() {
		t.Skip("a 2 s solve")
	}
	e := newEnv(t, "", withTCP())
	f := e.seed(t, 200)
	by := startBystander(t, e, f.site.GetId())
	time.Sleep(50 * time.Millisecond)
	began := time.Now()
	_, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(2 * time.Second)})
	solve := time.Since(began)
	n, p99 := by.finish(t, "long solve")
	if err != nil {
		t.Fatal(err)
	}
	if solve > 10*time.Second {
		t.Errorf("a 2 s budget took %v", solve)
	}
	if p99 > time.Second {
		t.Errorf("short calls beside the solve: p99 %v, want under 1 s", p99)
	}
	t.Logf("MakePlan with a 2 s budget took %v; meanwhile %d short calls, p99 %v", solve.Round(time.Millisecond), n, p99.Round(time.Millisecond))
}

// TestSlowStreamReaderIsBounded: a watcher on its own TCP connection stops
// reading while large plan versions are published. The hub never blocks
// the publisher (each publish returns at once), the slow watcher is cut off
// with RESOURCE_EXHAUSTED after a bounded number of versions, a watcher
// that reads gets every version, and a unary client is served throughout.
// (TestSlowWatcherIsCutOff shows the cut-off; this adds the bounds and the
// other clients.)
func TestSlowStreamReaderIsBounded(t *testing.T) {
	const buffer = 4
	e := newEnv(t, "", withTCP(), func(c *Config) { c.WatchBuffer = buffer })
	f := e.seed(t, 0)
	site := f.site.GetId()
	ctx, cancel := context.WithCancel(withToken(context.Background(), e.tokens[RoleTelescope]))
	defer cancel()
	slow, err := nightloomv1.NewPlanServiceClient(dialTCP(t, e)).WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site})
	if err != nil {
		t.Fatal(err)
	}
	fast, err := nightloomv1.NewPlanServiceClient(dialTCP(t, e)).WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site})
	if err != nil {
		t.Fatal(err)
	}
	waitWatchers(t, e, 2)
	by := startBystander(t, e, site)
	big := strings.Repeat("y", 256<<10)
	const maxVersions = 400
	cutAt := 0
	var slowest time.Duration
	for v := int64(1); v <= maxVersions; v++ {
		began := time.Now()
		published := make(chan struct{})
		go func() {
			e.srv.hub.publish(&nightloomv1.Plan{Id: "plan-synthetic", SiteId: site, Version: v,
				Unplaced: []*nightloomv1.Unplaced{{BlockId: "blk-none", Detail: big}}, CreateTime: timestamppb.Now()})
			close(published)
		}()
		select {
		case <-published:
		case <-time.After(10 * time.Second):
			t.Fatalf("publishing version %d blocked for 10 s behind the slow watcher", v)
		}
		slowest = max(slowest, time.Since(began))
		r, err := fast.Recv()
		if err != nil || r.GetPlan().GetVersion() != v {
			t.Fatalf("reading watcher at version %d: %v %v", v, r.GetPlan().GetVersion(), err)
		}
		if e.srv.hub.count() == 1 {
			cutAt = int(v)
			break
		}
	}
	if cutAt == 0 {
		t.Fatalf("the slow watcher was not cut off after %d versions of %d KiB", maxVersions, len(big)>>10)
	}
	if slowest > 100*time.Millisecond {
		t.Errorf("a publish took %v; it must not wait for a slow watcher", slowest)
	}
	var slowErr error
	for slowErr == nil {
		_, slowErr = slow.Recv()
	}
	if status.Code(slowErr) != codes.ResourceExhausted {
		t.Errorf("slow watcher ended with %v, want ResourceExhausted", slowErr)
	}
	time.Sleep(100 * time.Millisecond) // let the other client call a few more times
	n, p99 := by.finish(t, "slow stream reader")
	t.Logf("watch buffer %d: the slow watcher was cut off at version %d of %d KiB (the buffer plus what gRPC had taken); slowest publish %v; the reading watcher got all %d; another client made %d calls, p99 %v",
		buffer, cutAt, len(big)>>10, slowest.Round(time.Microsecond), cutAt, n, p99.Round(time.Millisecond))
}

// TestHubTotalLimit: the daemon-wide watcher limit (MaxWatchersTotal,
// 2000, a constant the daemon does not expose) refuses one more watcher
// across sites and frees a place when one ends; the per-site limit counts
// each site apart.
func TestHubTotalLimit(t *testing.T) {
	h := newHub(2, 2, 3)
	a, err := h.subscribe("site-a")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := h.subscribe("site-a"); err != nil {
		t.Fatal(err)
	}
	_, err = h.subscribe("site-a")
	wantCode(t, err, codes.ResourceExhausted, "third watcher of a site with a per-site limit of 2")
	if _, err := h.subscribe("site-b"); err != nil {
		t.Fatalf("first watcher of another site: %v", err)
	}
	_, err = h.subscribe("site-c")
	wantCode(t, err, codes.ResourceExhausted, "fourth watcher with a total limit of 3")
	h.unsubscribe(a)
	if _, err := h.subscribe("site-c"); err != nil {
		t.Fatalf("after one ended: %v", err)
	}
	if h.count() != 3 {
		t.Errorf("count %d, want 3", h.count())
	}
	h.close()
	_, err = h.subscribe("site-d")
	wantCode(t, err, codes.Unavailable, "subscribe after close")
}
