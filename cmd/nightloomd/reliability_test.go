package main

// The daemon as a separate process (issue 7): TLS and mutual TLS with
// certificates made in the test, the plaintext rule for non-loopback
// addresses, secrets kept out of logs and the database file, and limits
// that refuse a request while the daemon keeps serving. The process is the
// binary that `go build` makes (crash_test.go), started with the flags an
// operator would give; clients only ever dial 127.0.0.1.

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/sha256"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestDaemonProcess builds nightloomd once and runs the process-level
// checks on it.
func TestDaemonProcess(t *testing.T) {
	bin := buildNightloomd(t)
	t.Run("TLSAndMutualTLS", func(t *testing.T) { processTLSAndMutualTLS(t, bin) })
	t.Run("PlaintextRule", func(t *testing.T) { processPlaintextRule(t, bin) })
	t.Run("SecretsNeverLoggedOrStored", func(t *testing.T) { processSecretsNeverLoggedOrStored(t, bin) })
	t.Run("LimitsKeepServing", func(t *testing.T) { processLimitsKeepServing(t, bin) })
}

// testPKI is a CA with a server certificate for 127.0.0.1, a client
// certificate, and a client certificate from another CA, all made here.
type testPKI struct {
	caFile, certFile, keyFile string
	pool                      *x509.CertPool
	client, stranger          tls.Certificate
}

func newTestPKI(t *testing.T) *testPKI {
	t.Helper()
	dir := t.TempDir()
	p := &testPKI{}
	ca, caKey := makeCA(t, "Tallowfen test CA")
	other, otherKey := makeCA(t, "Unrelated CA")
	p.pool = x509.NewCertPool()
	p.pool.AddCert(ca)
	p.caFile = writePEMFile(t, dir, "ca.pem", "CERTIFICATE", ca.Raw)
	der, key := makeLeaf(t, ca, caKey, "nightloomd", true)
	p.certFile = writePEMFile(t, dir, "server.pem", "CERTIFICATE", der)
	kb, err := x509.MarshalPKCS8PrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	p.keyFile = writePEMFile(t, dir, "server.key", "PRIVATE KEY", kb)
	der, key = makeLeaf(t, ca, caKey, "dome-controller", false)
	p.client = tls.Certificate{Certificate: [][]byte{der}, PrivateKey: key}
	der, key = makeLeaf(t, other, otherKey, "stranger", false)
	p.stranger = tls.Certificate{Certificate: [][]byte{der}, PrivateKey: key}
	return p
}

func makeCA(t *testing.T, cn string) (*x509.Certificate, *ecdsa.PrivateKey) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(time.Now().UnixNano()), Subject: pkix.Name{CommonName: cn},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(2 * time.Hour), IsCA: true,
		BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign | x509.KeyUsageDigitalSignature}
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

func makeLeaf(t *testing.T, ca *x509.Certificate, caKey *ecdsa.PrivateKey, cn string, server bool) ([]byte, *ecdsa.PrivateKey) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	serial, err := rand.Int(rand.Reader, big.NewInt(1<<62))
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: serial, Subject: pkix.Name{CommonName: cn},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(2 * time.Hour), KeyUsage: x509.KeyUsageDigitalSignature}
	if server {
		tmpl.ExtKeyUsage = []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}
		tmpl.IPAddresses = []net.IP{net.IPv4(127, 0, 0, 1)}
	} else {
		tmpl.ExtKeyUsage = []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth}
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, ca, &key.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	return der, key
}

func writePEMFile(t *testing.T, dir, name, typ string, der []byte) string {
	t.Helper()
	path := filepath.Join(dir, name)
	if err := os.WriteFile(path, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	return path
}

// tlsCreds are client credentials that trust the CA, with an optional
// client certificate.
func (p *testPKI) tlsCreds(cert *tls.Certificate) credentials.TransportCredentials {
	cfg := &tls.Config{RootCAs: p.pool, ServerName: "127.0.0.1", MinVersion: tls.VersionTLS12}
	if cert != nil {
		cfg.Certificates = []tls.Certificate{*cert}
	}
	return credentials.NewTLS(cfg)
}

// loopbackAddr turns a daemon address on any interface into the
// 127.0.0.1 address of the same port.
func loopbackAddr(t *testing.T, addr string) string {
	t.Helper()
	_, port, err := net.SplitHostPort(addr)
	if err != nil {
		t.Fatal(err)
	}
	return net.JoinHostPort("127.0.0.1", port)
}

// listSitesOver calls ListSites on a fresh connection.
func listSitesOver(t *testing.T, d *procDaemon, creds credentials.TransportCredentials, token string) error {
	t.Helper()
	conn := d.dial(t, creds)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if token != "" {
		ctx = bearer(ctx, token)
	}
	_, err := nightloomv1.NewSiteServiceClient(conn).ListSites(ctx, &nightloomv1.ListSitesRequest{})
	return err
}

// processTLSAndMutualTLS: nightloomd with --tls-cert/--tls-key serves
// TLS only, to clients that trust its CA; with --client-ca it serves only
// clients with a certificate from that CA, and still wants a token. TLS
// also lifts the plaintext rule: the daemon may listen on all interfaces
// (the test dials its 127.0.0.1 side).
func processTLSAndMutualTLS(t *testing.T, bin string) {
	p := newTestPKI(t)
	dir := t.TempDir()
	db := filepath.Join(dir, "tls.db")
	tok := tokenCreate(t, bin, db, "viewer")
	tlsArgs := []string{"--db", db, "--tls-cert", p.certFile, "--tls-key", p.keyFile}

	d := startProc(t, bin, append([]string{"--listen", "127.0.0.1:0"}, tlsArgs...)...)
	if !strings.Contains(d.logs.String(), `"tls":true`) {
		t.Errorf("the start log does not say tls: %s", d.logs.String())
	}
	if err := listSitesOver(t, d, p.tlsCreds(nil), tok); err != nil {
		t.Errorf("TLS client: %v", err)
	}
	if err := listSitesOver(t, d, insecure.NewCredentials(), tok); status.Code(err) != codes.Unavailable {
		t.Errorf("plaintext client to the TLS daemon: %v, want Unavailable", err)
	}
	untrusting := credentials.NewTLS(&tls.Config{RootCAs: x509.NewCertPool(), ServerName: "127.0.0.1", MinVersion: tls.VersionTLS12})
	if err := listSitesOver(t, d, untrusting, tok); status.Code(err) != codes.Unavailable {
		t.Errorf("client that does not trust the CA: %v, want Unavailable", err)
	}
	if err := listSitesOver(t, d, p.tlsCreds(nil), ""); status.Code(err) != codes.Unauthenticated {
		t.Errorf("TLS without a token: %v, want Unauthenticated", err)
	}
	d.stop(t)

	d = startProc(t, bin, append([]string{"--listen", "127.0.0.1:0", "--client-ca", p.caFile}, tlsArgs...)...)
	if !strings.Contains(d.logs.String(), `"mutual_tls":true`) {
		t.Errorf("the start log does not say mutual_tls: %s", d.logs.String())
	}
	if err := listSitesOver(t, d, p.tlsCreds(&p.client), tok); err != nil {
		t.Errorf("client with a certificate of the CA: %v", err)
	}
	if err := listSitesOver(t, d, p.tlsCreds(nil), tok); status.Code(err) != codes.Unavailable {
		t.Errorf("client without a certificate: %v, want Unavailable", err)
	}
	if err := listSitesOver(t, d, p.tlsCreds(&p.stranger), tok); status.Code(err) != codes.Unavailable {
		t.Errorf("client with another CA's certificate: %v, want Unavailable", err)
	}
	if err := listSitesOver(t, d, p.tlsCreds(&p.client), ""); status.Code(err) != codes.Unauthenticated {
		t.Errorf("client certificate without a token: %v, want Unauthenticated", err)
	}
	d.stop(t)

	d = startProc(t, bin, append([]string{"--listen", "0.0.0.0:0"}, tlsArgs...)...)
	d.addr = loopbackAddr(t, d.addr)
	if err := listSitesOver(t, d, p.tlsCreds(nil), tok); err != nil {
		t.Errorf("TLS daemon on all interfaces, dialled on 127.0.0.1: %v", err)
	}
	d.stop(t)

	// --client-ca alone, or a key without its certificate, does not start.
	for _, bad := range [][]string{
		{"--listen", "127.0.0.1:0", "--db", db, "--client-ca", p.caFile},
		{"--listen", "127.0.0.1:0", "--db", db, "--tls-key", p.keyFile},
		{"--listen", "127.0.0.1:0", "--db", db, "--tls-cert", p.caFile, "--tls-key", p.keyFile},
	} {
		out, err := exec.Command(bin, bad...).CombinedOutput()
		if ee, ok := err.(*exec.ExitError); !ok || ee.ExitCode() != 1 {
			t.Errorf("%v: %v, want exit 1\n%s", bad, err, out)
		}
	}
}

// processPlaintextRule: in plaintext the daemon refuses a
// non-loopback listen address (exit 1, a message naming
// --insecure-listen, no database file made) unless --insecure-listen is
// given.
func processPlaintextRule(t *testing.T, bin string) {
	dir := t.TempDir()
	for _, addr := range []string{"0.0.0.0:0", "[::]:0", ":0"} {
		db := filepath.Join(dir, "refused.db")
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		out, err := exec.CommandContext(ctx, bin, "--listen", addr, "--db", db).CombinedOutput()
		cancel()
		if ee, ok := err.(*exec.ExitError); !ok || ee.ExitCode() != 1 || !strings.Contains(string(out), "--insecure-listen") {
			t.Errorf("--listen %s in plaintext: %v, output %q; want exit 1 naming --insecure-listen", addr, err, out)
		}
		if _, err := os.Stat(db); !os.IsNotExist(err) {
			t.Errorf("--listen %s: the refused daemon made the database (%v)", addr, err)
		}
	}
	db := filepath.Join(dir, "allowed.db")
	d := startProc(t, bin, "--listen", "0.0.0.0:0", "--insecure-listen", "--db", db)
	d.addr = loopbackAddr(t, d.addr)
	conn := d.dial(t, nil)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	h, err := healthpb.NewHealthClient(conn).Check(ctx, &healthpb.HealthCheckRequest{})
	if err != nil || h.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Errorf("with --insecure-listen: %v %v", h, err)
	}
	d.stop(t)
}

// processSecretsNeverLoggedOrStored: tokens made with `token create`
// and used in good and bad shapes against a daemon logging at debug level
// appear neither in the daemon's logs nor in the bytes of the database
// file, its WAL or its shared-memory file, where the SHA-256 of each
// secret does appear (so the scan reads what the store wrote).
func processSecretsNeverLoggedOrStored(t *testing.T, bin string) {
	db := filepath.Join(t.TempDir(), "secrets.db")
	var secrets []string
	var cliErr bytes.Buffer
	for _, role := range []string{"admin", "viewer", "telescope"} {
		cmd := exec.Command(bin, "token", "create", "--role", role, "--db", db)
		var out bytes.Buffer
		cmd.Stdout, cmd.Stderr = &out, &cliErr
		if err := cmd.Run(); err != nil {
			t.Fatal(err)
		}
		secrets = append(secrets, strings.TrimSpace(out.String()))
	}
	d := startProc(t, bin, "--listen", "127.0.0.1:0", "--db", db, "--log-level", "debug")
	conn := d.dial(t, nil)
	sites := nightloomv1.NewSiteServiceClient(conn)
	admin := secrets[0]
	shapes := []string{"Bearer " + admin, "Basic " + admin, admin, "Bearer " + admin + "x", "Bearer " + admin[:20],
		"Bearer " + secrets[1], "Bearer " + secrets[2], "bearer " + strings.Repeat(admin, 30)}
	refused := 0
	for _, s := range shapes {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		ctx = metadata.AppendToOutgoingContext(ctx, "authorization", s)
		_, err := sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: &nightloomv1.Site{Name: "Secretless Knoll",
			LatitudeDeg: 10, LongitudeDeg: 10, TimeZone: "UTC",
			Mount: &nightloomv1.Mount{Kind: nightloomv1.MountKind_MOUNT_KIND_ALT_AZIMUTH, PrimaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 5},
				SecondaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 5}},
			Instrument: &nightloomv1.Instrument{PixelScaleArcsec: 2}}})
		cancel()
		if err != nil {
			refused++
			for _, sec := range secrets {
				if strings.Contains(status.Convert(err).Message(), sec[4:20]) {
					t.Errorf("the error for %q repeats a secret: %v", s[:10], err)
				}
			}
		}
	}
	if refused != len(shapes)-1 {
		t.Errorf("%d of %d calls refused, want all but the good admin call", refused, len(shapes))
	}
	d.stop(t)
	logs := d.logs.String() + cliErr.String()
	if n := strings.Count(logs, `"msg":"rpc"`); n < len(shapes) {
		t.Errorf("the debug logs hold %d rpc lines, want at least %d (is the capture working?)", n, len(shapes))
	}
	var files []byte
	for _, suffix := range []string{"", "-wal", "-shm"} {
		if b, err := os.ReadFile(db + suffix); err == nil {
			files = append(files, b...)
		}
	}
	for i, sec := range secrets {
		body := strings.TrimPrefix(sec, "nlt_")
		for k := 0; k+16 <= len(body); k++ {
			w := body[k : k+16]
			if strings.Contains(logs, w) {
				t.Errorf("secret %d: %q is in the logs", i, w)
				break
			}
			if bytes.Contains(files, []byte(w)) {
				t.Errorf("secret %d: %q is in the database files", i, w)
				break
			}
		}
		h := sha256.Sum256([]byte(sec))
		if !bytes.Contains(files, h[:]) {
			t.Errorf("secret %d: its SHA-256 is not in the database files; the scan missed the token table", i)
		}
	}
	t.Logf("%d tokens, %d authorization shapes; %d bytes of logs and %d bytes of database files hold no 16 bytes of any secret",
		len(secrets), len(shapes), len(logs), len(files))
}

// processLimitsKeepServing: a daemon started with --max-recv-bytes
// 65536 refuses a larger message with RESOURCE_EXHAUSTED, too many blocks,
// a 10-year horizon and a 1 s grid over a month with INVALID_ARGUMENT, and
// meanwhile another client on its own connection is served without
// error; the daemon is healthy afterwards and stops cleanly on SIGTERM.
func processLimitsKeepServing(t *testing.T, bin string) {
	db := filepath.Join(t.TempDir(), "limits.db")
	tok := tokenCreate(t, bin, db, "admin")
	d := startProc(t, bin, "--listen", "127.0.0.1:0", "--db", db, "--max-recv-bytes", "65536", "--log-level", "info")
	conn := d.dial(t, nil)
	ctx := bearer(context.Background(), tok)
	site, err := nightloomv1.NewSiteServiceClient(conn).CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: &nightloomv1.Site{
		Name: "Limitless Fell", LatitudeDeg: 55, LongitudeDeg: -3, TimeZone: "Europe/London",
		Mount: &nightloomv1.Mount{Kind: nightloomv1.MountKind_MOUNT_KIND_FORK_EQUATORIAL,
			PrimaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 3}, SecondaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 3}},
		Instrument: &nightloomv1.Instrument{PixelScaleArcsec: 1.5, Filters: []string{"L"}}}})
	if err != nil {
		t.Fatal(err)
	}
	siteID := site.GetSite().GetId()
	tg, err := nightloomv1.NewTargetServiceClient(conn).CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: &nightloomv1.Target{
		Name: "Brindlewood Cluster", Position: &nightloomv1.Target_Fixed{Fixed: &nightloomv1.FixedPosition{RaDeg: 120, DecDeg: 35}}}})
	if err != nil {
		t.Fatal(err)
	}
	blocks := func(n int, label string) []*nightloomv1.Block {
		out := make([]*nightloomv1.Block, n)
		for i := range out {
			out[i] = &nightloomv1.Block{SiteId: siteID, TargetId: tg.GetTarget().GetId(), Filter: "L", Exposure: durationpb.New(time.Minute),
				FramesWanted: 5, Priority: 1, Label: label}
		}
		return out
	}

	// The other client.
	other := nightloomv1.NewSiteServiceClient(d.dial(t, nil))
	stop := make(chan struct{})
	var wg sync.WaitGroup
	var mu sync.Mutex
	var otherCalls int
	var otherErrs []error
	wg.Add(1)
	go func() {
		defer wg.Done()
		for {
			select {
			case <-stop:
				return
			case <-time.After(5 * time.Millisecond):
			}
			cctx, cancel := context.WithTimeout(ctx, 10*time.Second)
			_, err := other.GetSite(cctx, &nightloomv1.GetSiteRequest{SiteId: siteID})
			cancel()
			mu.Lock()
			otherCalls++
			if err != nil {
				otherErrs = append(otherErrs, err)
			}
			mu.Unlock()
		}
	}()

	q, p := nightloomv1.NewQueueServiceClient(conn), nightloomv1.NewPlanServiceClient(conn)
	night := &nightloomv1.MakePlanRequest_Night{Night: &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 15}}
	cases := []struct {
		name  string
		call  func() error
		want  codes.Code
		field string
	}{
		{"QueueBlocks of about 100 KiB over --max-recv-bytes 65536", func() error {
			_, err := q.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: blocks(480, strings.Repeat("z", 200))})
			return err
		}, codes.ResourceExhausted, ""},
		{"501 blocks", func() error {
			_, err := q.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: blocks(501, "")})
			return err
		}, codes.InvalidArgument, "blocks"},
		{"a 10-year horizon", func() error {
			_, err := p.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: siteID, Span: night, Nights: 3653})
			return err
		}, codes.InvalidArgument, "nights"},
		{"a 1 s grid over a month", func() error {
			_, err := p.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: siteID, Span: night, Nights: 30, GridStep: durationpb.New(time.Second)})
			return err
		}, codes.InvalidArgument, "grid_step"},
		{"a 10-year ephemeris", func() error {
			t0 := time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC)
			_, err := nightloomv1.NewSkyServiceClient(conn).Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: siteID,
				Subject:  &nightloomv1.EphemerisRequest_TargetId{TargetId: tg.GetTarget().GetId()},
				Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(t0), End: timestamppb.New(t0.AddDate(10, 0, 0))}, Step: durationpb.New(24 * time.Hour)})
			return err
		}, codes.InvalidArgument, "interval"},
	}
	for _, c := range cases {
		err := c.call()
		if got := status.Code(err); got != c.want {
			t.Errorf("%s: %v, want %v", c.name, err, c.want)
			continue
		}
		if c.field != "" && !strings.Contains(status.Convert(err).Message(), c.field) {
			t.Errorf("%s: message %q does not name %s", c.name, status.Convert(err).Message(), c.field)
		}
	}
	// A call just under the limit is served on the same connection.
	if _, err := q.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: blocks(20, "under the limit")}); err != nil {
		t.Errorf("QueueBlocks under the limit after the refusals: %v", err)
	}
	time.Sleep(200 * time.Millisecond)
	close(stop)
	wg.Wait()
	mu.Lock()
	if otherCalls == 0 {
		t.Error("the other client made no call")
	}
	for _, err := range otherErrs {
		t.Errorf("the other client: %v", err)
	}
	mu.Unlock()
	hctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if h, err := healthpb.NewHealthClient(conn).Check(hctx, &healthpb.HealthCheckRequest{}); err != nil || h.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Errorf("health after the refusals: %v %v", h, err)
	}
	d.stop(t)
	t.Logf("%d refusals with their status; the other client made %d calls, all served", len(cases), otherCalls)
}
