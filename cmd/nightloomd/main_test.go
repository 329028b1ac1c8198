package main

import (
	"bytes"
	"context"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/metadata"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/pgtest"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestMain lets the test binary stand in for nightloomd in child processes
// (the kill -9 test), so that no separate build is needed.
func TestMain(m *testing.M) {
	if os.Getenv("NIGHTLOOMD_TEST_DAEMON") == "1" {
		main()
		return
	}
	os.Exit(pgtest.Main(m)) // m.Run, then the throwaway PostgreSQL cluster (if any) is stopped
}

func runCmd(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), args, &out, &errb)
	return code, out.String(), errb.String()
}

func TestTokenCommands(t *testing.T) {
	db := filepath.Join(t.TempDir(), "tokens.db")
	code, out, errs := runCmd(t, "token", "create", "--role", "telescope", "--label", "dome 2 control", "--db", db)
	if code != 0 {
		t.Fatalf("token create: exit %d, %s", code, errs)
	}
	secret := strings.TrimSpace(out)
	if !strings.HasPrefix(secret, "nlt_") || strings.Count(out, "\n") != 1 {
		t.Fatalf("token create printed %q; want the secret alone on one line", out)
	}
	if strings.Contains(errs, secret) {
		t.Error("the secret is also on stderr")
	}
	code, out, _ = runCmd(t, "token", "list", "--db", db)
	if code != 0 || !strings.Contains(out, "telescope") || !strings.Contains(out, "dome 2 control") || strings.Contains(out, secret) {
		t.Fatalf("token list: exit %d\n%s", code, out)
	}
	id := strings.Fields(strings.Split(out, "\n")[1])[0]
	code, out, errs = runCmd(t, "token", "revoke", "--id", id, "--db", db)
	if code != 0 || !strings.Contains(out, "revoked token "+id) {
		t.Fatalf("token revoke: exit %d %s %s", code, out, errs)
	}
	code, out, _ = runCmd(t, "token", "list", "--db", db)
	if code != 0 || strings.Contains(strings.Split(out, "\n")[1], " - ") {
		t.Errorf("after revoke the token still lists as active:\n%s", out)
	}
	for _, bad := range [][]string{
		{"token", "create", "--role", "root", "--db", db},
		{"token", "create", "--db", db},
		{"token", "revoke", "--db", db},
		{"token", "frobnicate"},
		{"token"},
	} {
		if code, _, _ := runCmd(t, bad...); code != 2 {
			t.Errorf("%v: exit %d, want 2", bad, code)
		}
	}
	if code, _, _ := runCmd(t, "token", "revoke", "--id", "tok-nonesuch", "--db", db); code != 1 {
		t.Errorf("revoke of an unknown token: exit %d, want 1", code)
	}
}

func TestServeFlags(t *testing.T) {
	for _, bad := range [][]string{
		{"--max-recv-bytes", "0"},
		{"--shutdown-timeout", "5"},
		{"--shutdown-timeout", "-1s"},
		{"--log-format", "xml"},
		{"--log-level", "loud"},
		{"--default-time-budget", "2m"},
		{"--default-replan-budget", "0s"},
		{"--default-replan-budget", "61s"},
		{"--listen"},
		{"extra-argument"},
	} {
		if code, _, _ := runCmd(t, bad...); code != 2 {
			t.Errorf("%v: exit %d, want 2", bad, code)
		}
	}
	f, err := parseServe(nil, &bytes.Buffer{})
	if err != nil {
		t.Fatal(err)
	}
	if f.cfg.Listen != "127.0.0.1:7878" || f.cfg.DBPath != "nightloom.db" || f.cfg.MetricsAddr != "" || f.cfg.InsecureListen {
		t.Errorf("defaults: %+v", f.cfg)
	}
}

func TestServeRefusesPlaintextOnAllInterfaces(t *testing.T) {
	db := filepath.Join(t.TempDir(), "x.db")
	code, _, errs := runCmd(t, "--listen", "0.0.0.0:0", "--db", db)
	if code != 1 || !strings.Contains(errs, "--insecure-listen") {
		t.Errorf("exit %d, stderr %q; want 1 naming --insecure-listen", code, errs)
	}
}

// freePort returns a loopback port that was free a moment ago.
func freePort(t *testing.T) string {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().String()
}

func waitHealthy(t *testing.T, addr string) {
	t.Helper()
	conn, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	deadline := time.Now().Add(20 * time.Second)
	for {
		ctx, cancel := context.WithTimeout(context.Background(), time.Second)
		r, err := healthpb.NewHealthClient(conn).Check(ctx, &healthpb.HealthCheckRequest{})
		cancel()
		if err == nil && r.GetStatus() == healthpb.HealthCheckResponse_SERVING {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("daemon at %s not healthy: %v", addr, err)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// TestServeStopsOnCancel runs the daemon in-process until its context
// (SIGINT/SIGTERM in main) is cancelled; it then exits 0.
func TestServeStopsOnCancel(t *testing.T) {
	addr := freePort(t)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan int, 1)
	var errb bytes.Buffer
	go func() {
		done <- run(ctx, []string{"--listen", addr, "--db", filepath.Join(t.TempDir(), "d.db"), "--log-format", "json"}, &bytes.Buffer{}, &errb)
	}()
	waitHealthy(t, addr)
	cancel()
	select {
	case code := <-done:
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errb.String())
		}
	case <-time.After(20 * time.Second):
		t.Fatal("daemon did not stop")
	}
	if !strings.Contains(errb.String(), `"msg":"nightloomd stopped"`) {
		t.Errorf("logs: %s", errb.String())
	}
}

// TestKill9KeepsAcknowledgedReports starts nightloomd as a separate
// process, sends a progress report and kills the daemon with SIGKILL the
// moment the report is acknowledged; after a restart on the same file the
// report is there (a retry is a duplicate) and counted once.
func TestKill9KeepsAcknowledgedReports(t *testing.T) {
	if testing.Short() {
		t.Skip("starts processes")
	}
	dir := t.TempDir()
	db := filepath.Join(dir, "crash.db")
	code, out, errs := runCmd(t, "token", "create", "--role", "admin", "--db", db)
	if code != 0 {
		t.Fatalf("token create: %s", errs)
	}
	token := strings.TrimSpace(out)
	start := func() (*exec.Cmd, string) {
		addr := freePort(t)
		cmd := exec.Command(os.Args[0], "--listen", addr, "--db", db, "--log-level", "warn")
		cmd.Env = append(os.Environ(), "NIGHTLOOMD_TEST_DAEMON=1")
		cmd.Stderr = os.Stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { _ = cmd.Process.Kill(); _, _ = cmd.Process.Wait() })
		waitHealthy(t, addr)
		return cmd, addr
	}
	dial := func(addr string) (*grpc.ClientConn, context.Context) {
		conn, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { conn.Close() })
		return conn, metadata.AppendToOutgoingContext(context.Background(), "authorization", "Bearer "+token)
	}
	cmd, addr := start()
	conn, ctx := dial(addr)
	site, err := nightloomv1.NewSiteServiceClient(conn).CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: &nightloomv1.Site{
		Name: "Cindervale Rooftop", LatitudeDeg: 52.1, LongitudeDeg: 5.2, TimeZone: "Europe/Amsterdam",
		Mount: &nightloomv1.Mount{Kind: nightloomv1.MountKind_MOUNT_KIND_FORK_EQUATORIAL,
			PrimaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 3}, SecondaryAxis: &nightloomv1.AxisSlew{RateDegPerS: 3}},
		Instrument: &nightloomv1.Instrument{PixelScaleArcsec: 1.5}}})
	if err != nil {
		t.Fatal(err)
	}
	tg, err := nightloomv1.NewTargetServiceClient(conn).CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: &nightloomv1.Target{
		Name: "Ferncastle Nebula", Position: &nightloomv1.Target_Fixed{Fixed: &nightloomv1.FixedPosition{RaDeg: 84, DecDeg: 22}}}})
	if err != nil {
		t.Fatal(err)
	}
	q, err := nightloomv1.NewQueueServiceClient(conn).QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{{
		SiteId: site.GetSite().GetId(), TargetId: tg.GetTarget().GetId(), Filter: "L", Exposure: durationpb.New(5 * time.Second),
		FramesWanted: 1000, Priority: 5}}})
	if err != nil {
		t.Fatal(err)
	}
	block := q.GetBlocks()[0].GetId()
	t0 := time.Now().Add(-time.Minute).Truncate(time.Second) // a run that just ended (7 frames of 5 s fit)
	const rounds = 3
	for round := 1; round <= rounds; round++ {
		rep := &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{ReportId: fmt.Sprintf("kill-%d", round), BlockId: block,
			FramesKept: 7, Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(t0), End: timestamppb.New(t0.Add(50 * time.Second))},
			Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}}
		r, err := nightloomv1.NewQueueServiceClient(conn).ReportProgress(ctx, rep)
		if err != nil {
			t.Fatal(err)
		}
		_ = cmd.Process.Signal(syscall.SIGKILL) // the instant after the acknowledgement
		_, _ = cmd.Process.Wait()
		if r.GetBlock().GetFramesDone() != int32(7*round) {
			t.Fatalf("round %d: frames done %d before the kill", round, r.GetBlock().GetFramesDone())
		}
		cmd, addr = start()
		conn, ctx = dial(addr)
		again, err := nightloomv1.NewQueueServiceClient(conn).ReportProgress(ctx, rep)
		if err != nil {
			t.Fatal(err)
		}
		if !again.GetDuplicate() || again.GetBlock().GetFramesDone() != int32(7*round) {
			t.Fatalf("round %d after kill -9: duplicate %v, frames done %d; want true, %d", round, again.GetDuplicate(),
				again.GetBlock().GetFramesDone(), 7*round)
		}
	}
}

// TestTokenLimitsAndHelp: `token create --ttl --site` (issue 14), the
// columns of `token list`, and the help of `token --help` and `--help`.
func TestTokenLimitsAndHelp(t *testing.T) {
	db := filepath.Join(t.TempDir(), "tokens.db")
	st, err := store.Open(db, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.CreateSite(context.Background(), store.Site{ID: "site-dome2", Name: "dome 2", Spec: []byte("{}")}); err != nil {
		t.Fatal(err)
	}
	st.Close()
	code, _, errs := runCmd(t, "token", "create", "--role", "telescope", "--ttl", "720h", "--site", "site-dome2", "--db", db)
	if code != 0 || !strings.Contains(errs, "expires ") || !strings.Contains(errs, "held to site site-dome2") {
		t.Fatalf("token create --ttl --site: exit %d, %s", code, errs)
	}
	code, out, _ := runCmd(t, "token", "list", "--db", db)
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if code != 0 || len(lines) != 2 || !strings.Contains(lines[0], "EXPIRES") || !strings.Contains(lines[1], "site-dome2") {
		t.Fatalf("token list: exit %d\n%s", code, out)
	}
	// The expiry printed is 720 h after creation, to the second.
	f := strings.Fields(lines[1])
	created, err1 := time.Parse(time.RFC3339, f[3])
	expires, err2 := time.Parse(time.RFC3339, f[4])
	if err1 != nil || err2 != nil || expires.Sub(created).Round(time.Minute) != 720*time.Hour {
		t.Errorf("created %s, expires %s: want 720h apart (%v %v)", f[3], f[4], err1, err2)
	}
	for _, bad := range [][]string{
		{"token", "create", "--role", "viewer", "--ttl", "-1h", "--db", db},
		{"token", "create", "--role", "viewer", "--site", "site-nonesuch", "--db", db},
	} {
		if code, _, _ := runCmd(t, bad...); code != 2 {
			t.Errorf("%v: exit %d, want 2", bad, code)
		}
	}
	code, out, _ = runCmd(t, "token", "--help")
	for _, want := range []string{"create --role ROLE", "--ttl", "--site", "token list", "token revoke"} {
		if code != 0 || !strings.Contains(out, want) {
			t.Errorf("token --help: exit %d, no %q in\n%s", code, want, out)
		}
	}
	code, _, errs = runCmd(t, "--help")
	if code != 0 || !strings.Contains(errs, "nightloomd token create|list|revoke") || !strings.Contains(errs, "-listen") {
		t.Errorf("--help: exit %d\n%s", code, errs)
	}
}
