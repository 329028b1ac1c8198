package server

// Issue 14: tokens that expire, tokens held to one site, streams that end
// when their token is revoked, a shutdown that does not wait for health
// watchers, and refusals logged with the token's id.

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	reflectionpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/descriptorpb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Limits asked for by issue 14.
const (
	maxRevokeToStreamEnd = 5 * time.Second
	maxIdleShutdown      = time.Second
)

func TestTokenExpiry(t *testing.T) {
	e := newEnv(t, "")
	const ttl = 400 * time.Millisecond
	secret, rec, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: RoleViewer, Label: "short", TTL: ttl})
	if err != nil {
		t.Fatal(err)
	}
	if rec.ExpiresAt == nil {
		t.Fatalf("token made with a TTL has no expiry: %+v", rec)
	}
	if _, err := e.sites.ListSites(withToken(context.Background(), secret), &nightloomv1.ListSitesRequest{}); err != nil {
		t.Fatalf("before expiry: %v", err)
	}
	time.Sleep(time.Until(*rec.ExpiresAt) + 50*time.Millisecond)
	_, err = e.sites.ListSites(withToken(context.Background(), secret), &nightloomv1.ListSitesRequest{})
	if status.Code(err) != codes.Unauthenticated {
		t.Fatalf("after expiry: %v, want UNAUTHENTICATED", err)
	}
	if _, _, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: RoleViewer, TTL: -time.Second}); err == nil {
		t.Fatal("a negative TTL was accepted")
	}
}

// TestTokenSiteScope: a token held to site A reaches A's site, blocks,
// plans and sky, and is refused B's, directly or through a block or plan id;
// Lists are narrowed to A; sites cannot be created nor targets changed.
func TestTokenSiteScope(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.ReplanPriority = -1 })
	a := e.seed(t, 3)
	b := e.seed(t, 3)
	siteA, siteB := a.site.GetId(), b.site.GetId()
	mk := func(site string) *nightloomv1.Plan {
		r, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: site,
			Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetPlans()[0]
	}
	planA, planB := mk(siteA), mk(siteB)

	held := map[Role]string{}
	for _, r := range []Role{RoleOperator, RoleAdmin} {
		secret, _, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: r, SiteID: siteA})
		if err != nil {
			t.Fatal(err)
		}
		held[r] = secret
	}
	op := withToken(context.Background(), held[RoleOperator])
	adm := withToken(context.Background(), held[RoleAdmin])
	programs := nightloomv1.NewProgramServiceClient(e.conn)
	for _, p := range []*nightloomv1.Program{testProgram("club", time.Hour), testProgram("thesis-a", time.Hour), testProgram("thesis-b", time.Hour)} {
		switch p.GetName() {
		case "thesis-a":
			p.SiteId = siteA
		case "thesis-b":
			p.SiteId = siteB
		}
		if _, err := programs.CreateProgram(e.admin(), &nightloomv1.CreateProgramRequest{Program: p}); err != nil {
			t.Fatal(err)
		}
	}

	cases := []struct {
		name string
		call func() error
		want codes.Code
	}{
		{"GetSite own", func() error { _, err := e.sites.GetSite(op, &nightloomv1.GetSiteRequest{SiteId: siteA}); return err }, codes.OK},
		{"GetSite other", func() error { _, err := e.sites.GetSite(op, &nightloomv1.GetSiteRequest{SiteId: siteB}); return err }, codes.PermissionDenied},
		{"CreateSite", func() error {
			_, err := e.sites.CreateSite(adm, &nightloomv1.CreateSiteRequest{Site: testSite()})
			return err
		}, codes.PermissionDenied},
		{"DeleteSite other", func() error {
			_, err := e.sites.DeleteSite(adm, &nightloomv1.DeleteSiteRequest{SiteId: siteB})
			return err
		}, codes.PermissionDenied},
		{"CreateTarget", func() error {
			_, err := e.targets.CreateTarget(adm, &nightloomv1.CreateTargetRequest{Target: testFixed("Held Nebula", 10, 10)})
			return err
		}, codes.PermissionDenied},
		{"GetTarget", func() error {
			_, err := e.targets.GetTarget(op, &nightloomv1.GetTargetRequest{TargetId: b.targets[0].GetId()})
			return err
		}, codes.OK},
		{"GetBlock own", func() error {
			_, err := e.queue.GetBlock(op, &nightloomv1.GetBlockRequest{BlockId: a.blocks[0].GetId()})
			return err
		}, codes.OK},
		{"GetBlock other", func() error {
			_, err := e.queue.GetBlock(op, &nightloomv1.GetBlockRequest{BlockId: b.blocks[0].GetId()})
			return err
		}, codes.PermissionDenied},
		{"WithdrawBlock other", func() error {
			_, err := e.queue.WithdrawBlock(op, &nightloomv1.WithdrawBlockRequest{BlockId: b.blocks[1].GetId()})
			return err
		}, codes.PermissionDenied},
		{"QueueBlocks other", func() error {
			_, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{
				testBlock(siteB, b.targets[0].GetId(), "L", 5, 3)}})
			return err
		}, codes.PermissionDenied},
		{"GetPlan own", func() error {
			_, err := e.plans.GetPlan(op, &nightloomv1.GetPlanRequest{PlanId: planA.GetId()})
			return err
		}, codes.OK},
		{"GetPlan other", func() error {
			_, err := e.plans.GetPlan(op, &nightloomv1.GetPlanRequest{PlanId: planB.GetId()})
			return err
		}, codes.PermissionDenied},
		{"NextAssignment other", func() error {
			_, err := e.plans.NextAssignment(op, &nightloomv1.NextAssignmentRequest{SiteId: siteB})
			return err
		}, codes.PermissionDenied},
		{"Night other", func() error {
			_, err := e.sky.Night(op, &nightloomv1.NightRequest{SiteId: siteB, Date: testNight})
			return err
		}, codes.PermissionDenied},
		{"Night own", func() error {
			_, err := e.sky.Night(op, &nightloomv1.NightRequest{SiteId: siteA, Date: testNight})
			return err
		}, codes.OK},
		{"WatchPlans other", func() error {
			st, err := e.plans.WatchPlans(op, &nightloomv1.WatchPlansRequest{SiteId: siteB, SendCurrent: true})
			if err != nil {
				return err
			}
			_, err = st.Recv()
			return err
		}, codes.PermissionDenied},
		{"WatchPlans own", func() error {
			ctx, cancel := context.WithCancel(op)
			defer cancel()
			st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: siteA, SendCurrent: true})
			if err != nil {
				return err
			}
			_, err = st.Recv()
			return err
		}, codes.OK},
		{"GetProgram open to every site", func() error {
			_, err := programs.GetProgram(op, &nightloomv1.GetProgramRequest{Name: "club"})
			return err
		}, codes.OK},
		{"GetProgram held to its site", func() error {
			_, err := programs.GetProgram(op, &nightloomv1.GetProgramRequest{Name: "thesis-a"})
			return err
		}, codes.OK},
		{"GetProgram held to another site", func() error {
			_, err := programs.GetProgram(op, &nightloomv1.GetProgramRequest{Name: "thesis-b"})
			return err
		}, codes.PermissionDenied},
		{"CreateProgram", func() error {
			_, err := programs.CreateProgram(adm, &nightloomv1.CreateProgramRequest{Program: testProgram("held", time.Hour)})
			return err
		}, codes.PermissionDenied},
		{"DeleteProgram", func() error {
			_, err := programs.DeleteProgram(adm, &nightloomv1.DeleteProgramRequest{Name: "thesis-a"})
			return err
		}, codes.PermissionDenied},
		{"GetProgramUsage other", func() error {
			_, err := programs.GetProgramUsage(op, &nightloomv1.GetProgramUsageRequest{SiteId: siteB})
			return err
		}, codes.PermissionDenied},
	}
	for _, c := range cases {
		if got := status.Code(c.call()); got != c.want {
			t.Errorf("%s: code %v, want %v", c.name, got, c.want)
		}
	}

	ls, err := e.sites.ListSites(op, &nightloomv1.ListSitesRequest{})
	if err != nil || len(ls.GetSites()) != 1 || ls.GetSites()[0].GetId() != siteA {
		t.Errorf("ListSites of a held token: %v sites, err %v; want site A alone", len(ls.GetSites()), err)
	}
	lb, err := e.queue.ListBlocks(op, &nightloomv1.ListBlocksRequest{})
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range lb.GetBlocks() {
		if x.GetSiteId() != siteA {
			t.Errorf("ListBlocks of a held token lists block %s of site %s", x.GetId(), x.GetSiteId())
		}
	}
	if len(lb.GetBlocks()) != len(a.blocks) {
		t.Errorf("ListBlocks of a held token: %d blocks, want %d", len(lb.GetBlocks()), len(a.blocks))
	}
	lp, err := programs.ListPrograms(op, &nightloomv1.ListProgramsRequest{})
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, p := range lp.GetPrograms() {
		names = append(names, p.GetName())
	}
	if strings.Join(names, ",") != "club,thesis-a" {
		t.Errorf("ListPrograms of a held token: %v, want [club thesis-a]", names)
	}
	u, err := programs.GetProgramUsage(op, &nightloomv1.GetProgramUsageRequest{})
	if err != nil || len(u.GetUsage()) != 2 {
		t.Errorf("GetProgramUsage of a held token: %d programs, err %v; want club and thesis-a", len(u.GetUsage()), err)
	}
}

// TestRevokeEndsWatch: a WatchPlans stream of a token revoked meanwhile
// ends with UNAUTHENTICATED within maxRevokeToStreamEnd.
func TestRevokeEndsWatch(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	secret, rec, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: RoleTelescope, Label: "dome"})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(withToken(context.Background(), secret), 30*time.Second)
	defer cancel()
	st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: f.site.GetId()})
	if err != nil {
		t.Fatal(err)
	}
	// Wait until the stream is open on the server (the guard holds it).
	for deadline := time.Now().Add(10 * time.Second); e.srv.guard.open() == 0; {
		if time.Now().After(deadline) {
			t.Fatal("the stream never reached the guard")
		}
		time.Sleep(5 * time.Millisecond)
	}
	revoked := time.Now()
	if _, err := e.srv.Storage().RevokeToken(t.Context(), rec.ID); err != nil {
		t.Fatal(err)
	}
	_, err = st.Recv()
	took := time.Since(revoked)
	if status.Code(err) != codes.Unauthenticated {
		t.Fatalf("stream ended with %v, want UNAUTHENTICATED", err)
	}
	if took > maxRevokeToStreamEnd {
		t.Fatalf("stream ended %v after the revocation, want within %v", took, maxRevokeToStreamEnd)
	}
	t.Logf("revocation to end of stream: %v (recheck every %v)", took.Round(time.Millisecond), tokenRecheckInterval)
}

// TestShutdownWithPublicStreams: a connected health watcher and an open
// reflection stream do not hold the shutdown.
func TestShutdownWithPublicStreams(t *testing.T) {
	e := newEnv(t, "")
	hw, err := healthpb.NewHealthClient(e.conn).Watch(context.Background(), &healthpb.HealthCheckRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if r, err := hw.Recv(); err != nil || r.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Fatalf("health watch: %v %v", r, err)
	}
	rs, err := reflectionpb.NewServerReflectionClient(e.conn).ServerReflectionInfo(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if err := rs.Send(&reflectionpb.ServerReflectionRequest{MessageRequest: &reflectionpb.ServerReflectionRequest_ListServices{}}); err != nil {
		t.Fatal(err)
	}
	if _, err := rs.Recv(); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	if err := e.srv.Shutdown(context.Background()); err != nil {
		t.Fatal(err)
	}
	took := time.Since(start)
	if took > maxIdleShutdown {
		t.Fatalf("shutdown with a health watcher and a reflection stream took %v, want under %v", took, maxIdleShutdown)
	}
	t.Logf("shutdown with a health watcher and a reflection stream: %v", took.Round(time.Millisecond))
}

// TestRefusalLoggedWithTokenID: a call refused for its role or its site is
// logged with the token's id, never its secret.
func TestRefusalLoggedWithTokenID(t *testing.T) {
	var logs syncBuffer
	e := newEnv(t, "", func(c *Config) { c.Logger = slog.New(slog.NewTextHandler(&logs, nil)) })
	f := e.seed(t, 0)
	secret, rec, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: RoleViewer})
	if err != nil {
		t.Fatal(err)
	}
	_, err = e.sites.DeleteSite(withToken(context.Background(), secret), &nightloomv1.DeleteSiteRequest{SiteId: f.site.GetId()})
	if status.Code(err) != codes.PermissionDenied {
		t.Fatalf("viewer deleting a site: %v", err)
	}
	held, hrec, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: RoleViewer, SiteID: "site-elsewhere"})
	if err != nil {
		t.Fatal(err)
	}
	_, err = e.sites.GetSite(withToken(context.Background(), held), &nightloomv1.GetSiteRequest{SiteId: f.site.GetId()})
	if status.Code(err) != codes.PermissionDenied {
		t.Fatalf("held token reading another site: %v", err)
	}
	out := logs.String()
	for _, c := range []struct{ id, method string }{{rec.ID, "DeleteSite"}, {hrec.ID, "GetSite"}} {
		found := false
		for _, line := range strings.Split(out, "\n") {
			if strings.Contains(line, "code=PermissionDenied") && strings.Contains(line, c.method) && strings.Contains(line, "token_id="+c.id) {
				found = true
			}
		}
		if !found {
			t.Errorf("no refusal line for %s with token_id=%s in the log:\n%s", c.method, c.id, out)
		}
	}
	for _, s := range []string{secret, held} {
		for _, w := range secretWindows(s, 16) {
			if strings.Contains(out, w) {
				t.Fatalf("the log holds part of a secret")
			}
		}
	}
}

func TestKeyFileWarning(t *testing.T) {
	dir := t.TempDir()
	for _, c := range []struct {
		mode os.FileMode
		warn bool
	}{{0o600, false}, {0o400, false}, {0o640, true}, {0o644, true}, {0o604, true}} {
		p := filepath.Join(dir, fmt.Sprintf("key-%o.pem", c.mode))
		if err := os.WriteFile(p, []byte("not a key"), c.mode); err != nil {
			t.Fatal(err)
		}
		if err := os.Chmod(p, c.mode); err != nil { // the umask may have narrowed it
			t.Fatal(err)
		}
		if got := KeyFileWarning(p) != ""; got != c.warn {
			t.Errorf("mode %04o: warning %v, want %v (%q)", c.mode, got, c.warn, KeyFileWarning(p))
		}
	}
}

// TestReflectionCarriesComments: a reflection client (grpc_reflection_v1)
// asks for the file that defines QueueService and reads the Block message's
// comments from its source info: the unit and range of exposure.
func TestReflectionCarriesComments(t *testing.T) {
	e := newEnv(t, "")
	st, err := reflectionpb.NewServerReflectionClient(e.conn).ServerReflectionInfo(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if err := st.Send(&reflectionpb.ServerReflectionRequest{MessageRequest: &reflectionpb.ServerReflectionRequest_FileContainingSymbol{
		FileContainingSymbol: "nightloom.v1.QueueService"}}); err != nil {
		t.Fatal(err)
	}
	r, err := st.Recv()
	if err != nil {
		t.Fatal(err)
	}
	var found string
	for _, raw := range r.GetFileDescriptorResponse().GetFileDescriptorProto() {
		var fd descriptorpb.FileDescriptorProto
		if err := proto.Unmarshal(raw, &fd); err != nil {
			t.Fatal(err)
		}
		if fd.GetName() != "nightloom/v1/queue.proto" {
			continue
		}
		// Path [4, i, 2, j]: message i, field j.
		for mi, m := range fd.GetMessageType() {
			if m.GetName() != "Block" {
				continue
			}
			for fi, f := range m.GetField() {
				if f.GetName() != "exposure" {
					continue
				}
				for _, loc := range fd.GetSourceCodeInfo().GetLocation() {
					if slices.Equal(loc.GetPath(), []int32{4, int32(mi), 2, int32(fi)}) {
						found = loc.GetLeadingComments()
					}
				}
			}
		}
	}
	if !strings.Contains(found, "Length of one exposure") || !strings.Contains(found, "1 h") {
		t.Fatalf("Block.exposure's comment over reflection: %q", found)
	}
}

// TestStandardGRPCMetrics: the go-grpc-middleware Prometheus provider's
// series appear beside ours on /metrics, with the usual labels; a stream
// is timed there (grpc_type="server_stream") and not in our unary latency.
func TestStandardGRPCMetrics(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.MetricsAddr = "127.0.0.1:0" })
	f := e.seed(t, 0)
	ctx, cancel := context.WithCancel(as(RoleViewer, e))
	st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: f.site.GetId()})
	if err != nil {
		t.Fatal(err)
	}
	waitWatchers(t, e, 1)
	cancel()
	_, _ = st.Recv()
	_, _ = e.sites.GetSite(as(RoleViewer, e), &nightloomv1.GetSiteRequest{SiteId: "site-nonesuch"})
	var text string
	for deadline := time.Now().Add(5 * time.Second); ; {
		resp, err := http.Get("http://" + e.srv.MetricsAddr().String() + "/metrics")
		if err != nil {
			t.Fatal(err)
		}
		body, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		text = string(body)
		if strings.Contains(text, `grpc_server_handled_total{grpc_code="Canceled",grpc_method="WatchPlans"`) || time.Now().After(deadline) {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	for _, want := range []string{
		`grpc_server_started_total{grpc_method="GetSite",grpc_service="nightloom.v1.SiteService",grpc_type="unary"} 1`,
		`grpc_server_handled_total{grpc_code="NotFound",grpc_method="GetSite",grpc_service="nightloom.v1.SiteService",grpc_type="unary"} 1`,
		`grpc_server_handling_seconds_count{grpc_method="GetSite",grpc_service="nightloom.v1.SiteService",grpc_type="unary"} 1`,
		`grpc_server_handled_total{grpc_code="Canceled",grpc_method="WatchPlans",grpc_service="nightloom.v1.PlanService",grpc_type="server_stream"} 1`,
		`grpc_server_handling_seconds_count{grpc_method="WatchPlans",grpc_service="nightloom.v1.PlanService",grpc_type="server_stream"} 1`,
		`nightloom_rpc_requests_total{code="NotFound",method="/nightloom.v1.SiteService/GetSite"} 1`,
	} {
		if !strings.Contains(text, want) {
			t.Errorf("metrics lack %q", want)
		}
	}
	if strings.Contains(text, `nightloom_rpc_duration_seconds_count{code="Canceled",method="/nightloom.v1.PlanService/WatchPlans"}`) {
		t.Error("a stream is still timed in the unary latency histogram")
	}
}

// TestAccessLog: one record per call at INFO by default, with method, code,
// duration in milliseconds, peer and token id; AccessLogOff silences the
// successful ones but not the refusals.
func TestAccessLog(t *testing.T) {
	for _, c := range []struct {
		name   string
		level  slog.Level
		wantOK bool
	}{{"default", 0, true}, {"off", AccessLogOff, false}} {
		var logs syncBuffer
		e := newEnv(t, "", func(cfg *Config) {
			cfg.Logger = slog.New(slog.NewJSONHandler(&logs, nil))
			cfg.AccessLogLevel = c.level
		})
		secret, rec, err := CreateTokenSpec(t.Context(), e.srv.Storage(), TokenSpec{Role: RoleViewer})
		if err != nil {
			t.Fatal(err)
		}
		ctx := withToken(context.Background(), secret)
		if _, err := e.sites.ListSites(ctx, &nightloomv1.ListSitesRequest{}); err != nil {
			t.Fatal(err)
		}
		_, _ = e.sites.DeleteSite(ctx, &nightloomv1.DeleteSiteRequest{SiteId: "site-x"})
		var ok, refused int
		for _, line := range strings.Split(strings.TrimSpace(logs.String()), "\n") {
			var r map[string]any
			if json.Unmarshal([]byte(line), &r) != nil || r["msg"] != "rpc" {
				continue
			}
			if r["token_id"] != rec.ID || r["peer"] == nil || r["level"] != "INFO" {
				t.Errorf("%s: record %v lacks token_id %s, peer or INFO", c.name, r, rec.ID)
			}
			if _, isNum := r["duration_ms"].(float64); !isNum {
				t.Errorf("%s: duration_ms %v is not a number", c.name, r["duration_ms"])
			}
			switch r["code"] {
			case "OK":
				ok++
			case "PermissionDenied":
				refused++
			}
		}
		if want := map[bool]int{true: 1, false: 0}[c.wantOK]; ok != want || refused != 1 {
			t.Errorf("%s: %d OK records (want %d), %d refusals (want 1)\n%s", c.name, ok, want, refused, logs.String())
		}
	}
}
