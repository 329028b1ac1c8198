// Package storetest is the conformance suite of internal/store. Every way of
// opening a store (a file database, an in-memory one, ...) must pass Run; the
// store's own tests run it against each, so a configuration cannot drift.
//
// The suite only uses the store's exported API. Each subtest opens its own
// database with the function it is given and runs in parallel with the
// others.
package storetest

import (
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/store"
)

// Run runs the conformance suite. open must return a new, empty database for
// each call and close it when t ends (t.Cleanup).
func Run(t *testing.T, open func(t *testing.T) *store.DB) {
	tests := []struct {
		name string
		fn   func(t *testing.T, db *store.DB)
	}{
		{"SchemaVersion", testSchemaVersion},
		{"Sites", testSites},
		{"Targets", testTargets},
		{"Blocks", testBlocks},
		{"BlockFilters", testBlockFilters},
		{"Withdraw", testWithdraw},
		{"QueueSize", testQueueSize},
		{"DeleteInUse", testDeleteInUse},
		{"CreateBlocksAllOrNothing", testCreateBlocksAllOrNothing},
		{"Progress", testProgress},
		{"ProgressOnClosedBlocks", testProgressOnClosedBlocks},
		{"ProgressConcurrentDuplicates", testProgressConcurrentDuplicates},
		{"ProgressConcurrentNeverExceeds", testProgressConcurrentNeverExceeds},
		{"Plans", testPlans},
		{"PlansConcurrentVersions", testPlansConcurrentVersions},
		{"PlansTogether", testPlansTogether},
		{"Tokens", testTokens},
		{"ImportTargets", testImportTargets},
		{"Magnitudes", testMagnitudes},
		{"Programs", testPrograms},
		{"ProgramCharges", testProgramCharges},
		{"Paging", testPaging},
		{"PagingTokens", testPagingTokens},
		{"PagingWhileInserting", testPagingWhileInserting},
		{"PageSizeLimit", testPageSizeLimit},
		{"ErrorMapping", testErrorMapping},
		{"CanceledContext", testCanceledContext},
		{"IntegrityCheck", testIntegrityCheck},
		{"Networks", testNetworks},
		{"NetworkProgressTwoSites", testNetworkProgressTwoSites},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			tc.fn(t, open(t))
		})
	}
}

// ---- helpers ----

func wantErr(t *testing.T, what string, err, want error) {
	t.Helper()
	if !errors.Is(err, want) {
		t.Fatalf("%s: got error %v, want %v", what, err, want)
	}
}

func noErr(t *testing.T, what string, err error) {
	t.Helper()
	if err != nil {
		t.Fatalf("%s: %v", what, err)
	}
}

func site(t *testing.T, db *store.DB, id string) store.Site {
	t.Helper()
	s, err := db.CreateSite(t.Context(), store.Site{ID: id, Name: "site " + id, Spec: []byte("spec of " + id)})
	noErr(t, "create site "+id, err)
	return s
}

func target(t *testing.T, db *store.DB, id string) store.Target {
	t.Helper()
	tg, err := db.CreateTarget(t.Context(), store.Target{ID: id, Name: "target " + id, Kind: store.KindFixed, Spec: []byte("radec " + id)})
	noErr(t, "create target "+id, err)
	return tg
}

func newBlock(id, siteID, targetID string, wanted int) store.Block {
	return store.Block{ID: id, SiteID: siteID, TargetID: targetID, Priority: 1.5, FramesWanted: wanted, Spec: []byte("block " + id)}
}

func blocks(t *testing.T, db *store.DB, bs ...store.Block) []store.Block {
	t.Helper()
	out, err := db.CreateBlocks(t.Context(), bs)
	noErr(t, "create blocks", err)
	return out
}

// t0 is an arbitrary instant for report and plan intervals.
var t0 = time.Date(2031, 3, 14, 2, 10, 0, 123456789, time.UTC)

func report(id, blockID string, kept int) store.ProgressReport {
	return store.ProgressReport{ReportID: id, BlockID: blockID, FramesKept: kept,
		Start: t0, End: t0.Add(time.Duration(kept) * time.Minute), Outcome: "ok"}
}

func hashOf(secret string) []byte {
	h := sha256.Sum256([]byte(secret))
	return h[:]
}

func sameTime(a, b time.Time) bool { return a.Equal(b) && a.Location() == b.Location() }

func checkSite(t *testing.T, what string, got, want store.Site) {
	t.Helper()
	if got.ID != want.ID || got.Name != want.Name || !bytes.Equal(got.Spec, want.Spec) ||
		!sameTime(got.CreatedAt, want.CreatedAt) || !sameTime(got.UpdatedAt, want.UpdatedAt) || got.Revision != want.Revision {
		t.Fatalf("%s:\n got %+v\nwant %+v", what, got, want)
	}
}

func checkTarget(t *testing.T, what string, got, want store.Target) {
	t.Helper()
	if got.ID != want.ID || got.Name != want.Name || got.Kind != want.Kind || !bytes.Equal(got.Spec, want.Spec) ||
		!sameTime(got.CreatedAt, want.CreatedAt) || !sameTime(got.UpdatedAt, want.UpdatedAt) || got.Revision != want.Revision {
		t.Fatalf("%s:\n got %+v\nwant %+v", what, got, want)
	}
}

func checkBlock(t *testing.T, what string, got, want store.Block) {
	t.Helper()
	if got.ID != want.ID || got.SiteID != want.SiteID || got.TargetID != want.TargetID || got.Priority != want.Priority ||
		got.State != want.State || got.FramesWanted != want.FramesWanted || got.FramesDone != want.FramesDone ||
		!bytes.Equal(got.Spec, want.Spec) || !sameTime(got.CreatedAt, want.CreatedAt) ||
		!sameTime(got.UpdatedAt, want.UpdatedAt) || got.Revision != want.Revision || got.Program != want.Program {
		t.Fatalf("%s:\n got %+v\nwant %+v", what, got, want)
	}
}

func checkPlan(t *testing.T, what string, got, want store.Plan) {
	t.Helper()
	if got.ID != want.ID || got.SiteID != want.SiteID || got.Version != want.Version || !sameTime(got.Start, want.Start) ||
		!sameTime(got.End, want.End) || !bytes.Equal(got.Body, want.Body) || !sameTime(got.CreatedAt, want.CreatedAt) {
		t.Fatalf("%s:\n got %+v\nwant %+v", what, got, want)
	}
}

func checkToken(t *testing.T, what string, got, want store.Token) {
	t.Helper()
	revokedEqual := (got.RevokedAt == nil) == (want.RevokedAt == nil) &&
		(got.RevokedAt == nil || sameTime(*got.RevokedAt, *want.RevokedAt))
	expiresEqual := (got.ExpiresAt == nil) == (want.ExpiresAt == nil) &&
		(got.ExpiresAt == nil || sameTime(*got.ExpiresAt, *want.ExpiresAt))
	if got.ID != want.ID || !bytes.Equal(got.Hash, want.Hash) || got.Role != want.Role || got.Label != want.Label ||
		!sameTime(got.CreatedAt, want.CreatedAt) || !revokedEqual || !expiresEqual || got.SiteID != want.SiteID {
		t.Fatalf("%s:\n got %+v\nwant %+v", what, got, want)
	}
}

func checkReport(t *testing.T, what string, got, want store.ProgressReport) {
	t.Helper()
	if got.ReportID != want.ReportID || got.BlockID != want.BlockID || got.FramesKept != want.FramesKept ||
		!sameTime(got.Start, want.Start) || !sameTime(got.End, want.End) || got.Outcome != want.Outcome ||
		got.ReceivedAt.IsZero() {
		t.Fatalf("%s:\n got %+v\nwant %+v (any ReceivedAt)", what, got, want)
	}
}

// pageAll walks a list page by page with the given size and returns the
// records in order. It fails when a page is larger than size, when a page
// other than the last is short, or when an empty token comes before the end.
func pageAll[T any](t *testing.T, what string, size int, list func(store.Page) ([]T, string, error)) []T {
	t.Helper()
	var all []T
	token := ""
	for pages := 0; ; pages++ {
		if pages > 10000 {
			t.Fatalf("%s: paging does not end", what)
		}
		got, next, err := list(store.Page{Size: size, Token: token})
		noErr(t, what, err)
		if size > 0 && len(got) > size {
			t.Fatalf("%s: page of %d records, size %d", what, len(got), size)
		}
		all = append(all, got...)
		if next == "" {
			return all
		}
		if size > 0 && len(got) != size {
			t.Fatalf("%s: short page (%d of %d) with a next token", what, len(got), size)
		}
		token = next
	}
}

func ids[T any](xs []T, id func(T) string) []string {
	out := make([]string, len(xs))
	for i, x := range xs {
		out[i] = id(x)
	}
	return out
}

// ---- schema ----

func testSchemaVersion(t *testing.T, db *store.DB) {
	v, err := db.SchemaVersion(t.Context())
	noErr(t, "schema version", err)
	if v < 3 {
		t.Fatalf("schema version %d, want at least 3 (sites, plans, tokens)", v)
	}
}

// ---- sites and targets ----

func testSites(t *testing.T, db *store.DB) {
	ctx := t.Context()
	s := site(t, db, "s1")
	if s.Revision != 1 || s.CreatedAt.IsZero() || !sameTime(s.CreatedAt, s.UpdatedAt) || s.CreatedAt.Location() != time.UTC {
		t.Fatalf("created site %+v: want revision 1 and CreatedAt = UpdatedAt, set, in UTC", s)
	}
	got, err := db.GetSite(ctx, "s1")
	noErr(t, "get site", err)
	checkSite(t, "get after create", got, s)

	// A nil spec is stored as an empty one.
	empty, err := db.CreateSite(ctx, store.Site{ID: "s-empty", Name: "no spec"})
	noErr(t, "create site without spec", err)
	got, err = db.GetSite(ctx, "s-empty")
	noErr(t, "get site without spec", err)
	if len(got.Spec) != 0 || got.Name != empty.Name {
		t.Fatalf("site without spec read back as %+v", got)
	}

	upd := s
	upd.Name, upd.Spec = "renamed", []byte("new spec")
	u, err := db.UpdateSite(ctx, upd)
	noErr(t, "update site", err)
	if u.Revision != 2 || u.Name != "renamed" || !sameTime(u.CreatedAt, s.CreatedAt) || u.UpdatedAt.Before(s.UpdatedAt) {
		t.Fatalf("updated site %+v: want revision 2, new name, same CreatedAt, UpdatedAt not before %v", u, s.UpdatedAt)
	}
	got, err = db.GetSite(ctx, "s1")
	noErr(t, "get after update", err)
	checkSite(t, "get after update", got, u)

	// An update based on revision 1 is now stale and changes nothing.
	stale := s
	stale.Name = "stale"
	_, err = db.UpdateSite(ctx, stale)
	wantErr(t, "update with stale revision", err, store.ErrConflict)
	got, _ = db.GetSite(ctx, "s1")
	checkSite(t, "get after stale update", got, u)

	noErr(t, "delete site", db.DeleteSite(ctx, "s1"))
	_, err = db.GetSite(ctx, "s1")
	wantErr(t, "get deleted site", err, store.ErrNotFound)
	wantErr(t, "delete deleted site", db.DeleteSite(ctx, "s1"), store.ErrNotFound)
}

func testTargets(t *testing.T, db *store.DB) {
	ctx := t.Context()
	tg, err := db.CreateTarget(ctx, store.Target{ID: "c1", Name: "comet", Kind: store.KindOrbit, Spec: []byte{0, 1, 2, 255}})
	noErr(t, "create target", err)
	if tg.Revision != 1 || tg.CreatedAt.IsZero() || !sameTime(tg.CreatedAt, tg.UpdatedAt) {
		t.Fatalf("created target %+v", tg)
	}
	got, err := db.GetTarget(ctx, "c1")
	noErr(t, "get target", err)
	checkTarget(t, "get after create", got, tg)

	upd := tg
	upd.Kind, upd.Name, upd.Spec = store.KindFixed, "star", []byte("radec")
	u, err := db.UpdateTarget(ctx, upd)
	noErr(t, "update target", err)
	if u.Revision != 2 || u.Kind != store.KindFixed || !sameTime(u.CreatedAt, tg.CreatedAt) {
		t.Fatalf("updated target %+v", u)
	}
	got, _ = db.GetTarget(ctx, "c1")
	checkTarget(t, "get after update", got, u)

	_, err = db.UpdateTarget(ctx, tg)
	wantErr(t, "update with stale revision", err, store.ErrConflict)
	bad := u
	bad.Kind = "planet"
	_, err = db.UpdateTarget(ctx, bad)
	wantErr(t, "update to unknown kind", err, store.ErrInvalid)
	got, _ = db.GetTarget(ctx, "c1")
	checkTarget(t, "get after refused updates", got, u)

	noErr(t, "delete target", db.DeleteTarget(ctx, "c1"))
	_, err = db.GetTarget(ctx, "c1")
	wantErr(t, "get deleted target", err, store.ErrNotFound)
}

// ---- blocks ----

func testBlocks(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	in := []store.Block{newBlock("b3", "s", "t", 5), newBlock("b1", "s", "t", 1), newBlock("b2", "s", "t", 40)}
	in[1].Priority = -2.25
	in[2].State = store.StateQueued // explicit queued is accepted too
	out := blocks(t, db, in...)
	if len(out) != len(in) {
		t.Fatalf("CreateBlocks returned %d blocks, want %d", len(out), len(in))
	}
	for i, b := range out {
		if b.ID != in[i].ID || b.State != store.StateQueued || b.FramesDone != 0 || b.Revision != 1 || b.CreatedAt.IsZero() {
			t.Fatalf("created block %d: %+v", i, b)
		}
		got, err := db.GetBlock(ctx, b.ID)
		noErr(t, "get block", err)
		checkBlock(t, "get after create", got, b)
	}
	// Listing keeps the order of the batch (not the order of the ids).
	list, _, err := db.ListBlocks(ctx, store.BlockFilter{SiteID: "s"}, store.Page{})
	noErr(t, "list blocks", err)
	if got, want := ids(list, func(b store.Block) string { return b.ID }), []string{"b3", "b1", "b2"}; !slices.Equal(got, want) {
		t.Fatalf("list order %v, want the batch order %v", got, want)
	}
	empty, err := db.CreateBlocks(ctx, nil)
	if err != nil || len(empty) != 0 {
		t.Fatalf("CreateBlocks(nil) = %v, %v; want nothing, nil", empty, err)
	}
	_, err = db.GetBlock(ctx, "nope")
	wantErr(t, "get unknown block", err, store.ErrNotFound)
}

func testBlockFilters(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s1")
	site(t, db, "s2")
	target(t, db, "t1")
	target(t, db, "t2")
	blocks(t, db,
		newBlock("a", "s1", "t1", 3), newBlock("b", "s1", "t2", 3), newBlock("c", "s2", "t1", 3),
		newBlock("d", "s2", "t2", 3), newBlock("e", "s1", "t1", 2))
	_, err := db.WithdrawBlock(ctx, "b")
	noErr(t, "withdraw", err)
	_, _, err = db.ReportProgress(ctx, report("r-e", "e", 2))
	noErr(t, "complete e", err)

	// Expected sets worked out by hand from the five blocks above.
	cases := []struct {
		f    store.BlockFilter
		want []string
	}{
		{store.BlockFilter{}, []string{"a", "b", "c", "d", "e"}},
		{store.BlockFilter{SiteID: "s1"}, []string{"a", "b", "e"}},
		{store.BlockFilter{SiteID: "s2"}, []string{"c", "d"}},
		{store.BlockFilter{TargetID: "t1"}, []string{"a", "c", "e"}},
		{store.BlockFilter{State: store.StateQueued}, []string{"a", "c", "d"}},
		{store.BlockFilter{State: store.StateWithdrawn}, []string{"b"}},
		{store.BlockFilter{State: store.StateCompleted}, []string{"e"}},
		{store.BlockFilter{SiteID: "s1", State: store.StateQueued}, []string{"a"}},
		{store.BlockFilter{SiteID: "s2", TargetID: "t2", State: store.StateQueued}, []string{"d"}},
		{store.BlockFilter{SiteID: "unknown"}, nil},
	}
	for _, c := range cases {
		got := pageAll(t, fmt.Sprintf("list %+v", c.f), 2, func(p store.Page) ([]store.Block, string, error) {
			return db.ListBlocks(ctx, c.f, p)
		})
		if g := ids(got, func(b store.Block) string { return b.ID }); !slices.Equal(g, c.want) {
			t.Errorf("ListBlocks(%+v) = %v, want %v", c.f, g, c.want)
		}
	}
	_, _, err = db.ListBlocks(ctx, store.BlockFilter{State: "paused"}, store.Page{})
	wantErr(t, "list with unknown state", err, store.ErrInvalid)
}

func testWithdraw(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	bs := blocks(t, db, newBlock("q", "s", "t", 4), newBlock("c", "s", "t", 1))
	w, err := db.WithdrawBlock(ctx, "q")
	noErr(t, "withdraw", err)
	if w.State != store.StateWithdrawn || w.Revision != bs[0].Revision+1 || w.FramesDone != 0 {
		t.Fatalf("withdrawn block %+v", w)
	}
	got, _ := db.GetBlock(ctx, "q")
	checkBlock(t, "get after withdraw", got, w)

	again, err := db.WithdrawBlock(ctx, "q")
	noErr(t, "withdraw again", err)
	checkBlock(t, "second withdraw changes nothing", again, w)

	_, _, err = db.ReportProgress(ctx, report("r", "c", 1))
	noErr(t, "complete c", err)
	_, err = db.WithdrawBlock(ctx, "c")
	wantErr(t, "withdraw completed block", err, store.ErrConflict)
	got, _ = db.GetBlock(ctx, "c")
	if got.State != store.StateCompleted {
		t.Fatalf("completed block became %q after refused withdraw", got.State)
	}
	_, err = db.WithdrawBlock(ctx, "none")
	wantErr(t, "withdraw unknown block", err, store.ErrNotFound)
}

func testQueueSize(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s1")
	site(t, db, "s2")
	site(t, db, "s3")
	target(t, db, "t")
	blocks(t, db, newBlock("a", "s1", "t", 2), newBlock("b", "s1", "t", 2), newBlock("c", "s1", "t", 2), newBlock("d", "s2", "t", 2))
	want := func(siteID string, n int) {
		t.Helper()
		got, err := db.QueueSize(ctx, siteID)
		noErr(t, "queue size "+siteID, err)
		if got != n {
			t.Fatalf("QueueSize(%q) = %d, want %d", siteID, got, n)
		}
	}
	want("s1", 3)
	want("s2", 1)
	want("s3", 0)
	want("", 4)
	_, err := db.WithdrawBlock(ctx, "a")
	noErr(t, "withdraw", err)
	want("s1", 2)
	_, _, err = db.ReportProgress(ctx, report("r1", "b", 1))
	noErr(t, "partial report", err)
	want("s1", 2) // partly done is still queued
	_, _, err = db.ReportProgress(ctx, report("r2", "b", 1))
	noErr(t, "completing report", err)
	want("s1", 1)
	want("", 2)
	_, err = db.QueueSize(ctx, "unknown")
	wantErr(t, "queue size of unknown site", err, store.ErrNotFound)
}

func testDeleteInUse(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	site(t, db, "s2")
	target(t, db, "t")
	target(t, db, "t2")
	blocks(t, db, newBlock("q", "s", "t", 3), newBlock("done", "s2", "t2", 1))

	wantErr(t, "delete site with a queued block", db.DeleteSite(ctx, "s"), store.ErrConflict)
	wantErr(t, "delete target with a queued block", db.DeleteTarget(ctx, "t"), store.ErrConflict)
	if _, err := db.GetSite(ctx, "s"); err != nil {
		t.Fatalf("site gone after refused delete: %v", err)
	}
	if _, err := db.GetBlock(ctx, "q"); err != nil {
		t.Fatalf("block gone after refused delete: %v", err)
	}

	// Once the block is withdrawn the target may go, and takes the block
	// (and its reports) with it.
	_, _, err := db.ReportProgress(ctx, report("rq", "q", 1))
	noErr(t, "report", err)
	_, err = db.WithdrawBlock(ctx, "q")
	noErr(t, "withdraw", err)
	noErr(t, "delete target without queued blocks", db.DeleteTarget(ctx, "t"))
	_, err = db.GetBlock(ctx, "q")
	wantErr(t, "block of deleted target", err, store.ErrNotFound)
	_, err = db.GetProgressReport(ctx, "rq")
	wantErr(t, "report of deleted block", err, store.ErrNotFound)

	// A site with a completed block and plans: deleting it takes both.
	_, _, err = db.ReportProgress(ctx, report("rd", "done", 1))
	noErr(t, "complete", err)
	_, err = db.CreatePlan(ctx, store.Plan{ID: "p", SiteID: "s2", Start: t0, End: t0.Add(time.Hour)})
	noErr(t, "plan", err)
	noErr(t, "delete site without queued blocks", db.DeleteSite(ctx, "s2"))
	_, err = db.GetBlock(ctx, "done")
	wantErr(t, "block of deleted site", err, store.ErrNotFound)
	_, err = db.GetPlan(ctx, "p")
	wantErr(t, "plan of deleted site", err, store.ErrNotFound)
	_, err = db.LatestPlan(ctx, "s2")
	wantErr(t, "latest plan of deleted site", err, store.ErrNotFound)
	noErr(t, "integrity after deletes", db.IntegrityCheck(ctx))
}

// testCreateBlocksAllOrNothing: a batch with one bad block stores none of the
// batch, whatever the position of the bad block.
func testCreateBlocksAllOrNothing(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	blocks(t, db, newBlock("old", "s", "t", 2))

	cases := []struct {
		name    string
		bad     store.Block
		want    error
		mention []string // the error names these
	}{
		{"unknown site", newBlock("x", "nosuchsite", "t", 1), store.ErrNotFound, []string{`"x"`, "nosuchsite"}},
		{"unknown target", newBlock("x", "s", "nosuchtarget", 1), store.ErrNotFound, []string{`"x"`, "nosuchtarget"}},
		{"existing id", newBlock("old", "s", "t", 1), store.ErrAlreadyExists, []string{`"old"`}},
		{"repeated id", newBlock("b0", "s", "t", 1), store.ErrAlreadyExists, []string{`"b0"`}},
		{"zero frames", newBlock("x", "s", "t", 0), store.ErrInvalid, []string{`"x"`}},
	}
	for _, c := range cases {
		for pos := 0; pos <= 3; pos++ {
			batch := []store.Block{newBlock("b0", "s", "t", 1), newBlock("b1", "s", "t", 1), newBlock("b2", "s", "t", 1)}
			batch = slices.Insert(batch, pos, c.bad)
			_, err := db.CreateBlocks(ctx, batch)
			wantErr(t, fmt.Sprintf("%s at %d", c.name, pos), err, c.want)
			for _, m := range c.mention {
				if !strings.Contains(err.Error(), m) {
					t.Errorf("%s at %d: error %q does not name %s", c.name, pos, err, m)
				}
			}
			for _, id := range []string{"b0", "b1", "b2", "x"} {
				if _, err := db.GetBlock(ctx, id); !errors.Is(err, store.ErrNotFound) {
					t.Fatalf("%s at %d: block %s was stored (err %v)", c.name, pos, id, err)
				}
			}
			if n, err := db.QueueSize(ctx, "s"); err != nil || n != 1 {
				t.Fatalf("%s at %d: queue size %d, %v; want 1", c.name, pos, n, err)
			}
		}
	}
}

// ---- progress reports ----

func testProgress(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	b := blocks(t, db, newBlock("b", "s", "t", 10))[0]

	r1 := report("r1", "b", 4)
	got, dup, err := db.ReportProgress(ctx, r1)
	noErr(t, "first report", err)
	if dup || got.FramesDone != 4 || got.State != store.StateQueued || got.Revision != b.Revision+1 {
		t.Fatalf("after first report: dup %v, block %+v; want not dup, 4 frames, queued, revision %d", dup, got, b.Revision+1)
	}
	stored, err := db.GetBlock(ctx, "b")
	noErr(t, "get block", err)
	checkBlock(t, "block after report", stored, got)
	rep, err := db.GetProgressReport(ctx, "r1")
	noErr(t, "get report", err)
	checkReport(t, "stored report", rep, r1)

	// The same report again: counted once, nothing changes, same answer.
	again, dup, err := db.ReportProgress(ctx, r1)
	noErr(t, "retried report", err)
	if !dup {
		t.Fatalf("retried report not flagged duplicate")
	}
	checkBlock(t, "retried report", again, got)
	rep2, _ := db.GetProgressReport(ctx, "r1")
	if !sameTime(rep2.ReceivedAt, rep.ReceivedAt) {
		t.Fatalf("retry changed ReceivedAt from %v to %v", rep.ReceivedAt, rep2.ReceivedAt)
	}

	// The same id with other content is refused and changes nothing.
	variants := map[string]func(*store.ProgressReport){
		"frames":  func(r *store.ProgressReport) { r.FramesKept = 5 },
		"outcome": func(r *store.ProgressReport) { r.Outcome = "aborted" },
		"start":   func(r *store.ProgressReport) { r.Start = r.Start.Add(-time.Nanosecond) },
		"end":     func(r *store.ProgressReport) { r.End = r.End.Add(time.Nanosecond) },
		"block":   func(r *store.ProgressReport) { r.BlockID = "other" },
	}
	blocks(t, db, newBlock("other", "s", "t", 10))
	for name, change := range variants {
		r := r1
		change(&r)
		_, _, err := db.ReportProgress(ctx, r)
		wantErr(t, "reused report id, different "+name, err, store.ErrConflict)
	}
	stored, _ = db.GetBlock(ctx, "b")
	checkBlock(t, "block after refused reports", stored, got)

	// Equal instants in another time zone are the same report.
	tz := r1
	tz.Start, tz.End = r1.Start.In(time.FixedZone("X", 3600)), r1.End.In(time.FixedZone("Y", -7200))
	_, dup, err = db.ReportProgress(ctx, tz)
	noErr(t, "same report in other zones", err)
	if !dup {
		t.Fatalf("same instants in another zone not taken as the same report")
	}

	// Zero frames kept: recorded, nothing added, block unchanged.
	got0, dup, err := db.ReportProgress(ctx, report("r0", "b", 0))
	noErr(t, "report of 0 frames", err)
	if dup {
		t.Fatalf("new report flagged duplicate")
	}
	checkBlock(t, "block after 0 frames", got0, got)
	if _, err := db.GetProgressReport(ctx, "r0"); err != nil {
		t.Fatalf("0-frame report not stored: %v", err)
	}

	// More frames than wanted: capped, and the block completes.
	capped, _, err := db.ReportProgress(ctx, report("r2", "b", 25))
	noErr(t, "report beyond wanted", err)
	if capped.FramesDone != 10 || capped.State != store.StateCompleted || capped.Revision != got.Revision+1 {
		t.Fatalf("after capped report: %+v; want 10 of 10, completed, revision %d", capped, got.Revision+1)
	}
	noErr(t, "integrity", db.IntegrityCheck(ctx))

	// Reports are listed in the order they arrived.
	list := pageAll(t, "list reports", 1, func(p store.Page) ([]store.ProgressReport, string, error) {
		return db.ListProgressReports(ctx, "b", p)
	})
	if g, w := ids(list, func(r store.ProgressReport) string { return r.ReportID }), []string{"r1", "r0", "r2"}; !slices.Equal(g, w) {
		t.Fatalf("reports of b: %v, want %v", g, w)
	}
	for _, r := range list {
		if r.FramesKept != map[string]int{"r1": 4, "r0": 0, "r2": 25}[r.ReportID] {
			t.Fatalf("report %s keeps %d frames as sent", r.ReportID, r.FramesKept)
		}
	}

	// An unknown block stores nothing.
	_, _, err = db.ReportProgress(ctx, report("r9", "ghost", 1))
	wantErr(t, "report for unknown block", err, store.ErrNotFound)
	_, err = db.GetProgressReport(ctx, "r9")
	wantErr(t, "report for unknown block was stored", err, store.ErrNotFound)
}

func testProgressOnClosedBlocks(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	blocks(t, db, newBlock("w", "s", "t", 5), newBlock("c", "s", "t", 2))

	// A withdrawn block still counts frames reported for it, up to wanted,
	// and stays withdrawn.
	_, err := db.WithdrawBlock(ctx, "w")
	noErr(t, "withdraw", err)
	w, _, err := db.ReportProgress(ctx, report("rw1", "w", 3))
	noErr(t, "report on withdrawn", err)
	if w.FramesDone != 3 || w.State != store.StateWithdrawn {
		t.Fatalf("withdrawn block after report: %+v", w)
	}
	w, _, err = db.ReportProgress(ctx, report("rw2", "w", 3))
	noErr(t, "second report on withdrawn", err)
	if w.FramesDone != 5 || w.State != store.StateWithdrawn {
		t.Fatalf("withdrawn block after reaching wanted: %+v; want 5 of 5, withdrawn", w)
	}

	// A completed block takes more reports without change.
	c, _, err := db.ReportProgress(ctx, report("rc1", "c", 2))
	noErr(t, "complete", err)
	c2, dup, err := db.ReportProgress(ctx, report("rc2", "c", 4))
	noErr(t, "report on completed", err)
	if dup {
		t.Fatalf("new report on completed block flagged duplicate")
	}
	checkBlock(t, "completed block after another report", c2, c)
	noErr(t, "integrity", db.IntegrityCheck(ctx))
}

// testProgressConcurrentDuplicates sends the same report from many goroutines
// at once: exactly one of them applies it, all see the same block.
func testProgressConcurrentDuplicates(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	blocks(t, db, newBlock("b", "s", "t", 100))
	const senders = 40
	var (
		wg      sync.WaitGroup
		mu      sync.Mutex
		applied int
		errs    []error
		done    []int
	)
	start := make(chan struct{})
	for range senders {
		wg.Go(func() {
			<-start
			b, dup, err := db.ReportProgress(ctx, report("same", "b", 7))
			mu.Lock()
			defer mu.Unlock()
			if err != nil {
				errs = append(errs, err)
				return
			}
			if !dup {
				applied++
			}
			done = append(done, b.FramesDone)
		})
	}
	close(start)
	wg.Wait()
	if len(errs) > 0 {
		t.Fatalf("%d of %d concurrent duplicates failed, first: %v", len(errs), senders, errs[0])
	}
	if applied != 1 {
		t.Fatalf("report applied %d times by %d concurrent senders, want once", applied, senders)
	}
	for _, d := range done {
		if d != 7 {
			t.Fatalf("a sender saw %d frames done, want 7", d)
		}
	}
	b, _ := db.GetBlock(ctx, "b")
	if b.FramesDone != 7 {
		t.Fatalf("frames done %d, want 7", b.FramesDone)
	}
	list, _, err := db.ListProgressReports(ctx, "b", store.Page{})
	noErr(t, "list reports", err)
	if len(list) != 1 {
		t.Fatalf("%d reports stored, want 1", len(list))
	}
}

// testProgressConcurrentNeverExceeds sends distinct reports (and a retry of
// each) from many goroutines whose frames add up to more than wanted.
func testProgressConcurrentNeverExceeds(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	const wanted, senders, each = 50, 30, 3 // 90 frames offered for 50 wanted
	blocks(t, db, newBlock("b", "s", "t", wanted))
	var wg sync.WaitGroup
	errc := make(chan error, 2*senders)
	start := make(chan struct{})
	for i := range senders {
		wg.Go(func() {
			<-start
			r := report(fmt.Sprintf("r%02d", i), "b", each)
			for try := range 2 {
				b, dup, err := db.ReportProgress(ctx, r)
				switch {
				case err != nil:
					errc <- err
				case b.FramesDone > wanted:
					errc <- fmt.Errorf("saw %d frames done of %d", b.FramesDone, wanted)
				case dup != (try == 1):
					errc <- fmt.Errorf("try %d of %s: duplicate %v", try, r.ReportID, dup)
				}
			}
		})
	}
	close(start)
	wg.Wait()
	close(errc)
	for err := range errc {
		t.Fatal(err)
	}
	b, _ := db.GetBlock(ctx, "b")
	if b.FramesDone != wanted || b.State != store.StateCompleted {
		t.Fatalf("block after %d frames offered: %+v; want %d done, completed", senders*each, b, wanted)
	}
	list := pageAll(t, "list reports", 7, func(p store.Page) ([]store.ProgressReport, string, error) {
		return db.ListProgressReports(ctx, "b", p)
	})
	if len(list) != senders {
		t.Fatalf("%d reports stored, want %d", len(list), senders)
	}
	noErr(t, "integrity (frames done = sum applied)", db.IntegrityCheck(ctx))
}

// ---- plans ----

func testPlans(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	site(t, db, "s2")
	site(t, db, "empty")
	mk := func(id, siteID string, v int64) store.Plan {
		t.Helper()
		p, err := db.CreatePlan(ctx, store.Plan{ID: id, SiteID: siteID, Version: 99, Start: t0, End: t0.Add(8 * time.Hour), Body: []byte("plan " + id)})
		noErr(t, "create plan "+id, err)
		if p.Version != v || p.CreatedAt.IsZero() {
			t.Fatalf("plan %s: version %d, want %d (the caller's 99 is ignored)", id, p.Version, v)
		}
		return p
	}
	p1 := mk("p1", "s", 1)
	p2 := mk("p2", "s", 2)
	q1 := mk("q1", "s2", 1)
	p3 := mk("p3", "s", 3)

	got, err := db.GetPlan(ctx, "p2")
	noErr(t, "get plan", err)
	checkPlan(t, "get plan", got, p2)
	got, err = db.PlanByVersion(ctx, "s", 1)
	noErr(t, "plan by version", err)
	checkPlan(t, "plan by version", got, p1)
	got, err = db.LatestPlan(ctx, "s")
	noErr(t, "latest plan", err)
	checkPlan(t, "latest plan of s", got, p3)
	got, err = db.LatestPlan(ctx, "s2")
	noErr(t, "latest plan", err)
	checkPlan(t, "latest plan of s2", got, q1)

	_, err = db.LatestPlan(ctx, "empty")
	wantErr(t, "latest plan of a site without plans", err, store.ErrNotFound)
	_, err = db.PlanByVersion(ctx, "s", 4)
	wantErr(t, "missing version", err, store.ErrNotFound)

	// A refused plan does not use up a version.
	_, err = db.CreatePlan(ctx, store.Plan{ID: "p1", SiteID: "s", Start: t0, End: t0})
	wantErr(t, "plan id reused", err, store.ErrAlreadyExists)
	mk("p4", "s", 4)

	list := pageAll(t, "list plans", 3, func(p store.Page) ([]store.Plan, string, error) { return db.ListPlans(ctx, "s", p) })
	if g, w := ids(list, func(p store.Plan) string { return p.ID }), []string{"p1", "p2", "p3", "p4"}; !slices.Equal(g, w) {
		t.Fatalf("plans of s: %v, want %v", g, w)
	}
	checkPlan(t, "listed plan", list[1], p2)
}

// testPlansTogether: CreatePlans stores the versions of several sites
// (a network's members) in one transaction, each its site's next in the
// order given, and a batch with one bad plan stores none of them.
func testPlansTogether(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "n1")
	site(t, db, "n2")
	pl := func(id, siteID string) store.Plan {
		return store.Plan{ID: id, SiteID: siteID, Start: t0, End: t0.Add(8 * time.Hour), Body: []byte(id)}
	}
	_, err := db.CreatePlan(ctx, pl("n1-a", "n1"))
	noErr(t, "create plan", err)
	got, err := db.CreatePlans(ctx, []store.Plan{pl("n1-b", "n1"), pl("n2-a", "n2"), pl("n1-c", "n1")})
	noErr(t, "create plans", err)
	if len(got) != 3 || got[0].Version != 2 || got[1].Version != 1 || got[2].Version != 3 {
		t.Fatalf("versions %+v, want n1 2, n2 1, n1 3", got)
	}
	for _, p := range got {
		back, err := db.GetPlan(ctx, p.ID)
		noErr(t, "get plan", err)
		checkPlan(t, "plan stored together", back, p)
	}
	// The second plan names an unknown site: nothing of the batch stays.
	_, err = db.CreatePlans(ctx, []store.Plan{pl("n1-d", "n1"), pl("x-a", "nowhere")})
	wantErr(t, "batch with an unknown site", err, store.ErrNotFound)
	_, err = db.GetPlan(ctx, "n1-d")
	wantErr(t, "plan of a refused batch", err, store.ErrNotFound)
	_, err = db.CreatePlans(ctx, []store.Plan{pl("n2-b", "n2"), pl("n1-a", "n1")})
	wantErr(t, "batch reusing an id", err, store.ErrAlreadyExists)
	latest, err := db.LatestPlan(ctx, "n2")
	noErr(t, "latest plan", err)
	if latest.Version != 1 {
		t.Errorf("n2 at version %d after refused batches, want 1", latest.Version)
	}
	_, err = db.CreatePlans(ctx, nil)
	wantErr(t, "empty batch", err, store.ErrInvalid)
}

func testPlansConcurrentVersions(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "a")
	site(t, db, "b")
	const perSite = 16
	var wg sync.WaitGroup
	var mu sync.Mutex
	versions := map[string][]int64{}
	errc := make(chan error, 2*perSite)
	start := make(chan struct{})
	for _, s := range []string{"a", "b"} {
		for i := range perSite {
			wg.Go(func() {
				<-start
				p, err := db.CreatePlan(ctx, store.Plan{ID: fmt.Sprintf("%s-%d", s, i), SiteID: s, Start: t0, End: t0.Add(time.Hour)})
				if err != nil {
					errc <- err
					return
				}
				mu.Lock()
				versions[s] = append(versions[s], p.Version)
				mu.Unlock()
			})
		}
	}
	close(start)
	wg.Wait()
	close(errc)
	for err := range errc {
		t.Fatal(err)
	}
	for _, s := range []string{"a", "b"} {
		v := versions[s]
		slices.Sort(v)
		for i := range v {
			if v[i] != int64(i+1) {
				t.Fatalf("site %s got versions %v, want 1..%d each once", s, v, perSite)
			}
		}
		latest, err := db.LatestPlan(ctx, s)
		noErr(t, "latest", err)
		if latest.Version != perSite {
			t.Fatalf("latest version of %s is %d, want %d", s, latest.Version, perSite)
		}
	}
	noErr(t, "integrity", db.IntegrityCheck(ctx))
}

// ---- tokens ----

func testTokens(t *testing.T, db *store.DB) {
	ctx := t.Context()
	h := hashOf("secret-one")
	tk, err := db.CreateToken(ctx, store.Token{ID: "k1", Hash: h, Role: "telescope", Label: "dome controller"})
	noErr(t, "create token", err)
	if tk.CreatedAt.IsZero() || tk.RevokedAt != nil {
		t.Fatalf("created token %+v", tk)
	}
	h[0] ^= 0xff // the store keeps its own copy of the hash
	if !bytes.Equal(tk.Hash, hashOf("secret-one")) {
		t.Fatalf("returned token shares the caller's hash slice")
	}
	tk2, err := db.CreateToken(ctx, store.Token{ID: "k2", Hash: hashOf("secret-two"), Role: "viewer"})
	noErr(t, "create token", err)

	got, err := db.TokenByHash(ctx, hashOf("secret-one"))
	noErr(t, "token by hash", err)
	checkToken(t, "token by hash", got, tk)
	got, err = db.GetToken(ctx, "k2")
	noErr(t, "get token", err)
	checkToken(t, "get token", got, tk2)
	_, err = db.TokenByHash(ctx, hashOf("not a token"))
	wantErr(t, "unknown hash", err, store.ErrNotFound)

	rev, err := db.RevokeToken(ctx, "k1")
	noErr(t, "revoke", err)
	if rev.RevokedAt == nil || rev.RevokedAt.Before(tk.CreatedAt) {
		t.Fatalf("revoked token %+v", rev)
	}
	_, err = db.TokenByHash(ctx, hashOf("secret-one"))
	wantErr(t, "revoked token by hash", err, store.ErrNotFound)
	got, err = db.GetToken(ctx, "k1")
	noErr(t, "get revoked token", err)
	checkToken(t, "get revoked token", got, rev)
	again, err := db.RevokeToken(ctx, "k1")
	noErr(t, "revoke again", err)
	checkToken(t, "second revoke keeps the first time", again, rev)
	_, err = db.RevokeToken(ctx, "nope")
	wantErr(t, "revoke unknown token", err, store.ErrNotFound)

	list := pageAll(t, "list tokens", 1, func(p store.Page) ([]store.Token, string, error) { return db.ListTokens(ctx, p) })
	if len(list) != 2 {
		t.Fatalf("listed %d tokens, want 2 (revoked ones too)", len(list))
	}
	for _, l := range list {
		want := map[string]store.Token{"k1": rev, "k2": tk2}[l.ID]
		checkToken(t, "listed token", l, want)
	}

	// Expiry and site scope are kept; a token past its expiry is not found
	// by hash (the store's own clock, real time here), an expiry not after
	// creation is refused.
	soon := time.Now().Add(300 * time.Millisecond)
	k3, err := db.CreateToken(ctx, store.Token{ID: "k3", Hash: hashOf("secret-three"), Role: "telescope", ExpiresAt: &soon, SiteID: "site-a"})
	noErr(t, "create expiring token", err)
	got, err = db.TokenByHash(ctx, hashOf("secret-three"))
	noErr(t, "expiring token by hash", err)
	checkToken(t, "expiring token", got, k3)
	if got.ExpiresAt == nil || !got.ExpiresAt.Equal(soon) || got.SiteID != "site-a" {
		t.Fatalf("expiring token read back as %+v, want expiry %v and site site-a", got, soon)
	}
	past := time.Now().Add(-time.Second)
	_, err = db.CreateToken(ctx, store.Token{ID: "k4", Hash: hashOf("secret-four"), Role: "viewer", ExpiresAt: &past})
	wantErr(t, "token expired at creation", err, store.ErrInvalid)
	time.Sleep(time.Until(soon) + 50*time.Millisecond)
	_, err = db.TokenByHash(ctx, hashOf("secret-three"))
	wantErr(t, "expired token by hash", err, store.ErrNotFound)
	got, err = db.GetToken(ctx, "k3")
	noErr(t, "get expired token", err)
	checkToken(t, "get expired token", got, k3)
}

// ---- paging ----

func testPaging(t *testing.T, db *store.DB) {
	ctx := t.Context()
	const n = 11
	var sites []store.Site
	var targets []store.Target
	var toks []store.Token
	for i := range n {
		// ids out of creation order, so that order by id alone would differ
		id := fmt.Sprintf("id-%02d", (i*7)%n)
		sites = append(sites, site(t, db, id))
		targets = append(targets, target(t, db, id))
		tk, err := db.CreateToken(ctx, store.Token{ID: id, Hash: hashOf(id), Role: "viewer"})
		noErr(t, "create token", err)
		toks = append(toks, tk)
	}
	// The order the store promises: creation instant, then id.
	slices.SortStableFunc(sites, func(a, b store.Site) int {
		return cmpKey(a.CreatedAt, a.ID, b.CreatedAt, b.ID)
	})
	slices.SortStableFunc(targets, func(a, b store.Target) int {
		return cmpKey(a.CreatedAt, a.ID, b.CreatedAt, b.ID)
	})
	slices.SortStableFunc(toks, func(a, b store.Token) int {
		return cmpKey(a.CreatedAt, a.ID, b.CreatedAt, b.ID)
	})
	for _, size := range []int{0, 1, 2, 3, 10, 11, 12, 1000} {
		gs := pageAll(t, "sites", size, func(p store.Page) ([]store.Site, string, error) { return db.ListSites(ctx, p) })
		if len(gs) != n {
			t.Fatalf("size %d: %d sites, want %d", size, len(gs), n)
		}
		for i := range gs {
			checkSite(t, fmt.Sprintf("size %d, site %d", size, i), gs[i], sites[i])
		}
		gt := pageAll(t, "targets", size, func(p store.Page) ([]store.Target, string, error) { return db.ListTargets(ctx, p) })
		for i := range gt {
			checkTarget(t, fmt.Sprintf("size %d, target %d", size, i), gt[i], targets[i])
		}
		gk := pageAll(t, "tokens", size, func(p store.Page) ([]store.Token, string, error) { return db.ListTokens(ctx, p) })
		for i := range gk {
			checkToken(t, fmt.Sprintf("size %d, token %d", size, i), gk[i], toks[i])
		}
		if len(gt) != n || len(gk) != n {
			t.Fatalf("size %d: %d targets and %d tokens, want %d", size, len(gt), len(gk), n)
		}
	}
	// A page that ends exactly at the last record has no next token.
	page, next, err := db.ListSites(ctx, store.Page{Size: n})
	noErr(t, "list all sites", err)
	if len(page) != n || next != "" {
		t.Fatalf("page of exactly %d: %d records, next %q; want all and no token", n, len(page), next)
	}
}

func cmpKey(at time.Time, aid string, bt time.Time, bid string) int {
	if c := at.Compare(bt); c != 0 {
		return c
	}
	return strings.Compare(aid, bid)
}

func testPagingTokens(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s1")
	site(t, db, "s2")
	site(t, db, "s3")
	target(t, db, "t")
	blocks(t, db, newBlock("a", "s1", "t", 1), newBlock("b", "s1", "t", 1), newBlock("c", "s2", "t", 1))
	_, siteTok, err := db.ListSites(ctx, store.Page{Size: 1})
	noErr(t, "first page", err)
	_, blockTok, err := db.ListBlocks(ctx, store.BlockFilter{SiteID: "s1"}, store.Page{Size: 1})
	noErr(t, "first page", err)
	if siteTok == "" || blockTok == "" {
		t.Fatalf("no next-page token: %q %q", siteTok, blockTok)
	}
	cases := []struct {
		name string
		call func() error
	}{
		{"negative size", func() error { _, _, err := db.ListSites(ctx, store.Page{Size: -1}); return err }},
		{"garbage token", func() error { _, _, err := db.ListSites(ctx, store.Page{Token: "!!not base64!!"}); return err }},
		{"truncated token", func() error { _, _, err := db.ListSites(ctx, store.Page{Token: siteTok[:8]}); return err }},
		{"site token for targets", func() error { _, _, err := db.ListTargets(ctx, store.Page{Token: siteTok}); return err }},
		{"site token for tokens", func() error { _, _, err := db.ListTokens(ctx, store.Page{Token: siteTok}); return err }},
		{"block token, other site", func() error {
			_, _, err := db.ListBlocks(ctx, store.BlockFilter{SiteID: "s2"}, store.Page{Token: blockTok})
			return err
		}},
		{"block token, other state", func() error {
			_, _, err := db.ListBlocks(ctx, store.BlockFilter{SiteID: "s1", State: store.StateQueued}, store.Page{Token: blockTok})
			return err
		}},
		{"block token for plans", func() error { _, _, err := db.ListPlans(ctx, "s1", store.Page{Token: blockTok}); return err }},
	}
	for _, c := range cases {
		wantErr(t, c.name, c.call(), store.ErrInvalid)
	}
	// The right filter takes the token.
	rest, next, err := db.ListBlocks(ctx, store.BlockFilter{SiteID: "s1"}, store.Page{Size: 1, Token: blockTok})
	noErr(t, "second page", err)
	if len(rest) != 1 || rest[0].ID != "b" || next != "" {
		t.Fatalf("second page %v, next %q; want [b] and the end", ids(rest, func(b store.Block) string { return b.ID }), next)
	}
}

func testPagingWhileInserting(t *testing.T, db *store.DB) {
	ctx := t.Context()
	for i := range 6 {
		site(t, db, fmt.Sprintf("s%d", i))
	}
	seen := map[string]int{}
	var order []string
	token := ""
	added := 0
	for {
		page, next, err := db.ListSites(ctx, store.Page{Size: 2, Token: token})
		noErr(t, "list", err)
		for _, s := range page {
			seen[s.ID]++
			order = append(order, s.ID)
		}
		if next == "" {
			break
		}
		if added < 2 {
			site(t, db, fmt.Sprintf("new%d", added))
			added++
		}
		token = next
	}
	for id, c := range seen {
		if c != 1 {
			t.Fatalf("site %s listed %d times (order %v)", id, c, order)
		}
	}
	for i := range 6 {
		if seen[fmt.Sprintf("s%d", i)] != 1 {
			t.Fatalf("site s%d skipped while others were inserted (order %v)", i, order)
		}
	}
}

func testPageSizeLimit(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	n := store.MaxPageSize + 5
	bs := make([]store.Block, n)
	for i := range bs {
		bs[i] = newBlock(fmt.Sprintf("b%05d", i), "s", "t", 1)
	}
	blocks(t, db, bs...)
	page, next, err := db.ListBlocks(ctx, store.BlockFilter{}, store.Page{Size: 10 * store.MaxPageSize})
	noErr(t, "list", err)
	if len(page) != store.MaxPageSize || next == "" {
		t.Fatalf("asked for %d: got %d and next %q; want %d and a token", 10*store.MaxPageSize, len(page), next, store.MaxPageSize)
	}
	page, _, err = db.ListBlocks(ctx, store.BlockFilter{}, store.Page{})
	noErr(t, "list", err)
	if len(page) != store.DefaultPageSize {
		t.Fatalf("default page has %d records, want %d", len(page), store.DefaultPageSize)
	}
	all := pageAll(t, "all blocks", store.MaxPageSize, func(p store.Page) ([]store.Block, string, error) {
		return db.ListBlocks(ctx, store.BlockFilter{SiteID: "s", State: store.StateQueued}, p)
	})
	if len(all) != n || all[n-1].ID != bs[n-1].ID {
		t.Fatalf("paged %d blocks, want %d ending with %s", len(all), n, bs[n-1].ID)
	}
	if q, _ := db.QueueSize(ctx, "s"); q != n {
		t.Fatalf("queue size %d, want %d", q, n)
	}
}

// ---- errors ----

// testErrorMapping lists, per call, the sentinel its error must wrap.
func testErrorMapping(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s")
	target(t, db, "t")
	blocks(t, db, newBlock("b", "s", "t", 3))
	_, err := db.CreateToken(ctx, store.Token{ID: "k", Hash: hashOf("k"), Role: "admin"})
	noErr(t, "token", err)
	_, err = db.CreatePlan(ctx, store.Plan{ID: "p", SiteID: "s", Start: t0, End: t0})
	noErr(t, "plan", err)
	s, _ := db.GetSite(ctx, "s")
	tg, _ := db.GetTarget(ctx, "t")

	e2 := func(_ any, err error) error { return err }
	e3 := func(_ any, _ any, err error) error { return err }
	long := t0.Add(time.Hour)
	cases := []struct {
		name string
		err  error
		want error
	}{
		// sites
		{"create site, empty id", e2(db.CreateSite(ctx, store.Site{Name: "x"})), store.ErrInvalid},
		{"create site, empty name", e2(db.CreateSite(ctx, store.Site{ID: "x"})), store.ErrInvalid},
		{"create site, id exists", e2(db.CreateSite(ctx, store.Site{ID: "s", Name: "again"})), store.ErrAlreadyExists},
		{"get site, unknown", e2(db.GetSite(ctx, "x")), store.ErrNotFound},
		{"update site, unknown", e2(db.UpdateSite(ctx, store.Site{ID: "x", Name: "x", Revision: 1})), store.ErrNotFound},
		{"update site, stale revision", e2(db.UpdateSite(ctx, store.Site{ID: "s", Name: "x", Revision: s.Revision + 1})), store.ErrConflict},
		{"update site, empty name", e2(db.UpdateSite(ctx, store.Site{ID: "s", Revision: s.Revision})), store.ErrInvalid},
		{"delete site, unknown", db.DeleteSite(ctx, "x"), store.ErrNotFound},
		{"delete site, queued block", db.DeleteSite(ctx, "s"), store.ErrConflict},
		// targets
		{"create target, empty id", e2(db.CreateTarget(ctx, store.Target{Name: "x", Kind: store.KindFixed})), store.ErrInvalid},
		{"create target, unknown kind", e2(db.CreateTarget(ctx, store.Target{ID: "x", Name: "x", Kind: "planet"})), store.ErrInvalid},
		{"create target, no kind", e2(db.CreateTarget(ctx, store.Target{ID: "x", Name: "x"})), store.ErrInvalid},
		{"create target, id exists", e2(db.CreateTarget(ctx, store.Target{ID: "t", Name: "x", Kind: store.KindOrbit})), store.ErrAlreadyExists},
		{"get target, unknown", e2(db.GetTarget(ctx, "x")), store.ErrNotFound},
		{"update target, stale", e2(db.UpdateTarget(ctx, store.Target{ID: "t", Name: "x", Kind: store.KindFixed, Revision: tg.Revision + 5})), store.ErrConflict},
		{"update target, unknown", e2(db.UpdateTarget(ctx, store.Target{ID: "x", Name: "x", Kind: store.KindFixed, Revision: 1})), store.ErrNotFound},
		{"delete target, queued block", db.DeleteTarget(ctx, "t"), store.ErrConflict},
		{"delete target, unknown", db.DeleteTarget(ctx, "x"), store.ErrNotFound},
		// blocks
		{"create block, empty id", e2(db.CreateBlocks(ctx, []store.Block{newBlock("", "s", "t", 1)})), store.ErrInvalid},
		{"create block, empty site", e2(db.CreateBlocks(ctx, []store.Block{newBlock("x", "", "t", 1)})), store.ErrInvalid},
		{"create block, empty target", e2(db.CreateBlocks(ctx, []store.Block{newBlock("x", "s", "", 1)})), store.ErrInvalid},
		{"create block, 0 frames", e2(db.CreateBlocks(ctx, []store.Block{newBlock("x", "s", "t", 0)})), store.ErrInvalid},
		{"create block, negative frames", e2(db.CreateBlocks(ctx, []store.Block{newBlock("x", "s", "t", -4)})), store.ErrInvalid},
		{"create block, NaN priority", e2(db.CreateBlocks(ctx, []store.Block{{ID: "x", SiteID: "s", TargetID: "t", FramesWanted: 1, Priority: math.NaN()}})), store.ErrInvalid},
		{"create block, infinite priority", e2(db.CreateBlocks(ctx, []store.Block{{ID: "x", SiteID: "s", TargetID: "t", FramesWanted: 1, Priority: math.Inf(-1)}})), store.ErrInvalid},
		{"create block, frames done set", e2(db.CreateBlocks(ctx, []store.Block{{ID: "x", SiteID: "s", TargetID: "t", FramesWanted: 2, FramesDone: 1}})), store.ErrInvalid},
		{"create block, completed", e2(db.CreateBlocks(ctx, []store.Block{{ID: "x", SiteID: "s", TargetID: "t", FramesWanted: 2, State: store.StateCompleted}})), store.ErrInvalid},
		{"create block, unknown site", e2(db.CreateBlocks(ctx, []store.Block{newBlock("x", "nos", "t", 1)})), store.ErrNotFound},
		{"create block, unknown target", e2(db.CreateBlocks(ctx, []store.Block{newBlock("x", "s", "not", 1)})), store.ErrNotFound},
		{"create block, id exists", e2(db.CreateBlocks(ctx, []store.Block{newBlock("b", "s", "t", 1)})), store.ErrAlreadyExists},
		{"get block, unknown", e2(db.GetBlock(ctx, "x")), store.ErrNotFound},
		{"withdraw block, unknown", e2(db.WithdrawBlock(ctx, "x")), store.ErrNotFound},
		{"queue size, unknown site", e2(db.QueueSize(ctx, "x")), store.ErrNotFound},
		{"list blocks, unknown state", e3(db.ListBlocks(ctx, store.BlockFilter{State: "running"}, store.Page{})), store.ErrInvalid},
		// progress
		{"report, empty id", e3(db.ReportProgress(ctx, report("", "b", 1))), store.ErrInvalid},
		{"report, empty block", e3(db.ReportProgress(ctx, report("r", "", 1))), store.ErrInvalid},
		{"report, negative frames", e3(db.ReportProgress(ctx, report("r", "b", -1))), store.ErrInvalid},
		{"report, no start", e3(db.ReportProgress(ctx, store.ProgressReport{ReportID: "r", BlockID: "b", End: t0})), store.ErrInvalid},
		{"report, no end", e3(db.ReportProgress(ctx, store.ProgressReport{ReportID: "r", BlockID: "b", Start: t0})), store.ErrInvalid},
		{"report, end before start", e3(db.ReportProgress(ctx, store.ProgressReport{ReportID: "r", BlockID: "b", Start: long, End: t0})), store.ErrInvalid},
		{"report, year 2300", e3(db.ReportProgress(ctx, store.ProgressReport{ReportID: "r", BlockID: "b", Start: t0, End: time.Date(2300, 1, 1, 0, 0, 0, 0, time.UTC)})), store.ErrInvalid},
		{"report, unknown block", e3(db.ReportProgress(ctx, report("r", "x", 1))), store.ErrNotFound},
		{"get report, unknown", e2(db.GetProgressReport(ctx, "x")), store.ErrNotFound},
		// plans
		{"create plan, empty id", e2(db.CreatePlan(ctx, store.Plan{SiteID: "s", Start: t0, End: long})), store.ErrInvalid},
		{"create plan, empty site", e2(db.CreatePlan(ctx, store.Plan{ID: "x", Start: t0, End: long})), store.ErrInvalid},
		{"create plan, end before start", e2(db.CreatePlan(ctx, store.Plan{ID: "x", SiteID: "s", Start: long, End: t0})), store.ErrInvalid},
		{"create plan, no interval", e2(db.CreatePlan(ctx, store.Plan{ID: "x", SiteID: "s"})), store.ErrInvalid},
		{"create plan, unknown site", e2(db.CreatePlan(ctx, store.Plan{ID: "x", SiteID: "x", Start: t0, End: long})), store.ErrNotFound},
		{"create plan, id exists", e2(db.CreatePlan(ctx, store.Plan{ID: "p", SiteID: "s", Start: t0, End: long})), store.ErrAlreadyExists},
		{"get plan, unknown", e2(db.GetPlan(ctx, "x")), store.ErrNotFound},
		{"latest plan, unknown site", e2(db.LatestPlan(ctx, "x")), store.ErrNotFound},
		{"plan by version, unknown", e2(db.PlanByVersion(ctx, "s", 2)), store.ErrNotFound},
		// tokens
		{"create token, empty id", e2(db.CreateToken(ctx, store.Token{Hash: hashOf("x"), Role: "viewer"})), store.ErrInvalid},
		{"create token, short hash", e2(db.CreateToken(ctx, store.Token{ID: "x", Hash: hashOf("x")[:31], Role: "viewer"})), store.ErrInvalid},
		{"create token, no hash", e2(db.CreateToken(ctx, store.Token{ID: "x", Role: "viewer"})), store.ErrInvalid},
		{"create token, empty role", e2(db.CreateToken(ctx, store.Token{ID: "x", Hash: hashOf("x")})), store.ErrInvalid},
		{"create token, id exists", e2(db.CreateToken(ctx, store.Token{ID: "k", Hash: hashOf("other"), Role: "viewer"})), store.ErrAlreadyExists},
		{"create token, hash exists", e2(db.CreateToken(ctx, store.Token{ID: "x", Hash: hashOf("k"), Role: "viewer"})), store.ErrAlreadyExists},
		{"token by hash, unknown", e2(db.TokenByHash(ctx, hashOf("x"))), store.ErrNotFound},
		{"get token, unknown", e2(db.GetToken(ctx, "x")), store.ErrNotFound},
		{"revoke token, unknown", e2(db.RevokeToken(ctx, "x")), store.ErrNotFound},
	}
	for _, c := range cases {
		if !errors.Is(c.err, c.want) {
			t.Errorf("%s: got error %v, want %v", c.name, c.err, c.want)
		}
		for _, other := range []error{store.ErrNotFound, store.ErrAlreadyExists, store.ErrConflict, store.ErrBusy, store.ErrInvalid} {
			if other != c.want && errors.Is(c.err, other) {
				t.Errorf("%s: error %v also matches %v", c.name, c.err, other)
			}
		}
	}
	// None of the refused calls left anything behind.
	for _, id := range []string{"x", "r"} {
		if _, err := db.GetSite(ctx, id); !errors.Is(err, store.ErrNotFound) {
			t.Errorf("site %s exists after refused calls", id)
		}
		if _, err := db.GetTarget(ctx, id); !errors.Is(err, store.ErrNotFound) {
			t.Errorf("target %s exists after refused calls", id)
		}
		if _, err := db.GetBlock(ctx, id); !errors.Is(err, store.ErrNotFound) {
			t.Errorf("block %s exists after refused calls", id)
		}
		if _, err := db.GetPlan(ctx, id); !errors.Is(err, store.ErrNotFound) {
			t.Errorf("plan %s exists after refused calls", id)
		}
		if _, err := db.GetToken(ctx, id); !errors.Is(err, store.ErrNotFound) {
			t.Errorf("token %s exists after refused calls", id)
		}
		if _, err := db.GetProgressReport(ctx, id); !errors.Is(err, store.ErrNotFound) {
			t.Errorf("report %s exists after refused calls", id)
		}
	}
	if b, _ := db.GetBlock(ctx, "b"); b.FramesDone != 0 || b.Revision != 1 {
		t.Errorf("block b changed by refused calls: %+v", b)
	}
	noErr(t, "integrity", db.IntegrityCheck(ctx))
}

func testCanceledContext(t *testing.T, db *store.DB) {
	site(t, db, "s")
	ctx, cancel := context.WithCancel(t.Context())
	cancel()
	_, err := db.CreateSite(ctx, store.Site{ID: "late", Name: "late"})
	wantErr(t, "create with canceled context", err, context.Canceled)
	_, err = db.GetSite(ctx, "s")
	wantErr(t, "get with canceled context", err, context.Canceled)
	_, _, err = db.ListSites(ctx, store.Page{})
	wantErr(t, "list with canceled context", err, context.Canceled)
	if _, err := db.GetSite(t.Context(), "late"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("site created with a canceled context: %v", err)
	}
}

func testIntegrityCheck(t *testing.T, db *store.DB) {
	ctx := t.Context()
	noErr(t, "empty database", db.IntegrityCheck(ctx))
	site(t, db, "s")
	target(t, db, "t")
	blocks(t, db, newBlock("a", "s", "t", 3), newBlock("b", "s", "t", 3))
	for i := range 5 {
		_, _, err := db.ReportProgress(ctx, report(fmt.Sprintf("r%d", i), []string{"a", "b"}[i%2], 1))
		noErr(t, "report", err)
	}
	_, err := db.CreatePlan(ctx, store.Plan{ID: "p", SiteID: "s", Start: t0, End: t0})
	noErr(t, "plan", err)
	noErr(t, "after a workload", db.IntegrityCheck(ctx))
}
