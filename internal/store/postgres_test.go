package store_test

import (
	"errors"
	"fmt"
	"os"
	"reflect"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/pgtest"
	"github.com/nightloom/nightloom/internal/store"
	"github.com/nightloom/nightloom/internal/store/storetest"
)

// One throwaway PostgreSQL cluster serves every test of this package.
func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }

func openPostgres(t *testing.T) *store.DB {
	t.Helper()
	db, err := store.OpenPostgres(pgtest.NewDatabase(t), store.Options{})
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

// The conformance suite, unchanged, against PostgreSQL.
func TestConformancePostgres(t *testing.T) { storetest.Run(t, openPostgres) }

// fillWorkload stores one of every kind of record in every state the
// conformance suite exercises: sites, orbit and fixed targets, queued,
// completed and withdrawn blocks, progress reports (one capped), several
// plan versions per site, active and revoked tokens.
func fillWorkload(t *testing.T, db *store.DB) {
	t.Helper()
	ctx := t.Context()
	t0 := time.Date(2031, 3, 14, 2, 10, 0, 123456789, time.UTC)
	for _, s := range []string{"hill", "dome"} {
		_, err := db.CreateSite(ctx, store.Site{ID: s, Name: "site " + s, Spec: []byte("spec " + s)})
		must(t, err)
	}
	_, err := db.CreateTarget(ctx, store.Target{ID: "neb", Name: "nebula", Kind: store.KindFixed, Spec: []byte{1, 2}})
	must(t, err)
	_, err = db.CreateTarget(ctx, store.Target{ID: "com", Name: "comet", Kind: store.KindOrbit})
	must(t, err)
	_, err = db.CreateProgram(ctx, store.Program{Name: "club", Spec: []byte("club share")})
	must(t, err)
	_, err = db.CreateProgram(ctx, store.Program{Name: "thesis", SiteID: "hill", Spec: []byte("thesis share")})
	must(t, err)
	var bs []store.Block
	for i := range 30 {
		bs = append(bs, store.Block{ID: fmt.Sprintf("b%02d", i), SiteID: []string{"hill", "dome"}[i%2],
			TargetID: []string{"neb", "com"}[i%2], Priority: float64(i) / 3, FramesWanted: 4 + i%3, Spec: []byte{byte(i)},
			Program: []string{"thesis", "club", "", ""}[i%4]})
	}
	_, err = db.CreateBlocks(ctx, bs)
	must(t, err)
	for i := range 40 {
		_, _, err := db.ReportProgress(ctx, store.ProgressReport{ReportID: fmt.Sprintf("r%02d", i), BlockID: bs[i%12].ID,
			FramesKept: 1 + i%4, Start: t0.Add(time.Duration(i) * time.Hour), End: t0.Add(time.Duration(i)*time.Hour + time.Minute), Outcome: "ok",
			Exposure: time.Duration(i) * time.Second})
		must(t, err)
	}
	_, err = db.WithdrawBlock(ctx, "b20")
	must(t, err)
	for i := range 5 {
		_, err := db.CreatePlan(ctx, store.Plan{ID: fmt.Sprintf("p%d", i), SiteID: []string{"hill", "dome"}[i%2],
			Start: t0, End: t0.Add(10 * time.Hour), Body: []byte(fmt.Sprintf("body %d", i))})
		must(t, err)
	}
	for i, role := range []string{"admin", "viewer", "telescope"} {
		h := make([]byte, 32)
		h[0] = byte(i + 1)
		_, err := db.CreateToken(ctx, store.Token{ID: "k" + role, Hash: h, Role: role, Label: "for " + role})
		must(t, err)
	}
	_, err = db.RevokeToken(ctx, "kviewer")
	must(t, err)
	// The records of migrations 0004-0007: a target import, magnitudes and
	// fits, a block's audit trail.
	fp := make([]byte, 32)
	fp[31] = 7
	_, _, err = db.ImportTargets(ctx, "imp-1", fp, []store.Target{{ID: "c2", Name: "comet two", Kind: store.KindOrbit}})
	must(t, err)
	var obs []store.MagnitudeObservation
	for i := range 3 {
		obs = append(obs, store.MagnitudeObservation{ID: fmt.Sprintf("m%d", i), TargetID: "com",
			ObservedAt: t0.Add(time.Duration(i) * time.Hour), Magnitude: 9.25 + float64(i)/8, Sigma: 0.1, Note: "note"})
	}
	_, err = db.AddMagnitudeObservations(ctx, obs)
	must(t, err)
	_, err = db.CreateMagnitudeFit(ctx, store.MagnitudeFit{ID: "f1", TargetID: "com", Spec: []byte("fit")}, nil)
	must(t, err)
	b, err := db.GetBlock(ctx, "b25")
	must(t, err)
	b.Priority = 7.5
	_, err = db.UpdateBlock(ctx, b, "kadmin", "priority")
	must(t, err)
}

// dumpAll reads every record through the API, in list order.
func dumpAll(t *testing.T, db *store.DB) []any {
	t.Helper()
	ctx := t.Context()
	big := store.Page{Size: store.MaxPageSize}
	sites, _, err := db.ListSites(ctx, big)
	must(t, err)
	targets, _, err := db.ListTargets(ctx, big)
	must(t, err)
	blocks, _, err := db.ListBlocks(ctx, store.BlockFilter{}, big)
	must(t, err)
	tokens, _, err := db.ListTokens(ctx, big)
	must(t, err)
	programs, _, err := db.ListPrograms(ctx, big)
	must(t, err)
	out := []any{sites, targets, blocks, tokens, programs}
	for _, p := range programs {
		cs, err := db.ProgramCharges(ctx, p.Name, time.Time{}, time.Time{})
		must(t, err)
		out = append(out, cs)
	}
	for _, x := range targets {
		obs, err := db.MagnitudeObservations(ctx, x.ID, 100)
		must(t, err)
		fits, err := db.MagnitudeFits(ctx, x.ID)
		must(t, err)
		out = append(out, obs, fits)
	}
	for _, b := range blocks {
		es, err := db.BlockEdits(ctx, b.ID)
		must(t, err)
		out = append(out, es)
	}
	fp := make([]byte, 32)
	fp[31] = 7
	replayed, replay, err := db.ImportTargets(ctx, "imp-1", fp, []store.Target{{ID: "c2", Name: "comet two", Kind: store.KindOrbit}})
	must(t, err)
	if !replay {
		t.Errorf("the import request imp-1 is not stored")
	}
	out = append(out, replayed)
	for _, b := range blocks {
		rs, _, err := db.ListProgressReports(ctx, b.ID, big)
		must(t, err)
		out = append(out, rs)
	}
	for _, s := range sites {
		ps, _, err := db.ListPlans(ctx, s.ID, big)
		must(t, err)
		out = append(out, ps)
	}
	return out
}

// TestCopyRoundTrip copies a SQLite database into PostgreSQL and that into a
// new SQLite file: every record of every kind reads back identical (ids,
// instants to the nanosecond, revisions, frames applied, versions, token
// hashes and revocations), both copies pass IntegrityCheck, plan versions
// continue from where they were, and a copy into a database that is not
// empty is refused without writing.
func TestCopyRoundTrip(t *testing.T) {
	ctx := t.Context()
	src := openFile(t)
	fillWorkload(t, src)
	pg := openPostgres(t)
	st, err := store.Copy(ctx, src, pg)
	must(t, err)
	t.Logf("SQLite -> PostgreSQL: %v", st)
	if st.Blocks != 30 || st.ProgressReports != 40 || st.Plans != 5 || st.Tokens != 3 || st.Programs != 2 || st.Charges != 20 || st.Others != 6 {
		t.Errorf("copied %v, want 30 blocks, 40 reports, 5 plans, 3 tokens, 2 programs, 20 charges, 6 other records", st)
	}
	back := openFile(t)
	_, err = store.Copy(ctx, pg, back)
	must(t, err)
	want := dumpAll(t, src)
	for name, db := range map[string]*store.DB{"postgres": pg, "sqlite again": back} {
		if got := dumpAll(t, db); !reflect.DeepEqual(got, want) {
			t.Errorf("%s copy differs from the source:\n got %+v\nwant %+v", name, got, want)
		}
		p, err := db.CreatePlan(ctx, store.Plan{ID: "next", SiteID: "hill", Start: time.Unix(0, 0), End: time.Unix(0, 0)})
		must(t, err)
		if p.Version != 4 {
			t.Errorf("%s: next plan version of hill is %d, want 4", name, p.Version)
		}
		_, err = store.Copy(ctx, src, db)
		if !errors.Is(err, store.ErrConflict) {
			t.Errorf("%s: copy into a database that is not empty: got %v, want ErrConflict", name, err)
		}
		must(t, db.IntegrityCheck(ctx))
	}
}
