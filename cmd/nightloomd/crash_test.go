package main

// Crash safety of the daemon as a separate process (issue 7): nightloomd
// is built with `go build`, started on a SQLite file, loaded by concurrent
// clients that send progress reports and queue blocks, and killed with
// SIGKILL at random moments (fixed seed). After each kill the file is
// opened with the store package and checked; the next round restarts the
// daemon on the same file and retries every call whose fate the client
// could not know.
//
// What SIGKILL shows and what it does not: the process dies, the operating
// system's page cache survives, so this tests the transactions and that an
// acknowledgement means a commit; a power cut (synchronous=FULL reaching
// the disk) is not simulated.

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math/rand/v2"
	"os/exec"
	"path/filepath"
	"runtime"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// buildNightloomd compiles this package into a temporary directory and
// returns the binary's path.
func buildNightloomd(t *testing.T) string {
	t.Helper()
	goTool, err := exec.LookPath("go")
	if err != nil {
		goTool = filepath.Join(runtime.GOROOT(), "bin", "go")
	}
	bin := filepath.Join(t.TempDir(), "nightloomd")
	cmd := exec.Command(goTool, "build", "-o", bin, ".")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// lineLog collects a process's stderr and finds the address the daemon
// logs when it starts serving.
type lineLog struct {
	mu      sync.Mutex
	buf     bytes.Buffer
	partial []byte
	addr    chan string
	found   bool
}

func newLineLog() *lineLog { return &lineLog{addr: make(chan string, 1)} }

func (l *lineLog) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.buf.Write(p)
	l.partial = append(l.partial, p...)
	for {
		i := bytes.IndexByte(l.partial, '\n')
		if i < 0 {
			break
		}
		line := l.partial[:i]
		l.partial = l.partial[i+1:]
		var rec struct {
			Msg  string `json:"msg"`
			Addr string `json:"addr"`
		}
		if !l.found && json.Unmarshal(line, &rec) == nil && rec.Msg == "nightloomd serving" && rec.Addr != "" {
			l.found = true
			l.addr <- rec.Addr
		}
	}
	return len(p), nil
}

func (l *lineLog) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.buf.String()
}

// procDaemon is a nightloomd process.
type procDaemon struct {
	cmd    *exec.Cmd
	addr   string
	logs   *lineLog
	exited chan struct{}
	err    error // Wait's result, after exited is closed
}

// startProc runs the binary with args plus JSON logs, and waits until it
// logs its address. The process is killed at the end of the test if it
// still runs.
func startProc(t *testing.T, bin string, args ...string) *procDaemon {
	t.Helper()
	d, err := tryStartProc(t, bin, args...)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func tryStartProc(t *testing.T, bin string, args ...string) (*procDaemon, error) {
	d := &procDaemon{logs: newLineLog(), exited: make(chan struct{})}
	d.cmd = exec.Command(bin, append(args, "--log-format", "json")...)
	d.cmd.Stderr = d.logs
	if err := d.cmd.Start(); err != nil {
		return nil, err
	}
	go func() { d.err = d.cmd.Wait(); close(d.exited) }()
	t.Cleanup(func() { d.kill() })
	select {
	case d.addr = <-d.logs.addr:
		return d, nil
	case <-d.exited:
		return d, fmt.Errorf("nightloomd %v exited before serving: %v\n%s", args, d.err, d.logs.String())
	case <-time.After(30 * time.Second):
		return d, fmt.Errorf("nightloomd %v did not start within 30 s\n%s", args, d.logs.String())
	}
}

// kill sends SIGKILL and waits for the process to end.
func (d *procDaemon) kill() {
	select {
	case <-d.exited:
		return
	default:
	}
	_ = d.cmd.Process.Signal(syscall.SIGKILL)
	<-d.exited
}

// stop sends SIGTERM and waits (graceful shutdown) up to 30 s.
func (d *procDaemon) stop(t *testing.T) {
	t.Helper()
	_ = d.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-d.exited:
	case <-time.After(30 * time.Second):
		d.kill()
		t.Fatalf("nightloomd did not stop on SIGTERM within 30 s")
	}
	if d.err != nil {
		t.Errorf("nightloomd exited with %v after SIGTERM\n%s", d.err, d.logs.String())
	}
}

// dial connects to the daemon (plaintext unless creds are given).
func (d *procDaemon) dial(t *testing.T, creds credentials.TransportCredentials) *grpc.ClientConn {
	t.Helper()
	if creds == nil {
		creds = insecure.NewCredentials()
	}
	conn, err := grpc.NewClient(d.addr, grpc.WithTransportCredentials(creds))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = conn.Close() })
	return conn
}

// tokenCreate runs `nightloomd token create` and returns the secret.
func tokenCreate(t *testing.T, bin, db, role string) string {
	t.Helper()
	var stdout, stderr bytes.Buffer
	cmd := exec.Command(bin, "token", "create", "--role", role, "--label", "crash test "+role, "--db", db)
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("token create --role %s: %v\n%s", role, err, stderr.String())
	}
	return strings.TrimSpace(stdout.String())
}

func bearer(ctx context.Context, token string) context.Context {
	return metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer "+token)
}

// The crash test's call ledger: what each client sent, and what it knows
// of the outcome.
type reportCall struct {
	req     *nightloomv1.ReportProgressRequest
	acked   bool
	present bool // found in the store after the last kill
}

type queueCall struct {
	req     *nightloomv1.QueueBlocksRequest
	acked   bool
	ids     []string // from the acknowledgement
	present bool
}

type ledger struct {
	mu      sync.Mutex
	reports map[string]*reportCall
	queues  map[string]*queueCall
	blocks  []string // blocks reports may go to
	acks    atomic.Int64
	// totals for the log
	ackedReports, ackedQueues, ackedBlocks int
	doubtful, doubtfulCommitted            int
	retries, retryDuplicates               int
	unexpected                             []string
}

// TestCrashSafetyUnderSIGKILL: 20 rounds (5 with -short) of four
// concurrent clients against a nightloomd process that is killed with
// SIGKILL after a random number of acknowledgements (fixed seed). After
// each kill, with the daemon gone, the store must pass its integrity check
// (PRAGMA integrity_check, foreign keys, frames done equal to the frames
// the stored reports applied and never above frames wanted, states, plan
// versions), hold every acknowledged report and every block of every
// acknowledged QueueBlocks call exactly once, hold each unacknowledged call
// wholly or not at all, and have each block's frames done equal to
// min(frames wanted, sum of frames kept of its stored reports). The next
// round retries every unacknowledged call and some acknowledged ones: a
// call the store holds must come back as a duplicate, one it does not must
// be applied, once.
func TestCrashSafetyUnderSIGKILL(t *testing.T) {
	rounds := 20
	if testing.Short() {
		rounds = 5
	}
	const clients = 4
	began := time.Now()
	bin := buildNightloomd(t)
	built := time.Since(began)
	db := filepath.Join(t.TempDir(), "crash.db")
	tokens := map[string]string{}
	for _, r := range []string{"admin", "operator", "telescope"} {
		tokens[r] = tokenCreate(t, bin, db, r)
	}
	args := []string{"--listen", "127.0.0.1:0", "--db", db, "--log-level", "info"}

	// The site, its targets and the blocks the reports go to; three of
	// them want few frames, so that reports run into the cap.
	d := startProc(t, bin, args...)
	conn := d.dial(t, nil)
	ctx := bearer(context.Background(), tokens["admin"])
	site, err := nightloomv1.NewSiteServiceClient(conn).CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: &nightloomv1.Site{
		Name: "Tallowfen Dome", LatitudeDeg: 47.3, LongitudeDeg: 8.6, ElevationM: 520, TimeZone: "Europe/Zurich",
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
		r, err := nightloomv1.NewTargetServiceClient(conn).CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: tg})
		if err != nil {
			t.Fatal(err)
		}
		targets = append(targets, r.GetTarget().GetId())
	}
	block := func(target, label string, wanted int32) *nightloomv1.Block {
		return &nightloomv1.Block{SiteId: siteID, TargetId: target, Filter: "L", Exposure: durationpb.New(10 * time.Second),
			FramesWanted: wanted, MinRunFrames: 1, Priority: 3, Label: label}
	}
	var initial []*nightloomv1.Block
	for i, wanted := range []int32{12, 25, 40, 5000, 5000, 5000} {
		initial = append(initial, block(targets[i%2], fmt.Sprintf("initial-%d", i), wanted))
	}
	q, err := nightloomv1.NewQueueServiceClient(conn).QueueBlocks(bearer(context.Background(), tokens["operator"]),
		&nightloomv1.QueueBlocksRequest{Blocks: initial, RequestId: "initial"})
	if err != nil {
		t.Fatal(err)
	}
	L := &ledger{reports: map[string]*reportCall{}, queues: map[string]*queueCall{}}
	for _, b := range q.GetBlocks() {
		L.blocks = append(L.blocks, b.GetId())
	}
	d.kill()

	rng := rand.New(rand.NewPCG(2031, 0x6b696c6c)) // fixed seed: the same kill points each run
	for round := 0; round < rounds; round++ {
		d := startProc(t, bin, args...)
		conn := d.dial(t, nil)
		queue := nightloomv1.NewQueueServiceClient(conn)
		crashRetries(t, L, queue, tokens, rng)

		killAfter := int64(10 + rng.IntN(300))
		delay := time.Duration(rng.IntN(3000)) * time.Microsecond
		L.acks.Store(0)
		cctx, cancel := context.WithCancel(context.Background())
		var wg sync.WaitGroup
		for c := 0; c < clients; c++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				crashClient(cctx, L, queue, tokens, siteID, targets, round, c)
			}()
		}
		deadline := time.Now().Add(20 * time.Second)
		for L.acks.Load() < killAfter && time.Now().Before(deadline) {
			time.Sleep(200 * time.Microsecond)
		}
		time.Sleep(delay)
		d.kill()
		cancel()
		wg.Wait()
		if L.acks.Load() < killAfter {
			t.Fatalf("round %d: %d acknowledgements in 20 s, want %d\n%s", round, L.acks.Load(), killAfter, d.logs.String())
		}
		crashVerify(t, L, db, siteID, round)
		if t.Failed() {
			return
		}
	}
	L.mu.Lock()
	defer L.mu.Unlock()
	for _, u := range L.unexpected {
		t.Error(u)
	}
	t.Logf("%d rounds killed with SIGKILL (%d clients each); acknowledged under load: %d progress reports and %d QueueBlocks calls (%d blocks), "+
		"lost 0, doubled 0; in flight at a kill: %d calls, %d of them committed, none half applied; "+
		"retried after restarts: %d calls, %d answered as duplicates; build %v, total %v",
		rounds, clients, L.ackedReports, L.ackedQueues, L.ackedBlocks, L.doubtful, L.doubtfulCommitted,
		L.retries, L.retryDuplicates, built.Round(time.Millisecond), time.Since(began).Round(time.Millisecond))
}

// crashClient sends reports (70 %) and QueueBlocks calls until ctx ends,
// recording each call before it is sent and each acknowledgement.
func crashClient(ctx context.Context, L *ledger, queue nightloomv1.QueueServiceClient, tokens map[string]string,
	siteID string, targets []string, round, client int) {
	rng := rand.New(rand.NewPCG(uint64(round), uint64(client)))
	tele, opr := bearer(ctx, tokens["telescope"]), bearer(ctx, tokens["operator"])
	for n := 0; ctx.Err() == nil; n++ {
		if rng.IntN(10) < 7 {
			L.mu.Lock()
			blockID := L.blocks[rng.IntN(len(L.blocks))]
			L.mu.Unlock()
			id := fmt.Sprintf("r%02d-c%d-%04d", round, client, n)
			// A run that just ended: reports must be possible (after the
			// block was queued, not in the future, frames that fit).
			start := time.Now().Add(-time.Minute).Truncate(time.Second)
			call := &reportCall{req: &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
				ReportId: id, BlockId: blockID, FramesKept: int32(1 + rng.IntN(4)),
				Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(start), End: timestamppb.New(start.Add(50 * time.Second))},
				Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}}}
			L.mu.Lock()
			L.reports[id] = call
			L.mu.Unlock()
			_, err := queue.ReportProgress(tele, call.req)
			L.mu.Lock()
			if err == nil {
				call.acked = true
				L.ackedReports++
				L.acks.Add(1)
			} else {
				L.noteError(id, err)
			}
			L.mu.Unlock()
			if err != nil {
				return // the daemon is gone: this client stops, as one would before reconnecting
			}
		} else {
			id := fmt.Sprintf("q%02d-c%d-%04d", round, client, n)
			req := &nightloomv1.QueueBlocksRequest{RequestId: id}
			for i := 0; i < 1+rng.IntN(3); i++ {
				req.Blocks = append(req.Blocks, &nightloomv1.Block{SiteId: siteID, TargetId: targets[rng.IntN(len(targets))],
					Filter: "R", Exposure: durationpb.New(10 * time.Second), FramesWanted: int32(2 + rng.IntN(6)), MinRunFrames: 1,
					Priority: 2, Label: fmt.Sprintf("%s#%d", id, i)})
			}
			call := &queueCall{req: req}
			L.mu.Lock()
			L.queues[id] = call
			L.mu.Unlock()
			r, err := queue.QueueBlocks(opr, req)
			L.mu.Lock()
			if err == nil {
				call.acked = true
				L.acks.Add(1)
				L.ackedQueues++
				L.ackedBlocks += len(r.GetBlocks())
				for _, b := range r.GetBlocks() {
					call.ids = append(call.ids, b.GetId())
					L.blocks = append(L.blocks, b.GetId())
				}
			} else {
				L.noteError(id, err)
			}
			L.mu.Unlock()
			if err != nil {
				return
			}
		}
	}
}

// noteError records an error that is not the daemon's death (which makes
// the call's outcome unknown). L.mu is held.
func (L *ledger) noteError(id string, err error) {
	switch status.Code(err) {
	case codes.Unavailable, codes.Canceled, codes.DeadlineExceeded:
	default:
		L.unexpected = append(L.unexpected, fmt.Sprintf("call %s: %v", id, err))
	}
}

// crashVerify opens the file with the store package (the daemon is dead)
// and checks it against the ledger.
func crashVerify(t *testing.T, L *ledger, db, siteID string, round int) {
	t.Helper()
	ctx := context.Background()
	st, err := store.OpenDSN(db, store.Options{})
	if err != nil {
		t.Fatalf("round %d: open after SIGKILL: %v", round, err)
	}
	defer st.Close()
	if err := st.IntegrityCheck(ctx); err != nil {
		t.Fatalf("round %d: %v", round, err)
	}
	L.mu.Lock()
	defer L.mu.Unlock()

	// Reports: each acknowledged one is stored as sent; any other is
	// stored as sent or absent.
	for id, c := range L.reports {
		r, err := st.GetProgressReport(ctx, id)
		switch {
		case err == nil:
			rep := c.req.GetReport()
			if r.BlockID != rep.GetBlockId() || r.FramesKept != int(rep.GetFramesKept()) || !r.Start.Equal(rep.GetInterval().GetStart().AsTime()) {
				t.Errorf("round %d: report %s stored as %+v, sent %v", round, id, r, rep)
			}
			if !c.acked && !c.present {
				L.doubtful++
				L.doubtfulCommitted++
			}
			c.present = true
		case errors.Is(err, store.ErrNotFound):
			if c.acked {
				t.Errorf("round %d: acknowledged report %s is lost", round, id)
			}
			if c.present {
				t.Errorf("round %d: report %s was stored before and is gone", round, id)
			}
			if !c.acked && !c.present {
				L.doubtful++
			}
		default:
			t.Fatalf("round %d: report %s: %v", round, id, err)
		}
	}

	// Blocks: grouped by the call that queued them (their label).
	byCall := map[string][]store.Block{}
	var all []store.Block
	token := ""
	for {
		page, next, err := st.ListBlocks(ctx, store.BlockFilter{SiteID: siteID}, store.Page{Size: store.MaxPageSize, Token: token})
		if err != nil {
			t.Fatal(err)
		}
		all = append(all, page...)
		if next == "" {
			break
		}
		token = next
	}
	framesByBlock := map[string]int{}
	for _, b := range all {
		var spec nightloomv1.Block
		if err := proto.Unmarshal(b.Spec, &spec); err != nil {
			t.Fatalf("round %d: block %s: %v", round, b.ID, err)
		}
		call, _, _ := strings.Cut(spec.GetLabel(), "#")
		byCall[call] = append(byCall[call], b)
		if b.FramesDone > b.FramesWanted || b.FramesDone < 0 {
			t.Errorf("round %d: block %s has %d of %d frames", round, b.ID, b.FramesDone, b.FramesWanted)
		}
		framesByBlock[b.ID] = b.FramesDone
	}
	for call := range byCall {
		if _, ok := L.queues[call]; !ok && !strings.HasPrefix(call, "initial-") {
			t.Errorf("round %d: blocks of a call nobody made: %q", round, call)
		}
	}
	for id, c := range L.queues {
		got := byCall[id]
		want := len(c.req.GetBlocks())
		switch {
		case len(got) == want:
			if !c.acked && !c.present {
				L.doubtful++
				L.doubtfulCommitted++
			}
			c.present = true
			if c.acked {
				var ids []string
				for _, b := range got {
					ids = append(ids, b.ID)
				}
				sort.Strings(ids)
				ack := append([]string(nil), c.ids...)
				sort.Strings(ack)
				if fmt.Sprint(ids) != fmt.Sprint(ack) {
					t.Errorf("round %d: QueueBlocks %s acknowledged %v, stored %v", round, id, ack, ids)
				}
			}
		case len(got) == 0:
			if c.acked {
				t.Errorf("round %d: acknowledged QueueBlocks %s is lost", round, id)
			}
			if c.present {
				t.Errorf("round %d: blocks of %s were stored before and are gone", round, id)
			}
			if !c.acked && !c.present {
				L.doubtful++
			}
		default:
			t.Errorf("round %d: QueueBlocks %s is half applied: %d of %d blocks stored", round, id, len(got), want)
		}
	}

	// Exactly once: a block's frames done is min(wanted, the frames kept of
	// its stored reports), whatever their order (each adds what still fits).
	for _, b := range all {
		kept := 0
		token := ""
		for {
			page, next, err := st.ListProgressReports(ctx, b.ID, store.Page{Size: store.MaxPageSize, Token: token})
			if err != nil {
				t.Fatal(err)
			}
			for _, r := range page {
				kept += r.FramesKept
			}
			if next == "" {
				break
			}
			token = next
		}
		if want := min(b.FramesWanted, kept); b.FramesDone != want {
			t.Errorf("round %d: block %s has %d frames done; its stored reports kept %d of %d wanted",
				round, b.ID, b.FramesDone, kept, b.FramesWanted)
		}
	}
}

// crashRetries resends, to the restarted daemon, every call whose outcome
// the client did not learn, and a few acknowledged ones. A call the store
// holds must be answered as a duplicate; one it does not, applied.
func crashRetries(t *testing.T, L *ledger, queue nightloomv1.QueueServiceClient, tokens map[string]string, rng *rand.Rand) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	tele, opr := bearer(ctx, tokens["telescope"]), bearer(ctx, tokens["operator"])
	L.mu.Lock()
	var reps []string
	var qs []string
	var ackedReps []string
	for id, c := range L.reports {
		if !c.acked {
			reps = append(reps, id)
		} else {
			ackedReps = append(ackedReps, id)
		}
	}
	for id, c := range L.queues {
		if !c.acked {
			qs = append(qs, id)
		}
	}
	sort.Strings(reps)
	sort.Strings(qs)
	sort.Strings(ackedReps)
	for i := 0; i < 3 && len(ackedReps) > 0; i++ {
		reps = append(reps, ackedReps[rng.IntN(len(ackedReps))])
	}
	L.mu.Unlock()
	for _, id := range reps {
		L.mu.Lock()
		c := L.reports[id]
		L.mu.Unlock()
		r, err := queue.ReportProgress(tele, c.req)
		if err != nil {
			t.Fatalf("retry of report %s: %v", id, err)
		}
		if r.GetDuplicate() != c.present {
			t.Errorf("retry of report %s: duplicate %v, but the store held it: %v", id, r.GetDuplicate(), c.present)
		}
		L.mu.Lock()
		c.acked, c.present = true, true
		L.retries++
		if r.GetDuplicate() {
			L.retryDuplicates++
		}
		L.mu.Unlock()
	}
	for _, id := range qs {
		L.mu.Lock()
		c := L.queues[id]
		L.mu.Unlock()
		r, err := queue.QueueBlocks(opr, c.req)
		if err != nil {
			t.Fatalf("retry of QueueBlocks %s: %v", id, err)
		}
		if r.GetDuplicate() != c.present {
			t.Errorf("retry of QueueBlocks %s: duplicate %v, but the store held it: %v", id, r.GetDuplicate(), c.present)
		}
		L.mu.Lock()
		c.acked, c.present = true, true
		L.retries++
		if r.GetDuplicate() {
			L.retryDuplicates++
		}
		for _, b := range r.GetBlocks() {
			c.ids = append(c.ids, b.GetId())
			L.blocks = append(L.blocks, b.GetId())
		}
		L.mu.Unlock()
	}
}
