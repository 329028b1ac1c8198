package storetest

import (
	"bytes"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/store"
)

func checkProgram(t *testing.T, what string, got, want store.Program) {
	t.Helper()
	if got.Name != want.Name || got.SiteID != want.SiteID || !bytes.Equal(got.Spec, want.Spec) ||
		!sameTime(got.CreatedAt, want.CreatedAt) || !sameTime(got.UpdatedAt, want.UpdatedAt) || got.Revision != want.Revision {
		t.Fatalf("%s:\n got %+v\nwant %+v", what, got, want)
	}
}

// testPrograms: create, get, list, update with revisions, the block's
// program reference (checked on create) and delete (refused while a queued
// block refers to the program; blocks no longer queued lose the reference).
func testPrograms(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s1")
	target(t, db, "t1")

	a, err := db.CreateProgram(ctx, store.Program{Name: "alpha", Spec: []byte("10h a month")})
	noErr(t, "create alpha", err)
	if a.Revision != 1 || a.CreatedAt.IsZero() {
		t.Fatalf("create alpha: %+v, want revision 1 and a creation time", a)
	}
	b, err := db.CreateProgram(ctx, store.Program{Name: "beta", SiteID: "s1", Spec: []byte("5h")})
	noErr(t, "create beta", err)
	_, err = db.CreateProgram(ctx, store.Program{Name: "alpha", Spec: []byte("again")})
	wantErr(t, "create alpha twice", err, store.ErrAlreadyExists)
	_, err = db.CreateProgram(ctx, store.Program{Name: "gamma", SiteID: "nosuch"})
	wantErr(t, "create with an unknown site", err, store.ErrNotFound)
	_, err = db.CreateProgram(ctx, store.Program{})
	wantErr(t, "create without a name", err, store.ErrInvalid)

	got, err := db.GetProgram(ctx, "beta")
	noErr(t, "get beta", err)
	checkProgram(t, "get beta", got, b)
	_, err = db.GetProgram(ctx, "gamma")
	wantErr(t, "get unknown", err, store.ErrNotFound)
	list := pageAll(t, "list programs", 1, func(p store.Page) ([]store.Program, string, error) { return db.ListPrograms(ctx, p) })
	if names := ids(list, func(p store.Program) string { return p.Name }); len(names) != 2 || names[0] != "alpha" || names[1] != "beta" {
		t.Fatalf("list programs: %v, want [alpha beta]", names)
	}

	up, err := db.UpdateProgram(ctx, store.Program{Name: "alpha", SiteID: "s1", Spec: []byte("20h"), Revision: 1})
	noErr(t, "update alpha", err)
	if up.Revision != 2 || up.SiteID != "s1" || string(up.Spec) != "20h" || !sameTime(up.CreatedAt, a.CreatedAt) {
		t.Fatalf("update alpha: %+v", up)
	}
	_, err = db.UpdateProgram(ctx, store.Program{Name: "alpha", Spec: []byte("stale"), Revision: 1})
	wantErr(t, "update on a stale revision", err, store.ErrConflict)
	_, err = db.UpdateProgram(ctx, store.Program{Name: "alpha", SiteID: "nosuch", Spec: []byte("x"), Revision: 2})
	wantErr(t, "update to an unknown site", err, store.ErrNotFound)

	nb := newBlock("b1", "s1", "t1", 3)
	nb.Program = "alpha"
	bad := newBlock("b2", "s1", "t1", 3)
	bad.Program = "gamma"
	_, err = db.CreateBlocks(ctx, []store.Block{nb, bad})
	wantErr(t, "queue a block of an unknown program", err, store.ErrNotFound)
	created := blocks(t, db, nb)
	gotB, err := db.GetBlock(ctx, "b1")
	noErr(t, "get b1", err)
	checkBlock(t, "get b1", gotB, created[0])
	if gotB.Program != "alpha" {
		t.Fatalf("b1 program %q, want alpha", gotB.Program)
	}

	wantErr(t, "delete alpha with a queued block", db.DeleteProgram(ctx, "alpha"), store.ErrConflict)
	_, err = db.WithdrawBlock(ctx, "b1")
	noErr(t, "withdraw b1", err)
	noErr(t, "delete alpha", db.DeleteProgram(ctx, "alpha"))
	wantErr(t, "delete alpha again", db.DeleteProgram(ctx, "alpha"), store.ErrNotFound)
	gotB, err = db.GetBlock(ctx, "b1")
	noErr(t, "get b1 after delete", err)
	if gotB.Program != "" {
		t.Fatalf("b1 keeps program %q after its deletion", gotB.Program)
	}
	noErr(t, "integrity", db.IntegrityCheck(ctx))
}

// testProgramCharges: a report of a block with a program charges its
// exposure and the rest of its interval, once (a duplicate charges
// nothing); a block without a program charges nobody; ProgramCharges
// selects by the run's start.
func testProgramCharges(t *testing.T, db *store.DB) {
	ctx := t.Context()
	site(t, db, "s1")
	target(t, db, "t1")
	_, err := db.CreateProgram(ctx, store.Program{Name: "alpha", Spec: []byte("x")})
	noErr(t, "create alpha", err)
	b1 := newBlock("b1", "s1", "t1", 100)
	b1.Program = "alpha"
	blocks(t, db, b1, newBlock("b2", "s1", "t1", 100))

	// 5 frames of 60 s over 7 min: 5 min exposure, 2 min overheads.
	r := report("r1", "b1", 5)
	r.End, r.Exposure = r.Start.Add(7*time.Minute), 5*time.Minute
	_, _, err = db.ReportProgress(ctx, r)
	noErr(t, "report r1", err)
	_, dup, err := db.ReportProgress(ctx, r)
	noErr(t, "report r1 again", err)
	if !dup {
		t.Fatal("second r1 is not a duplicate")
	}
	// An exposure longer than the interval is capped at it; a setup is
	// charged as overheads on top.
	r2 := report("r2", "b1", 2)
	r2.Start, r2.End, r2.Exposure, r2.Setup = t0.Add(time.Hour), t0.Add(time.Hour+90*time.Second), 2*time.Minute, 45*time.Second
	_, _, err = db.ReportProgress(ctx, r2)
	noErr(t, "report r2", err)
	r3 := report("r3", "b2", 4)
	r3.Exposure = 4 * time.Minute
	_, _, err = db.ReportProgress(ctx, r3)
	noErr(t, "report r3 (no program)", err)

	cs, err := db.ProgramCharges(ctx, "alpha", time.Time{}, time.Time{})
	noErr(t, "charges", err)
	want := []store.Charge{
		{ReportID: "r1", Program: "alpha", BlockID: "b1", Start: t0, Exposure: 5 * time.Minute, Overheads: 2 * time.Minute},
		{ReportID: "r2", Program: "alpha", BlockID: "b1", Start: t0.Add(time.Hour), Exposure: 90 * time.Second, Overheads: 45 * time.Second},
	}
	if len(cs) != len(want) {
		t.Fatalf("charges %+v, want %+v", cs, want)
	}
	for i := range want {
		if cs[i].ReportID != want[i].ReportID || cs[i].Program != want[i].Program || cs[i].BlockID != want[i].BlockID ||
			!cs[i].Start.Equal(want[i].Start) || cs[i].Exposure != want[i].Exposure || cs[i].Overheads != want[i].Overheads {
			t.Fatalf("charge %d: %+v, want %+v", i, cs[i], want[i])
		}
	}
	cs, err = db.ProgramCharges(ctx, "alpha", t0.Add(time.Minute), t0.Add(2*time.Hour))
	noErr(t, "charges from t0+1m", err)
	if len(cs) != 1 || cs[0].ReportID != "r2" {
		t.Fatalf("charges from t0+1m: %+v, want r2 only", cs)
	}
	cs, err = db.ProgramCharges(ctx, "alpha", time.Time{}, t0.Add(time.Hour))
	noErr(t, "charges before t0+1h", err)
	if len(cs) != 1 || cs[0].ReportID != "r1" {
		t.Fatalf("charges before t0+1h (end excluded): %+v, want r1 only", cs)
	}
}
