package store_test

import (
	"errors"
	"path/filepath"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/store"
	"github.com/nightloom/nightloom/internal/store/storetest"
)

func openFile(t *testing.T) *store.DB {
	t.Helper()
	db, err := store.Open(filepath.Join(t.TempDir(), "nightloom.db"), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := db.Close(); err != nil {
			t.Errorf("close: %v", err)
		}
	})
	return db
}

func openMemory(t *testing.T) *store.DB {
	t.Helper()
	db, err := store.Open(":memory:", store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := db.Close(); err != nil {
			t.Errorf("close: %v", err)
		}
	})
	return db
}

func TestConformanceFile(t *testing.T)   { storetest.Run(t, openFile) }
func TestConformanceMemory(t *testing.T) { storetest.Run(t, openMemory) }

// Each Open of ":memory:" is its own database.
func TestMemoryDatabasesAreSeparate(t *testing.T) {
	a, b := openMemory(t), openMemory(t)
	if _, err := a.CreateSite(t.Context(), store.Site{ID: "s", Name: "a"}); err != nil {
		t.Fatal(err)
	}
	if _, err := b.GetSite(t.Context(), "s"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("site of one in-memory database seen in another: %v", err)
	}
}

// TestReopen closes a file database and opens it again: every kind of record
// is there, and the next plan version continues the sequence.
func TestReopen(t *testing.T) {
	ctx := t.Context()
	path := filepath.Join(t.TempDir(), "reopen.db")
	db, err := store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2030, 11, 2, 20, 0, 0, 0, time.UTC)
	s, err := db.CreateSite(ctx, store.Site{ID: "s", Name: "hill", Spec: []byte{1, 2, 3}})
	must(t, err)
	tg, err := db.CreateTarget(ctx, store.Target{ID: "t", Name: "comet", Kind: store.KindOrbit, Spec: []byte{4}})
	must(t, err)
	_, err = db.CreateBlocks(ctx, []store.Block{
		{ID: "b1", SiteID: "s", TargetID: "t", Priority: 2, FramesWanted: 4},
		{ID: "b2", SiteID: "s", TargetID: "t", Priority: 1, FramesWanted: 9},
	})
	must(t, err)
	b1, _, err := db.ReportProgress(ctx, store.ProgressReport{ReportID: "r1", BlockID: "b1", FramesKept: 4, Start: t0, End: t0.Add(time.Hour), Outcome: "ok"})
	must(t, err)
	b2, err := db.WithdrawBlock(ctx, "b2")
	must(t, err)
	p, err := db.CreatePlan(ctx, store.Plan{ID: "p1", SiteID: "s", Start: t0, End: t0.Add(10 * time.Hour), Body: []byte("body")})
	must(t, err)
	tok, err := db.CreateToken(ctx, store.Token{ID: "k", Hash: make([]byte, 32), Role: "admin", Label: "first"})
	must(t, err)
	must(t, db.Close())

	db, err = store.Open(path, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if got, err := db.GetSite(ctx, "s"); err != nil || got.Name != s.Name || !got.CreatedAt.Equal(s.CreatedAt) || got.Revision != 1 {
		t.Fatalf("site after reopen: %+v, %v", got, err)
	}
	if got, err := db.GetTarget(ctx, "t"); err != nil || got.Kind != tg.Kind || string(got.Spec) != string(tg.Spec) {
		t.Fatalf("target after reopen: %+v, %v", got, err)
	}
	if got, err := db.GetBlock(ctx, "b1"); err != nil || got.FramesDone != 4 || got.State != store.StateCompleted || got.Revision != b1.Revision {
		t.Fatalf("block b1 after reopen: %+v, %v; want %+v", got, err, b1)
	}
	if got, err := db.GetBlock(ctx, "b2"); err != nil || got.State != store.StateWithdrawn || got.Revision != b2.Revision {
		t.Fatalf("block b2 after reopen: %+v, %v", got, err)
	}
	if _, dup, err := db.ReportProgress(ctx, store.ProgressReport{ReportID: "r1", BlockID: "b1", FramesKept: 4, Start: t0, End: t0.Add(time.Hour), Outcome: "ok"}); err != nil || !dup {
		t.Fatalf("retried report after reopen: duplicate %v, %v; want a duplicate", dup, err)
	}
	if got, err := db.LatestPlan(ctx, "s"); err != nil || got.ID != p.ID || string(got.Body) != "body" {
		t.Fatalf("plan after reopen: %+v, %v", got, err)
	}
	if next, err := db.CreatePlan(ctx, store.Plan{ID: "p2", SiteID: "s", Start: t0, End: t0}); err != nil || next.Version != 2 {
		t.Fatalf("next plan after reopen: %+v, %v; want version 2", next, err)
	}
	if got, err := db.TokenByHash(ctx, make([]byte, 32)); err != nil || got.ID != tok.ID || got.Label != "first" {
		t.Fatalf("token after reopen: %+v, %v", got, err)
	}
	if err := db.IntegrityCheck(ctx); err != nil {
		t.Fatal(err)
	}
}

// TestFailedCreateBlocksLeavesNothing: the last block of a large batch names a
// missing target; none of the batch is stored, in this connection or after a
// reopen.
func TestFailedCreateBlocksLeavesNothing(t *testing.T) {
	ctx := t.Context()
	path := filepath.Join(t.TempDir(), "batch.db")
	db, err := store.Open(path, store.Options{})
	must(t, err)
	_, err = db.CreateSite(ctx, store.Site{ID: "s", Name: "s"})
	must(t, err)
	_, err = db.CreateTarget(ctx, store.Target{ID: "t", Name: "t", Kind: store.KindFixed})
	must(t, err)
	batch := make([]store.Block, 500)
	for i := range batch {
		batch[i] = store.Block{ID: "b" + string(rune('A'+i%26)) + time.Duration(i).String(), SiteID: "s", TargetID: "t", FramesWanted: 3}
	}
	batch[len(batch)-1].TargetID = "missing"
	_, err = db.CreateBlocks(ctx, batch)
	if !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("batch with a missing target: %v, want ErrNotFound", err)
	}
	check := func(db *store.DB, when string) {
		t.Helper()
		list, _, err := db.ListBlocks(ctx, store.BlockFilter{}, store.Page{})
		must(t, err)
		n, err := db.QueueSize(ctx, "")
		must(t, err)
		if len(list) != 0 || n != 0 {
			t.Fatalf("%s: %d blocks listed, queue size %d; want none", when, len(list), n)
		}
		if _, err := db.GetBlock(ctx, batch[0].ID); !errors.Is(err, store.ErrNotFound) {
			t.Fatalf("%s: first block of the failed batch: %v", when, err)
		}
	}
	check(db, "same connection")
	must(t, db.Close())
	db, err = store.Open(path, store.Options{})
	must(t, err)
	defer db.Close()
	check(db, "after reopen")
	must(t, db.IntegrityCheck(ctx))
}

func must(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}
