package store_test

import (
	"context"
	"fmt"
	"time"

	"github.com/nightloom/nightloom/internal/store"
)

// A retried progress report is counted once, and frames done never pass
// frames wanted.
func ExampleDB_ReportProgress() {
	ctx := context.Background()
	db, err := store.Open(":memory:", store.Options{})
	if err != nil {
		panic(err)
	}
	defer db.Close()
	_, _ = db.CreateSite(ctx, store.Site{ID: "hill", Name: "Hill Top Dome"})
	_, _ = db.CreateTarget(ctx, store.Target{ID: "m-x", Name: "Comet X", Kind: store.KindOrbit})
	_, _ = db.CreateBlocks(ctx, []store.Block{{ID: "blk", SiteID: "hill", TargetID: "m-x", FramesWanted: 10}})

	start := time.Date(2031, 4, 2, 3, 40, 0, 0, time.UTC)
	r := store.ProgressReport{ReportID: "run-1", BlockID: "blk", FramesKept: 6, Start: start, End: start.Add(6 * time.Minute), Outcome: "ok"}
	for range 2 { // the second call is a retry
		b, dup, _ := db.ReportProgress(ctx, r)
		fmt.Printf("%d/%d %s duplicate=%v\n", b.FramesDone, b.FramesWanted, b.State, dup)
	}
	r.ReportID, r.FramesKept = "run-2", 6
	b, _, _ := db.ReportProgress(ctx, r)
	fmt.Printf("%d/%d %s\n", b.FramesDone, b.FramesWanted, b.State)
	// Output:
	// 6/10 queued duplicate=false
	// 6/10 queued duplicate=true
	// 10/10 completed
}
