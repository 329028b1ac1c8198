package server

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"io"
	"math/big"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestRestartKeepsEverything stops the daemon and starts it again on the
// same database file: sites, targets, blocks with their progress, plans
// and tokens are all there, and plan versions continue.
func TestRestartKeepsEverything(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "nightloom.db")
	e := newEnv(t, path, withTCP())
	f := e.seed(t, 6)
	tokens := e.tokens
	mk, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0)})
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2031, 3, 15, 22, 0, 0, 0, time.UTC)
	e.clock.Set(t0.Add(time.Hour)) // the report comes after its run
	rp, err := e.queue.ReportProgress(as(RoleTelescope, e), &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
		ReportId: "restart-1", BlockId: f.blocks[1].GetId(), FramesKept: 4,
		Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(10 * time.Minute))}, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
	if err != nil {
		t.Fatal(err)
	}
	before := e.snapshot(t)
	e.close()

	e2 := newEnv(t, path, withTCP())
	e2.tokens = tokens // the first run's tokens must still work
	if after := e2.snapshot(t); after.digest != before.digest || after.tokens != before.tokens+len(Roles) {
		t.Fatalf("after restart:\n%+v\nbefore:\n%+v", after, before)
	}
	g, err := e2.sites.GetSite(as(RoleViewer, e2), &nightloomv1.GetSiteRequest{SiteId: f.site.GetId()})
	if err != nil || !proto.Equal(g.GetSite(), f.site) {
		t.Fatalf("site after restart: %v %v", g, err)
	}
	gb, err := e2.queue.GetBlock(as(RoleTelescope, e2), &nightloomv1.GetBlockRequest{BlockId: f.blocks[1].GetId()})
	if err != nil || !proto.Equal(gb.GetBlock(), rp.GetBlock()) {
		t.Fatalf("block after restart: %v %v, want %v", gb, err, rp.GetBlock())
	}
	gp, err := e2.plans.GetPlan(as(RoleTelescope, e2), &nightloomv1.GetPlanRequest{PlanId: mk.GetPlans()[0].GetId()})
	if err != nil || !proto.Equal(gp.GetPlan(), mk.GetPlans()[0]) {
		t.Fatalf("plan after restart: %v", err)
	}
	e2.clock.Set(t0.Add(time.Hour))
	dup, err := e2.queue.ReportProgress(as(RoleTelescope, e2), &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
		ReportId: "restart-1", BlockId: f.blocks[1].GetId(), FramesKept: 4,
		Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(10 * time.Minute))}, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
	if err != nil || !dup.GetDuplicate() || dup.GetBlock().GetFramesDone() != 4 {
		t.Fatalf("retried report after restart: %v %v", dup, err)
	}
	mk2, err := e2.plans.MakePlan(as(RoleOperator, e2), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0)})
	if err != nil || mk2.GetPlans()[0].GetVersion() != 2 {
		t.Fatalf("plan after restart: %v %v, want version 2", mk2, err)
	}
}

// TestPlaintextListenRule: plaintext gRPC only on loopback unless
// InsecureListen (or TLS) says otherwise.
func TestPlaintextListenRule(t *testing.T) {
	cases := []struct {
		addr          string
		tls, insecure bool
		wantErr       bool
	}{
		{"127.0.0.1:7878", false, false, false},
		{"127.3.4.5:7878", false, false, false},
		{"[::1]:7878", false, false, false},
		{"localhost:7878", false, false, false},
		{"0.0.0.0:7878", false, false, true},
		{":7878", false, false, true},
		{"[::]:7878", false, false, true},
		{"192.0.2.10:7878", false, false, true}, // TEST-NET-1 (RFC 5737), never dialled
		{"observatory.example:7878", false, false, true},
		{"0.0.0.0:7878", true, false, false},
		{"0.0.0.0:7878", false, true, false},
	}
	for _, c := range cases {
		err := CheckListen(c.addr, c.tls, c.insecure)
		if (err != nil) != c.wantErr || (err != nil && !errors.Is(err, ErrInsecureListen)) {
			t.Errorf("CheckListen(%q, tls=%v, insecure=%v) = %v, want error %v", c.addr, c.tls, c.insecure, err, c.wantErr)
		}
	}
	// Start refuses before binding anything or opening the database.
	db := filepath.Join(t.TempDir(), "never.db")
	_, err := Start(context.Background(), Config{Listen: "0.0.0.0:0", DBPath: db, Logger: quietLogger(t)})
	if !errors.Is(err, ErrInsecureListen) {
		t.Fatalf("Start on 0.0.0.0 in plaintext: %v, want ErrInsecureListen", err)
	}
	if _, err := os.Stat(db); !os.IsNotExist(err) {
		t.Errorf("the refused start created the database (%v)", err)
	}
}

// pki is a CA with a server and a client certificate, made in the test.
type pki struct {
	dir                       string
	caFile, certFile, keyFile string
	clientCert                tls.Certificate
	otherClient               tls.Certificate // signed by another CA
	pool                      *x509.CertPool
}

func newPKI(t *testing.T) *pki {
	t.Helper()
	dir := t.TempDir()
	p := &pki{dir: dir}
	ca, caKey := selfSigned(t, "Hollowmere test CA")
	other, otherKey := selfSigned(t, "Someone else's CA")
	p.pool = x509.NewCertPool()
	p.pool.AddCert(ca)
	p.caFile = writePEM(t, dir, "ca.pem", "CERTIFICATE", ca.Raw)
	srvDER, srvKey := leaf(t, ca, caKey, "nightloomd", true)
	p.certFile = writePEM(t, dir, "server.pem", "CERTIFICATE", srvDER)
	keyDER, err := x509.MarshalECPrivateKey(srvKey)
	if err != nil {
		t.Fatal(err)
	}
	p.keyFile = writePEM(t, dir, "server.key", "EC PRIVATE KEY", keyDER)
	cliDER, cliKey := leaf(t, ca, caKey, "telescope-1", false)
	p.clientCert = tls.Certificate{Certificate: [][]byte{cliDER}, PrivateKey: cliKey}
	oDER, oKey := leaf(t, other, otherKey, "intruder", false)
	p.otherClient = tls.Certificate{Certificate: [][]byte{oDER}, PrivateKey: oKey}
	return p
}

func selfSigned(t *testing.T, cn string) (*x509.Certificate, *ecdsa.PrivateKey) {
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: cn},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IsCA: true, BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign | x509.KeyUsageDigitalSignature}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	c, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatal(err)
	}
	return c, key
}

func leaf(t *testing.T, ca *x509.Certificate, caKey *ecdsa.PrivateKey, cn string, server bool) ([]byte, *ecdsa.PrivateKey) {
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	serial, _ := rand.Int(rand.Reader, big.NewInt(1<<62))
	tmpl := &x509.Certificate{SerialNumber: serial, Subject: pkix.Name{CommonName: cn},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour), KeyUsage: x509.KeyUsageDigitalSignature}
	if server {
		tmpl.ExtKeyUsage = []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}
		tmpl.IPAddresses = []net.IP{net.ParseIP("127.0.0.1")}
		tmpl.DNSNames = []string{"localhost"}
	} else {
		tmpl.ExtKeyUsage = []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth}
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, ca, &key.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	return der, key
}

func writePEM(t *testing.T, dir, name, typ string, der []byte) string {
	path := filepath.Join(dir, name)
	if err := os.WriteFile(path, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	return path
}

// startTLS runs a daemon on a loopback port with TLS (and mutual TLS when
// clientCA is set) and returns it with an admin token.
func startTLS(t *testing.T, p *pki, mutual bool) (*Server, string) {
	t.Helper()
	cfg := Config{Listen: "127.0.0.1:0", DBPath: filepath.Join(t.TempDir(), "tls.db"), Logger: quietLogger(t),
		TLSCertFile: p.certFile, TLSKeyFile: p.keyFile}
	if mutual {
		cfg.ClientCAFile = p.caFile
	}
	srv, err := Start(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Shutdown(context.Background()) })
	tok, _, err := srv.CreateToken(context.Background(), RoleAdmin, "tls test")
	if err != nil {
		t.Fatal(err)
	}
	return srv, tok
}

// listSites calls ListSites over a fresh connection with the given
// transport credentials.
func listSites(t *testing.T, addr string, creds credentials.TransportCredentials, token string) error {
	conn, err := grpc.NewClient(addr, grpc.WithTransportCredentials(creds))
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	ctx = metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer "+token)
	_, err = nightloomv1.NewSiteServiceClient(conn).ListSites(ctx, &nightloomv1.ListSitesRequest{})
	return err
}

func TestTLSEndToEnd(t *testing.T) {
	p := newPKI(t)
	srv, tok := startTLS(t, p, false)
	addr := srv.Addr().String()
	good := credentials.NewTLS(&tls.Config{RootCAs: p.pool, ServerName: "127.0.0.1", MinVersion: tls.VersionTLS12})
	if err := listSites(t, addr, good, tok); err != nil {
		t.Fatalf("ListSites over TLS: %v", err)
	}
	if err := listSites(t, addr, insecure.NewCredentials(), tok); status.Code(err) != codes.Unavailable {
		t.Errorf("plaintext client to a TLS server: %v, want Unavailable", err)
	}
	untrusting := credentials.NewTLS(&tls.Config{RootCAs: x509.NewCertPool(), ServerName: "127.0.0.1", MinVersion: tls.VersionTLS12})
	if err := listSites(t, addr, untrusting, tok); status.Code(err) != codes.Unavailable {
		t.Errorf("client that does not trust the CA: %v, want Unavailable", err)
	}
	if err := listSites(t, addr, good, "nlt_wrong"); status.Code(err) != codes.Unauthenticated {
		t.Errorf("TLS with a wrong token: %v, want Unauthenticated", err)
	}
}

func TestMutualTLSEndToEnd(t *testing.T) {
	p := newPKI(t)
	srv, tok := startTLS(t, p, true)
	addr := srv.Addr().String()
	withCert := func(c *tls.Certificate) credentials.TransportCredentials {
		cfg := &tls.Config{RootCAs: p.pool, ServerName: "127.0.0.1", MinVersion: tls.VersionTLS12}
		if c != nil {
			cfg.Certificates = []tls.Certificate{*c}
		}
		return credentials.NewTLS(cfg)
	}
	if err := listSites(t, addr, withCert(&p.clientCert), tok); err != nil {
		t.Fatalf("ListSites with a client certificate: %v", err)
	}
	if err := listSites(t, addr, withCert(nil), tok); status.Code(err) != codes.Unavailable {
		t.Errorf("without a client certificate: %v, want Unavailable", err)
	}
	if err := listSites(t, addr, withCert(&p.otherClient), tok); status.Code(err) != codes.Unavailable {
		t.Errorf("with a certificate of another CA: %v, want Unavailable", err)
	}
	// mutual TLS does not replace tokens.
	if err := listSites(t, addr, withCert(&p.clientCert), ""); status.Code(err) != codes.Unauthenticated {
		t.Errorf("client certificate without a token: %v, want Unauthenticated", err)
	}
	// --client-ca needs TLS.
	_, err := Start(context.Background(), Config{Listen: "127.0.0.1:0", DBPath: filepath.Join(t.TempDir(), "x.db"), ClientCAFile: p.caFile, Logger: quietLogger(t)})
	if err == nil {
		t.Error("Start with --client-ca and no certificate succeeded")
	}
}

// TestMetricsEndpoint: request counts per method and code, the queue size
// and the solve time appear on the metrics listener.
func TestMetricsEndpoint(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.MetricsAddr = "127.0.0.1:0" })
	f := e.seed(t, 3)
	if _, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0)}); err != nil {
		t.Fatal(err)
	}
	_, _ = e.sites.GetSite(as(RoleViewer, e), &nightloomv1.GetSiteRequest{SiteId: "site-nonesuch"})
	resp, err := http.Get("http://" + e.srv.MetricsAddr().String() + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	text := string(body)
	for _, want := range []string{
		`nightloom_rpc_requests_total{code="OK",method="/nightloom.v1.PlanService/MakePlan"} 1`,
		`nightloom_rpc_requests_total{code="NotFound",method="/nightloom.v1.SiteService/GetSite"} 1`,
		`nightloom_rpc_duration_seconds_count{code="OK",method="/nightloom.v1.QueueService/QueueBlocks"} 1`,
		`nightloom_plan_solve_seconds_count{origin="make_plan"} 1`,
		`nightloom_queue_open_blocks 3`,
		`nightloom_plan_versions_total 1`,
	} {
		if !strings.Contains(text, want) {
			t.Errorf("metrics lack %q", want)
		}
	}
}

// TestGracefulShutdown: a call in flight finishes, a watch stream ends with
// UNAVAILABLE, health turns NOT_SERVING, and new connections are refused.
func TestGracefulShutdown(t *testing.T) {
	e := newEnv(t, "", withTCP())
	f := e.seed(t, 40)
	ctx := as(RoleTelescope, e)
	st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: f.site.GetId()})
	if err != nil {
		t.Fatal(err)
	}
	waitWatchers(t, e, 1)
	done := make(chan error, 1)
	go func() {
		_, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
			Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, TimeBudget: dur(time.Second), LookaheadNights: proto.Int32(0)})
		done <- err
	}()
	time.Sleep(100 * time.Millisecond) // let MakePlan start solving
	addr := e.srv.Addr().String()
	if err := e.srv.Shutdown(context.Background()); err != nil {
		t.Fatalf("Shutdown: %v", err)
	}
	e.srv = nil
	if err := <-done; err != nil && status.Code(err) != codes.Unavailable {
		t.Errorf("MakePlan in flight: %v", err)
	}
	for {
		_, err := st.Recv()
		if err == nil {
			continue // the plan made during shutdown may still arrive
		}
		if status.Code(err) != codes.Unavailable {
			t.Errorf("watch stream at shutdown: %v, want Unavailable", err)
		}
		break
	}
	conn, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	cctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	if _, err := healthpb.NewHealthClient(conn).Check(cctx, &healthpb.HealthCheckRequest{}); err == nil {
		t.Error("health check after shutdown succeeded")
	}
}

// TestSlowWatcherIsCutOff: a watcher that stops reading falls behind, is
// ended with RESOURCE_EXHAUSTED, and another watcher of the same site keeps
// receiving every version. Large plans fill the stream's flow-control
// window so that the server's sends block for the slow one.
func TestSlowWatcherIsCutOff(t *testing.T) {
	e := newEnv(t, "", withTCP(), func(c *Config) { c.WatchBuffer = 4 })
	f := e.seed(t, 0)
	site := f.site.GetId()
	ctx, cancel := context.WithCancel(as(RoleViewer, e))
	defer cancel()
	slow, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site})
	if err != nil {
		t.Fatal(err)
	}
	fast, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site})
	if err != nil {
		t.Fatal(err)
	}
	waitWatchers(t, e, 2)
	const versions = 40
	big := strings.Repeat("x", 200<<10)
	for v := int64(1); v <= versions; v++ {
		e.srv.hub.publish(&nightloomv1.Plan{Id: "plan-synthetic", SiteId: site, Version: v,
			Unplaced: []*nightloomv1.Unplaced{{BlockId: "blk-none", Detail: big}}, CreateTime: timestamppb.Now()})
		// The fast watcher reads each version before the next is made.
		r, err := fast.Recv()
		if err != nil {
			t.Fatalf("fast watcher at version %d: %v", v, err)
		}
		if g := r.GetPlan().GetVersion(); g != v {
			t.Fatalf("fast watcher got version %d, want %d", g, v)
		}
	}
	var slowErr error
	for slowErr == nil {
		_, slowErr = slow.Recv()
	}
	if status.Code(slowErr) != codes.ResourceExhausted {
		t.Errorf("slow watcher ended with %v, want ResourceExhausted", slowErr)
	}
}

// TestWatcherLimit: one watcher more than the per-site limit is refused.
func TestWatcherLimit(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.MaxWatchersPerSite = 2 })
	f := e.seed(t, 0)
	ctx, cancel := context.WithCancel(as(RoleViewer, e))
	defer cancel()
	for i := 0; i < 2; i++ {
		if _, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: f.site.GetId()}); err != nil {
			t.Fatal(err)
		}
	}
	waitWatchers(t, e, 2)
	st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: f.site.GetId()})
	if err == nil {
		_, err = st.Recv()
	}
	wantCode(t, err, codes.ResourceExhausted, "third watcher")
}
