package store

// Durability across process death: a child process writes as fast as it can
// and prints one line per call that returned; the parent kills it with
// SIGKILL at a random moment, reopens the file and checks that every
// acknowledged call is there, exactly once, and that nothing is half applied.
//
// What this does and does not show: SIGKILL loses the process, not the
// operating system's page cache, so it tests SQLite's transactions and our use
// of them (all or nothing, acknowledged means committed); it cannot show that
// synchronous=FULL survives a power cut, which only pulling the plug would.

import (
	"bufio"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"
)

const (
	crashPathEnv  = "NIGHTLOOM_STORE_CRASH_DB"
	crashRoundEnv = "NIGHTLOOM_STORE_CRASH_ROUND"
	crashBlocks   = 4
	crashWanted   = 300
	crashBatch    = 3
)

var crashT0 = time.Date(2031, 8, 1, 22, 0, 0, 0, time.UTC)

// TestCrashChild is the child process of TestKillDuringWrites; run alone it
// skips.
func TestCrashChild(t *testing.T) {
	path := os.Getenv(crashPathEnv)
	if path == "" {
		t.Skip("helper process of TestKillDuringWrites")
	}
	round := os.Getenv(crashRoundEnv)
	db, err := Open(path, Options{})
	if err != nil {
		fmt.Println("child open:", err)
		os.Exit(3)
	}
	ctx := t.Context()
	for i := 0; i < 1_000_000; i++ {
		if i%5 == 4 {
			batch := make([]Block, crashBatch)
			for k := range batch {
				batch[k] = Block{ID: fmt.Sprintf("n%s-%d-%d", round, i, k), SiteID: "s", TargetID: "t", FramesWanted: 2}
			}
			if _, err := db.CreateBlocks(ctx, batch); err != nil {
				fmt.Println("child error:", err)
				os.Exit(4)
			}
			fmt.Printf("ack batch n%s-%d\n", round, i)
			continue
		}
		id := fmt.Sprintf("r%s-%d", round, i)
		block := fmt.Sprintf("b%d", i%crashBlocks)
		if _, _, err := db.ReportProgress(ctx, ProgressReport{ReportID: id, BlockID: block, FramesKept: 1,
			Start: crashT0, End: crashT0.Add(time.Minute), Outcome: "ok"}); err != nil {
			fmt.Println("child error:", err)
			os.Exit(4)
		}
		fmt.Printf("ack report %s %s\n", id, block)
	}
}

func TestKillDuringWrites(t *testing.T) {
	if os.Getenv(crashPathEnv) != "" {
		t.Skip("in the child")
	}
	rounds := 20
	if testing.Short() {
		rounds = 5
	}
	ctx := t.Context()
	path := filepath.Join(t.TempDir(), "crash.db")
	db, err := Open(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	_, err = db.CreateSite(ctx, Site{ID: "s", Name: "s"})
	if err == nil {
		_, err = db.CreateTarget(ctx, Target{ID: "t", Name: "t", Kind: KindFixed})
	}
	for i := 0; err == nil && i < crashBlocks; i++ {
		_, err = db.CreateBlocks(ctx, []Block{{ID: fmt.Sprint("b", i), SiteID: "s", TargetID: "t", FramesWanted: crashWanted}})
	}
	if err != nil {
		t.Fatal(err)
	}
	if err := db.Close(); err != nil {
		t.Fatal(err)
	}

	rng := rand.New(rand.NewPCG(2031, 8)) // fixed seed: the same kill points each run
	reports := map[string]string{}        // acknowledged report id -> block
	batches := map[string]bool{}          // acknowledged batch prefixes
	for round := range rounds {
		killAfter := 10 + rng.IntN(150)
		cmd := exec.Command(os.Args[0], "-test.run=^TestCrashChild$", "-test.count=1")
		cmd.Env = append(os.Environ(), crashPathEnv+"="+path, crashRoundEnv+"="+strconv.Itoa(round))
		out, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		cmd.Stderr = os.Stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		acks, killed := 0, false
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			f := strings.Fields(sc.Text())
			switch {
			case len(f) == 4 && f[0] == "ack" && f[1] == "report":
				reports[f[2]] = f[3]
			case len(f) == 3 && f[0] == "ack" && f[1] == "batch":
				batches[f[2]] = true
			case strings.HasPrefix(sc.Text(), "child"):
				t.Fatalf("round %d: %s", round, sc.Text())
			default:
				continue
			}
			// Lines read after the kill are still acknowledgements: the
			// child printed them after its call had returned.
			if acks++; acks == killAfter && !killed {
				if err := cmd.Process.Kill(); err != nil { // SIGKILL
					t.Fatal(err)
				}
				killed = true
			}
		}
		_ = cmd.Wait()
		if !killed {
			t.Fatalf("round %d: child ended by itself after %d acks", round, acks)
		}
		checkAfterCrash(t, path, round, reports, batches)
	}
	t.Logf("%d rounds killed with SIGKILL; %d reports and %d batches acknowledged, none lost", rounds, len(reports), len(batches))
}

func checkAfterCrash(t *testing.T, path string, round int, reports map[string]string, batches map[string]bool) {
	t.Helper()
	ctx := t.Context()
	db, err := Open(path, Options{})
	if err != nil {
		t.Fatalf("round %d: reopen after kill: %v", round, err)
	}
	defer db.Close()
	if err := db.IntegrityCheck(ctx); err != nil {
		t.Fatalf("round %d: %v", round, err)
	}
	for id, block := range reports {
		r, err := db.GetProgressReport(ctx, id)
		if err != nil || r.BlockID != block {
			t.Fatalf("round %d: acknowledged report %s: %+v, %v", round, id, r, err)
		}
	}
	// Every batch is whole or absent, and every acknowledged one is there.
	count := map[string]int{}
	rows, err := db.r.QueryContext(ctx, `SELECT id FROM blocks WHERE id LIKE 'n%'`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var id string
		_ = rows.Scan(&id)
		count[id[:strings.LastIndexByte(id, '-')]]++
	}
	rows.Close()
	for prefix, n := range count {
		if n != crashBatch {
			t.Fatalf("round %d: batch %s has %d of %d blocks", round, prefix, n, crashBatch)
		}
	}
	for prefix := range batches {
		if count[prefix] != crashBatch {
			t.Fatalf("round %d: acknowledged batch %s has %d blocks", round, prefix, count[prefix])
		}
	}
	var stored int
	if err := db.r.QueryRowContext(ctx, `SELECT COUNT(*) FROM progress_reports`).Scan(&stored); err != nil {
		t.Fatal(err)
	}
	if stored < len(reports) {
		t.Fatalf("round %d: %d reports stored, %d acknowledged", round, stored, len(reports))
	}
	// Each one-frame report adds a frame until its block is full, so a
	// block's frames done is min(wanted, its reports) whatever the order.
	for i := range crashBlocks {
		id := fmt.Sprint("b", i)
		var n int
		if err := db.r.QueryRowContext(ctx, `SELECT COUNT(*) FROM progress_reports WHERE block_id = ?`, id).Scan(&n); err != nil {
			t.Fatal(err)
		}
		b, err := db.GetBlock(ctx, id)
		if err != nil {
			t.Fatal(err)
		}
		if b.FramesDone != min(crashWanted, n) || b.FramesDone > b.FramesWanted {
			t.Fatalf("round %d: block %s has %d of %d frames after %d one-frame reports", round, id, b.FramesDone, b.FramesWanted, n)
		}
	}
}
