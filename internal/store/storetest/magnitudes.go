package storetest

import (
	"context"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/store"
)

// testMagnitudes: observations are stored all or nothing, a retried id is
// skipped and a changed one is ErrConflict; fits are kept in order, and an
// applied fit updates the target in the same transaction (a stale revision
// stores neither); both go with their target.
func testMagnitudes(t *testing.T, db *store.DB) {
	ctx := context.Background()
	tg := target(t, db, "t-comet")
	t0 := time.Date(2031, 3, 1, 4, 0, 0, 0, time.UTC)
	obs := []store.MagnitudeObservation{
		{ID: "m1", TargetID: tg.ID, ObservedAt: t0, Magnitude: 9.1, Sigma: 0.2},
		{ID: "m2", TargetID: tg.ID, ObservedAt: t0.Add(48 * time.Hour), Magnitude: 8.7, Sigma: 0.3, Note: "visual"},
	}
	n, err := db.AddMagnitudeObservations(ctx, obs)
	noErr(t, "add", err)
	if n != 2 {
		t.Fatalf("added %d, want 2", n)
	}
	n, err = db.AddMagnitudeObservations(ctx, obs)
	noErr(t, "retry", err)
	if n != 0 {
		t.Fatalf("retry added %d", n)
	}
	changed := obs[0]
	changed.Magnitude = 9.5
	_, err = db.AddMagnitudeObservations(ctx, []store.MagnitudeObservation{{ID: "m3", TargetID: tg.ID, ObservedAt: t0, Magnitude: 9, Sigma: 0.1}, changed})
	wantErr(t, "changed observation", err, store.ErrConflict)
	_, err = db.AddMagnitudeObservations(ctx, []store.MagnitudeObservation{{ID: "m4", TargetID: "nope", ObservedAt: t0, Magnitude: 9, Sigma: 0.1}})
	wantErr(t, "unknown target", err, store.ErrNotFound)
	_, err = db.AddMagnitudeObservations(ctx, []store.MagnitudeObservation{{ID: "m5", TargetID: tg.ID, ObservedAt: t0, Magnitude: 9, Sigma: 0}})
	wantErr(t, "zero sigma", err, store.ErrInvalid)
	got, err := db.MagnitudeObservations(ctx, tg.ID, 100)
	noErr(t, "list", err)
	if len(got) != 2 || got[0].ID != "m1" || got[1].Note != "visual" || !got[1].ObservedAt.Equal(obs[1].ObservedAt) {
		t.Fatalf("observations %+v (m3 must not be stored)", got)
	}

	_, err = db.CreateMagnitudeFit(ctx, store.MagnitudeFit{ID: "f1", TargetID: tg.ID, Spec: []byte("a")}, nil)
	noErr(t, "fit", err)
	upd := tg
	upd.Spec = []byte("new law")
	_, err = db.CreateMagnitudeFit(ctx, store.MagnitudeFit{ID: "f2", TargetID: tg.ID, Spec: []byte("b")}, &upd)
	noErr(t, "applied fit", err)
	after, err := db.GetTarget(ctx, tg.ID)
	noErr(t, "get target", err)
	if string(after.Spec) != "new law" || after.Revision != tg.Revision+1 {
		t.Fatalf("target after an applied fit: %+v", after)
	}
	_, err = db.CreateMagnitudeFit(ctx, store.MagnitudeFit{ID: "f3", TargetID: tg.ID, Spec: []byte("c")}, &upd) // stale revision
	wantErr(t, "stale revision", err, store.ErrConflict)
	fits, err := db.MagnitudeFits(ctx, tg.ID)
	noErr(t, "fits", err)
	if len(fits) != 2 || fits[0].Applied || !fits[1].Applied || string(fits[1].Spec) != "b" {
		t.Fatalf("fits %+v", fits)
	}
	noErr(t, "delete target", db.DeleteTarget(ctx, tg.ID))
	if got, _ := db.MagnitudeObservations(ctx, tg.ID, 100); len(got) != 0 {
		t.Errorf("observations outlive their target: %+v", got)
	}
}
