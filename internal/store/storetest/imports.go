package storetest

import (
	"bytes"
	"context"
	"testing"

	"github.com/nightloom/nightloom/internal/store"
)

// testImportTargets: ImportTargets is all or nothing (an existing id stores
// none of the batch), a retry under the same request id and fingerprint
// returns the first call's targets and stores nothing, the same id with
// another fingerprint is ErrConflict, and bad input is ErrInvalid.
func testImportTargets(t *testing.T, db *store.DB) {
	ctx := context.Background()
	fp := bytes.Repeat([]byte{7}, 32)
	target(t, db, "t-old")
	batch := []store.Target{{ID: "t-a", Name: "a", Kind: store.KindOrbit}, {ID: "t-old", Name: "dup", Kind: store.KindOrbit}}
	_, _, err := db.ImportTargets(ctx, "r1", fp, batch)
	wantErr(t, "import with an existing id", err, store.ErrAlreadyExists)
	if _, err := db.GetTarget(ctx, "t-a"); err == nil {
		t.Fatal("a refused import stored t-a")
	}
	batch[1].ID = "t-b"
	out, replay, err := db.ImportTargets(ctx, "r1", fp, batch)
	noErr(t, "import", err)
	if replay || len(out) != 2 || out[0].ID != "t-a" || out[1].ID != "t-b" || out[0].Revision != 1 {
		t.Fatalf("import: %+v, replay %v", out, replay)
	}
	again, replay, err := db.ImportTargets(ctx, "r1", fp, []store.Target{{ID: "t-c", Name: "c", Kind: store.KindOrbit}})
	noErr(t, "retry", err)
	if !replay || len(again) != 2 || again[1].ID != "t-b" {
		t.Fatalf("retry: %+v, replay %v", again, replay)
	}
	if _, err := db.GetTarget(ctx, "t-c"); err == nil {
		t.Fatal("a replayed import stored t-c")
	}
	_, _, err = db.ImportTargets(ctx, "r1", bytes.Repeat([]byte{8}, 32), batch)
	wantErr(t, "same id, other fingerprint", err, store.ErrConflict)
	_, _, err = db.ImportTargets(ctx, "", fp, batch)
	wantErr(t, "empty request id", err, store.ErrInvalid)
	_, _, err = db.ImportTargets(ctx, "r2", fp[:5], batch)
	wantErr(t, "short fingerprint", err, store.ErrInvalid)
	_, _, err = db.ImportTargets(ctx, "r3", fp, []store.Target{{ID: "t-d", Name: "d", Kind: "comet"}})
	wantErr(t, "bad kind", err, store.ErrInvalid)
}
