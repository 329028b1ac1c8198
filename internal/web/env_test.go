package web

// The test environment: the real daemon (gRPC on loopback, a fresh SQLite
// file) loaded with the invented demo scenario of testdata/demo through the
// gRPC API, and the web handler over the same store and hub.

import (
	"bytes"
	"context"
	"log/slog"
	"net/http"
	"net/http/cookiejar"
	"net/http/httptest"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/metadata"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/store"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// testClock is a settable clock shared by the daemon and the pages.
type testClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *testClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *testClock) Set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = t
}

// syncBuffer is a log sink safe for concurrent writers.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

type env struct {
	t        testing.TB
	clock    *testClock
	db       *store.DB
	srv      *server.Server
	web      *Handler
	http     *httptest.Server
	conn     *grpc.ClientConn
	logs     *syncBuffer
	admin    string // token secrets
	viewer   string
	viewerID string
	tele     string
	site     *pb.Site
	plan     *pb.Plan
}

// demoNight is 21:30 CET on the demo's night (2027-01-14, Europe/Paris),
// while the plan runs.
var demoNight = time.Date(2027, 1, 14, 20, 30, 0, 0, time.UTC)

type envOpt func(*Config)

func newEnv(t testing.TB, opts ...envOpt) *env {
	t.Helper()
	e := &env{t: t, clock: &testClock{t: demoNight}, logs: &syncBuffer{}}
	ctx := context.Background()
	db, err := store.Open(filepath.Join(t.TempDir(), "nightloom.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	e.db = db
	t.Cleanup(func() { db.Close() })
	n := NewNotifier()
	logger := slog.New(slog.NewTextHandler(e.logs, &slog.HandlerOptions{Level: slog.LevelDebug}))
	e.srv, err = server.Start(ctx, server.Config{Listen: "127.0.0.1:0", Storage: NotifyProgress(db, n), Logger: logger,
		Now: e.clock.Now, ReplanPriority: -1})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = e.srv.Shutdown(context.Background()) })
	if e.admin, _, err = server.CreateToken(ctx, db, server.RoleAdmin, "test admin"); err != nil {
		t.Fatal(err)
	}
	var rec store.Token
	if e.viewer, rec, err = server.CreateToken(ctx, db, server.RoleViewer, "test viewer"); err != nil {
		t.Fatal(err)
	}
	e.viewerID = rec.ID
	if e.tele, _, err = server.CreateToken(ctx, db, server.RoleTelescope, "test telescope"); err != nil {
		t.Fatal(err)
	}
	cfg := Config{Store: NotifyProgress(db, n), Sky: e.srv.Sky(), Plans: e.srv, Progress: n, Now: e.clock.Now,
		Logger: logger, SessionCheck: 200 * time.Millisecond}
	for _, o := range opts {
		o(&cfg)
	}
	if e.web, err = New(cfg); err != nil {
		t.Fatal(err)
	}
	e.http = httptest.NewServer(e.web)
	t.Cleanup(func() { e.web.Close(); e.http.Close() })
	e.conn, err = grpc.NewClient(e.srv.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { e.conn.Close() })
	return e
}

// ctx is a call context with a token.
func (e *env) ctx(token string) context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	e.t.Cleanup(cancel)
	return metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer "+token)
}

// readDemo reads a request message from testdata/demo.
func readDemo(t testing.TB, name string, m proto.Message) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "demo", name))
	if err != nil {
		t.Fatal(err)
	}
	if err := protojson.Unmarshal(b, m); err != nil {
		t.Fatalf("%s: %v", name, err)
	}
}

// loadDemo stores the demo scenario through the API (targetNames renames
// targets by their demo name) and makes the plan of 2027-01-14.
func (e *env) loadDemo(targetNames map[string]string) {
	t := e.t
	t.Helper()
	ctx := e.ctx(e.admin)
	sreq := &pb.CreateSiteRequest{}
	readDemo(t, "site.json", sreq)
	sr, err := pb.NewSiteServiceClient(e.conn).CreateSite(ctx, sreq)
	if err != nil {
		t.Fatal(err)
	}
	e.site = sr.GetSite()
	files, err := filepath.Glob(filepath.Join("..", "..", "testdata", "demo", "targets", "*.json"))
	if err != nil || len(files) == 0 {
		t.Fatalf("demo targets: %v (%d files)", err, len(files))
	}
	ids := map[string]string{}
	for _, f := range files {
		treq := &pb.CreateTargetRequest{}
		readDemo(t, filepath.Join("targets", filepath.Base(f)), treq)
		name := treq.GetTarget().GetName()
		if n, ok := targetNames[name]; ok {
			treq.Target.Name = n
		}
		tr, err := pb.NewTargetServiceClient(e.conn).CreateTarget(ctx, treq)
		if err != nil {
			t.Fatal(err)
		}
		ids["@"+name] = tr.GetTarget().GetId()
	}
	// The comet, from its one-line orbital elements.
	text, err := os.ReadFile(filepath.Join("..", "..", "testdata", "demo", "comet-elements.txt"))
	if err != nil {
		t.Fatal(err)
	}
	ir, err := pb.NewTargetServiceClient(e.conn).ImportElements(ctx, &pb.ImportElementsRequest{RequestId: "web-demo-comet", Text: string(text)})
	if err != nil {
		t.Fatal(err)
	}
	for _, tg := range ir.GetTargets() {
		name := tg.GetName()
		if n, ok := targetNames[name]; ok {
			name = n
		}
		ids["@"+tg.GetName()] = tg.GetId()
	}
	// The demo's real objects, created by catalogue name (the server
	// resolves catalogue_id and fills the place).
	names, err := os.ReadFile(filepath.Join("..", "..", "testdata", "demo", "targets-by-name.txt"))
	if err != nil {
		t.Fatal(err)
	}
	for _, line := range strings.Split(string(names), "\n") {
		name := strings.TrimSpace(line)
		if name == "" || strings.HasPrefix(name, "#") {
			continue
		}
		tr, err := pb.NewTargetServiceClient(e.conn).CreateTarget(ctx, &pb.CreateTargetRequest{Target: &pb.Target{Name: name,
			Position: &pb.Target_Fixed{Fixed: &pb.FixedPosition{CatalogueId: name}}}})
		if err != nil {
			t.Fatal(err)
		}
		ids["@"+name] = tr.GetTarget().GetId()
	}
	breq := &pb.QueueBlocksRequest{}
	readDemo(t, "blocks.json", breq)
	for _, b := range breq.GetBlocks() {
		b.SiteId = e.site.GetId()
		if id, ok := ids[b.GetTargetId()]; ok {
			b.TargetId = id
		}
	}
	if _, err := pb.NewQueueServiceClient(e.conn).QueueBlocks(ctx, breq); err != nil {
		t.Fatal(err)
	}
	preq := &pb.MakePlanRequest{}
	readDemo(t, "plan.json", preq)
	preq.SiteId = e.site.GetId()
	preq.TimeBudget = durationpb.New(200 * time.Millisecond)
	mr, err := pb.NewPlanServiceClient(e.conn).MakePlan(ctx, preq)
	if err != nil {
		t.Fatal(err)
	}
	e.plan = mr.GetPlans()[0]
}

// client is an HTTP client with a cookie jar that does not follow
// redirects.
func (e *env) client() *http.Client {
	jar, _ := cookiejar.New(nil)
	return &http.Client{Jar: jar, Timeout: 30 * time.Second,
		CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
}

// signIn signs a client in with a token and returns the response of the
// POST.
func (e *env) signIn(c *http.Client, token string) *http.Response {
	e.t.Helper()
	resp, err := c.Get(e.http.URL + "/signin")
	if err != nil {
		e.t.Fatal(err)
	}
	body := readAll(e.t, resp)
	csrf := between(body, `name="csrf" value="`, `"`)
	if csrf == "" {
		e.t.Fatalf("no CSRF field in the sign-in form:\n%s", body)
	}
	resp, err = c.PostForm(e.http.URL+"/signin", url.Values{"csrf": {csrf}, "token": {token}, "next": {"/"}})
	if err != nil {
		e.t.Fatal(err)
	}
	return resp
}

func readAll(t testing.TB, resp *http.Response) string {
	t.Helper()
	defer resp.Body.Close()
	var b bytes.Buffer
	if _, err := b.ReadFrom(resp.Body); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

func between(s, a, b string) string {
	i := strings.Index(s, a)
	if i < 0 {
		return ""
	}
	s = s[i+len(a):]
	j := strings.Index(s, b)
	if j < 0 {
		return ""
	}
	return s[:j]
}

// replanDemo replans the demo night from 22:00 + i minutes through the API.
func (e *env) replanDemo(t testing.TB, i int) *pb.Plan {
	t.Helper()
	from := demoNight.Add(30*time.Minute + time.Duration(i)*time.Minute)
	rr, err := pb.NewPlanServiceClient(e.conn).Replan(e.ctx(e.admin), &pb.ReplanRequest{SiteId: e.site.GetId(),
		From: timestamppb.New(from), TimeBudget: durationpb.New(50 * time.Millisecond)})
	if err != nil {
		t.Fatal(err)
	}
	return rr.GetPlan()
}
