package server

// Test fixtures: a real server over a real SQLite file in t.TempDir(), on
// bufconn (fast) or on a loopback TCP port, with one token per role. The
// observatory, its targets and the comet are invented.

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"net"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"
	"google.golang.org/grpc/test/bufconn"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// testNight is the night the tests plan: 2031-03-15, a date with the Moon
// near new (illumination ~0.1 from this code's own Night call; only used
// to make targets observable, not as a reference value).
var testNight = &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 15}

// clock is a settable test clock.
type clock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *clock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *clock) Set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = t
}

// env is one running test server with clients.
type env struct {
	t      *testing.T
	srv    *Server
	dbPath string
	clock  *clock
	conn   *grpc.ClientConn
	tokens map[Role]string
	seeded int // calls of seed so far

	sites   nightloomv1.SiteServiceClient
	targets nightloomv1.TargetServiceClient
	queue   nightloomv1.QueueServiceClient
	plans   nightloomv1.PlanServiceClient
	sky     nightloomv1.SkyServiceClient
}

type envOpt func(*Config)

func withTCP() envOpt { return func(c *Config) { c.Listen = "127.0.0.1:0"; c.Listener = nil } }

// quietLogger discards logs unless -v is given.
func quietLogger(t testing.TB) *slog.Logger {
	if testing.Verbose() {
		return slog.New(slog.NewTextHandler(testWriter{t}, &slog.HandlerOptions{Level: slog.LevelWarn}))
	}
	return slog.New(slog.NewTextHandler(io.Discard, nil))
}

type testWriter struct{ t testing.TB }

func (w testWriter) Write(p []byte) (int, error) { w.t.Log(string(p)); return len(p), nil }

// newEnv starts a server on a fresh database file (or dbPath when given).
func newEnv(t testing.TB, dbPath string, opts ...envOpt) *env {
	t.Helper()
	if dbPath == "" {
		dbPath = filepath.Join(t.TempDir(), "nightloom.db")
	}
	clk := &clock{t: time.Date(2031, 3, 10, 12, 0, 0, 0, time.UTC)}
	lis := bufconn.Listen(1 << 20)
	cfg := Config{Listener: lis, DBPath: dbPath, Logger: quietLogger(t), Now: clk.Now,
		DefaultTimeBudget: 50 * time.Millisecond, DefaultReplanBudget: 50 * time.Millisecond, ShutdownTimeout: 5 * time.Second}
	for _, o := range opts {
		o(&cfg)
	}
	srv, err := Start(context.Background(), cfg)
	if err != nil {
		t.Fatalf("Start: %v", err)
	}
	e := &env{srv: srv, dbPath: dbPath, clock: clk, tokens: map[Role]string{}}
	if tt, ok := t.(*testing.T); ok {
		e.t = tt
	}
	var conn *grpc.ClientConn
	if cfg.Listener != nil {
		conn, err = grpc.NewClient("passthrough:///bufnet",
			grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) { return lis.DialContext(ctx) }),
			grpc.WithTransportCredentials(insecure.NewCredentials()))
	} else {
		conn, err = grpc.NewClient(srv.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	}
	if err != nil {
		t.Fatalf("NewClient: %v", err)
	}
	e.conn = conn
	e.sites, e.targets = nightloomv1.NewSiteServiceClient(conn), nightloomv1.NewTargetServiceClient(conn)
	e.queue, e.plans = nightloomv1.NewQueueServiceClient(conn), nightloomv1.NewPlanServiceClient(conn)
	e.sky = nightloomv1.NewSkyServiceClient(conn)
	for _, r := range Roles {
		secret, _, err := srv.CreateToken(context.Background(), r, "test "+string(r))
		if err != nil {
			t.Fatalf("CreateToken(%s): %v", r, err)
		}
		e.tokens[r] = secret
	}
	t.Cleanup(e.close)
	return e
}

func (e *env) close() {
	if e.conn != nil {
		_ = e.conn.Close()
		e.conn = nil
	}
	if e.srv != nil {
		_ = e.srv.Shutdown(context.Background())
		e.srv = nil
	}
}

// as returns a context that carries the token of a role.
func as(r Role, e *env) context.Context {
	return metadata.AppendToOutgoingContext(context.Background(), "authorization", "Bearer "+e.tokens[r])
}

func (e *env) admin() context.Context { return as(RoleAdmin, e) }

func dur(d time.Duration) *durationpb.Duration { return durationpb.New(d) }

func ts(t time.Time) *timestamppb.Timestamp { return timestamppb.New(t) }

// testSite is the invented Hollowmere Ridge Observatory: a german
// equatorial mount on a ridge at 41.6 N, 4.2 W, 900 m, with trees to the
// north-east and a barn to the south.
func testSite() *nightloomv1.Site {
	return &nightloomv1.Site{
		Name: "Hollowmere Ridge Observatory", LatitudeDeg: 41.6, LongitudeDeg: -4.2, ElevationM: 900,
		TimeZone: "Europe/Madrid", ExtinctionV: 0.2,
		Horizon: []*nightloomv1.HorizonPoint{{AzimuthDeg: 0, AltitudeDeg: 8}, {AzimuthDeg: 45, AltitudeDeg: 18},
			{AzimuthDeg: 90, AltitudeDeg: 6}, {AzimuthDeg: 180, AltitudeDeg: 12}, {AzimuthDeg: 270, AltitudeDeg: 5}},
		Mount: &nightloomv1.Mount{Kind: nightloomv1.MountKind_MOUNT_KIND_GERMAN_EQUATORIAL,
			PrimaryAxis:   &nightloomv1.AxisSlew{RateDegPerS: 4, AccelerationDegPerS2: 2},
			SecondaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 4, AccelerationDegPerS2: 2},
			Settle:        dur(5 * time.Second),
			MeridianFlip:  &nightloomv1.MeridianFlip{Duration: dur(150 * time.Second), MinHourAngleDeg: -5, MaxHourAngleDeg: 10}},
		Instrument: &nightloomv1.Instrument{PixelScaleArcsec: 1.2, Filters: []string{"L", "R", "G", "B", "Ha"},
			FilterChange: dur(10 * time.Second), Readout: dur(4 * time.Second), Dither: dur(8 * time.Second),
			Acquisition: dur(30 * time.Second),
			Focus:       &nightloomv1.FocusPolicy{Interval: dur(time.Hour), OnFilterChange: true, Duration: dur(90 * time.Second)}},
	}
}

// testFixed is an invented fixed target.
func testFixed(name string, raDeg, decDeg float64) *nightloomv1.Target {
	return &nightloomv1.Target{Name: name, Position: &nightloomv1.Target_Fixed{Fixed: &nightloomv1.FixedPosition{RaDeg: raDeg, DecDeg: decDeg}}}
}

// testComet is the invented comet C/2031 E4 (Marrowind) on a near-parabolic
// orbit, perihelion 2031-03-28 TT at 0.62 au.
func testComet() *nightloomv1.Target {
	return &nightloomv1.Target{Name: "C/2031 E4 (Marrowind)", Position: &nightloomv1.Target_Orbit{Orbit: &nightloomv1.OrbitElements{
		PerihelionDistanceAu: 0.62, Eccentricity: 0.9993, InclinationDeg: 71.3, AscendingNodeDeg: 12.8,
		PerihelionArgumentDeg: 148.2, PerihelionTimeTt: ts(time.Date(2031, 3, 28, 6, 30, 0, 0, time.UTC)),
		MagnitudeLaw: &nightloomv1.OrbitElements_Comet{Comet: &nightloomv1.CometMagnitude{M1: 7.5, K1: 10}}}}}
}

// testBlock is a block of a target at a site.
func testBlock(site, target string, filter string, frames int32, prio int32) *nightloomv1.Block {
	return &nightloomv1.Block{SiteId: site, TargetId: target, Filter: filter, Exposure: dur(120 * time.Second),
		FramesWanted: frames, MinRunFrames: 3, Priority: prio,
		Constraints: &nightloomv1.ConstraintSet{MaxAirmass: proto.Float64(2.5), RequiredDarkness: nightloomv1.Darkness_DARKNESS_NAUTICAL}}
}

// fixture is a site with targets and blocks.
type fixture struct {
	site    *nightloomv1.Site
	targets []*nightloomv1.Target
	blocks  []*nightloomv1.Block
}

// seed creates the test site, four fixed targets of a March evening sky and
// the comet, and n blocks spread over the fixed targets.
func (e *env) seed(t testing.TB, n int) fixture {
	t.Helper()
	ctx := e.admin()
	cs, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: testSite()})
	if err != nil {
		t.Fatalf("CreateSite: %v", err)
	}
	f := fixture{site: cs.GetSite()}
	defer func() { e.seeded++ }()
	for i, tg := range []*nightloomv1.Target{
		testFixed("Thimbleweed Nebula", 101.5, 18.2), testFixed("Quillfen Galaxy", 152.0, 31.0),
		testFixed("Brackenhollow Cluster", 178.0, 46.0), testFixed("Lanternmoss Pair", 126.0, -6.0), testComet(),
	} {
		if e.seeded > 0 { // target names are unique: a second seed numbers its own
			tg.Name = fmt.Sprintf("%s %d", tg.GetName(), e.seeded+1)
		}
		ct, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: tg})
		if err != nil {
			t.Fatalf("CreateTarget %d: %v", i, err)
		}
		f.targets = append(f.targets, ct.GetTarget())
	}
	if n > 0 {
		var bs []*nightloomv1.Block
		filters := []string{"L", "R", "G", "B", "Ha"}
		for i := 0; i < n; i++ {
			bs = append(bs, testBlock(f.site.GetId(), f.targets[i%4].GetId(), filters[i%5], int32(10+i%7), int32(1+i%7)))
		}
		for len(bs) > 0 {
			k := min(len(bs), MaxBlocksPerCall)
			qr, err := e.queue.QueueBlocks(as(RoleOperator, e), &nightloomv1.QueueBlocksRequest{Blocks: bs[:k]})
			if err != nil {
				t.Fatalf("QueueBlocks: %v", err)
			}
			f.blocks = append(f.blocks, qr.GetBlocks()...)
			bs = bs[k:]
		}
	}
	return f
}

// wantCode fails unless err has the code.
func wantCode(t testing.TB, err error, want codes.Code, what string) {
	t.Helper()
	if got := status.Code(err); got != want {
		t.Fatalf("%s: code %v, want %v (err %v)", what, got, want, err)
	}
}

// violationFields lists the fields of an INVALID_ARGUMENT's BadRequest.
func violationFields(err error) []string {
	var out []string
	for _, d := range status.Convert(err).Details() {
		if br, ok := d.(*errdetails.BadRequest); ok {
			for _, f := range br.GetFieldViolations() {
				out = append(out, f.GetField())
			}
		}
	}
	return out
}

// snapshot is everything the store holds, for "nothing was written"
// checks.
type snapshot struct {
	sites, targets, blocks, plans, tokens int
	digest                                string
}

func (e *env) snapshot(t testing.TB) snapshot {
	t.Helper()
	ctx := context.Background()
	db := e.srv.Storage()
	var s snapshot
	var dig []string
	sites, _, err := db.ListSites(ctx, store.Page{Size: store.MaxPageSize})
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range sites {
		dig = append(dig, fmt.Sprintf("site %s %d %x", x.ID, x.Revision, x.Spec))
		if p, err := db.LatestPlan(ctx, x.ID); err == nil {
			s.plans += int(p.Version)
			dig = append(dig, fmt.Sprintf("plans %s %d", x.ID, p.Version))
		}
	}
	targets, _, err := db.ListTargets(ctx, store.Page{Size: store.MaxPageSize})
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range targets {
		dig = append(dig, fmt.Sprintf("target %s %d %x", x.ID, x.Revision, x.Spec))
	}
	blocks, _, err := db.ListBlocks(ctx, store.BlockFilter{}, store.Page{Size: store.MaxPageSize})
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range blocks {
		dig = append(dig, fmt.Sprintf("block %s %d %s %d", x.ID, x.Revision, x.State, x.FramesDone))
	}
	tokens, _, err := db.ListTokens(ctx, store.Page{Size: store.MaxPageSize})
	if err != nil {
		t.Fatal(err)
	}
	programs, _, err := db.ListPrograms(ctx, store.Page{Size: store.MaxPageSize})
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range programs {
		dig = append(dig, fmt.Sprintf("program %s %d %x", x.Name, x.Revision, x.Spec))
	}
	s.sites, s.targets, s.blocks, s.tokens = len(sites), len(targets), len(blocks), len(tokens)
	s.digest = fmt.Sprint(dig)
	return s
}
