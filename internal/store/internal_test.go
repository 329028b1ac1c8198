package store

// Tests that need the package's insides: connection settings, the migration
// runner, busy handling, a frozen clock, and IntegrityCheck on a database
// damaged on purpose.

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"testing/fstest"
	"time"
)

func openT(t *testing.T, path string, opts Options) *DB {
	t.Helper()
	db, err := Open(path, opts)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = db.Close() })
	return db
}

func pragma(t *testing.T, db *sql.DB, name string) string {
	t.Helper()
	var v string
	if err := db.QueryRow("PRAGMA " + name).Scan(&v); err != nil {
		t.Fatalf("PRAGMA %s: %v", name, err)
	}
	return v
}

// TestConnectionSettings reads back what the DSN asked for, on the writer and
// on a reader connection. Expected values are SQLite's encodings
// (sqlite.org/pragma.html): synchronous FULL = 2, foreign_keys on = 1.
func TestConnectionSettings(t *testing.T) {
	db := openT(t, filepath.Join(t.TempDir(), "p.db"), Options{BusyTimeout: 1234 * time.Millisecond})
	for _, c := range []struct {
		pool string
		db   *sql.DB
	}{{"writer", db.w}, {"reader", db.r}} {
		want := map[string]string{"journal_mode": "wal", "synchronous": "2", "foreign_keys": "1", "busy_timeout": "1234"}
		for name, w := range want {
			if got := pragma(t, c.db, name); got != w {
				t.Errorf("%s: PRAGMA %s = %s, want %s", c.pool, name, got, w)
			}
		}
	}
	if got := pragma(t, db.r, "query_only"); got != "1" {
		t.Errorf("reader: query_only = %s, want 1", got)
	}
	if _, err := db.r.Exec(`INSERT INTO sites VALUES ('x', 'x', x'', 0, 0, 1)`); err == nil {
		t.Errorf("reader connection accepted a write")
	}

	mem := openT(t, ":memory:", Options{})
	if got := pragma(t, mem.w, "foreign_keys"); got != "1" {
		t.Errorf("memory: foreign_keys = %s, want 1", got)
	}
	if got := pragma(t, mem.w, "synchronous"); got != "2" {
		t.Errorf("memory: synchronous = %s, want 2", got)
	}
}

func TestOpenRefusesBadPaths(t *testing.T) {
	for _, p := range []string{"", "a?b.db", "x#y"} {
		if _, err := Open(p, Options{}); !errors.Is(err, ErrInvalid) {
			t.Errorf("Open(%q): %v, want ErrInvalid", p, err)
		}
	}
}

// ---- migrations ----

// TestUpgradeFromEachVersion stops a new database at every earlier version of
// the embedded migrations, writes data that version can hold, then opens it
// normally: it reaches the latest version, keeps the data and works.
func TestUpgradeFromEachVersion(t *testing.T) {
	all, err := loadMigrations(embeddedMigrations)
	if err != nil {
		t.Fatal(err)
	}
	latest := len(all)
	if latest < 2 {
		t.Fatalf("only %d migrations: nothing to upgrade", latest)
	}
	ctx := t.Context()
	for n := 1; n < latest; n++ {
		t.Run(fmt.Sprintf("from%d", n), func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "old.db")
			old, err := Open(path, Options{maxVersion: n})
			if err != nil {
				t.Fatal(err)
			}
			if v, _ := old.SchemaVersion(ctx); v != n {
				t.Fatalf("stopped database is at version %d, want %d", v, n)
			}
			// Version 1 has sites, targets, blocks and progress.
			if _, err := old.CreateSite(ctx, Site{ID: "s", Name: "s"}); err != nil {
				t.Fatal(err)
			}
			if _, err := old.CreateTarget(ctx, Target{ID: "t", Name: "t", Kind: KindFixed}); err != nil {
				t.Fatal(err)
			}
			// Blocks as version 1 has them (program came in 9, network_id in 8).
			// (Raw SQL: this build's CreateBlocks writes the columns of the
			// latest version.)
			if _, err := old.w.Exec(`INSERT INTO blocks (id, site_id, target_id, priority, state, frames_wanted, frames_done,
				spec, created_at, updated_at, revision) VALUES ('b', 's', 't', 1, 'queued', 2, 0, x'', 1, 1, 1)`); err != nil {
				t.Fatal(err)
			}
			if _, err := old.w.Exec(`INSERT INTO progress_reports (report_id, block_id, frames_kept, frames_applied, start_at,
				end_at, outcome, received_at) VALUES ('r0', 'b', 0, 0, 10, 20, 'skipped', 30)`); err != nil {
				t.Fatal(err)
			}
			if _, err := old.CreateToken(ctx, Token{ID: "k", Hash: make([]byte, 32), Role: "admin"}); n < 3 && err == nil {
				t.Fatalf("version %d has no tokens table, yet CreateToken worked", n)
			}
			if err := old.Close(); err != nil {
				t.Fatal(err)
			}

			db := openT(t, path, Options{})
			if v, _ := db.SchemaVersion(ctx); v != latest {
				t.Fatalf("upgraded database at version %d, want %d", v, latest)
			}
			if b, err := db.GetBlock(ctx, "b"); err != nil || b.FramesWanted != 2 || b.NetworkID != "" {
				t.Fatalf("block after upgrade: %+v, %v", b, err)
			}
			// A report stored before 0008 (no site) is the block's site's.
			if rs, err := db.ReportsEndingAfter(ctx, "s", time.Unix(0, 0)); err != nil || len(rs) != 1 || rs[0].SiteID != "" {
				t.Fatalf("old reports after upgrade: %+v, %v", rs, err)
			}
			if _, err := db.CreatePlan(ctx, Plan{ID: "p", SiteID: "s", Start: time.Unix(1e9, 0), End: time.Unix(1e9, 0)}); err != nil {
				t.Fatalf("plans after upgrade: %v", err)
			}
			// (From version 4 on the old database already took token "k".)
			if _, err := db.CreateToken(ctx, Token{ID: "k-new", Hash: append(make([]byte, 31), 1), Role: "admin"}); err != nil {
				t.Fatalf("tokens after upgrade: %v", err)
			}
			if _, _, err := db.ImportTargets(ctx, "imp", make([]byte, 32), []Target{{ID: "t2", Name: "t2", Kind: KindOrbit}}); err != nil {
				t.Fatalf("target imports after upgrade: %v", err)
			}
			var names []string
			rows, err := db.r.Query(`SELECT version || '_' || name FROM schema_migrations ORDER BY version`)
			if err != nil {
				t.Fatal(err)
			}
			for rows.Next() {
				var s string
				_ = rows.Scan(&s)
				names = append(names, s)
			}
			rows.Close()
			if got, want := strings.Join(names, ","), "1_init,2_plans,3_tokens,4_target_imports,5_magnitudes,6_token_limits,7_block_edits,8_networks,9_programs"; got != want {
				t.Fatalf("schema_migrations: %s, want %s", got, want)
			}
			if err := db.IntegrityCheck(ctx); err != nil {
				t.Fatal(err)
			}
		})
	}
}

func TestMigrationRunner(t *testing.T) {
	ctx := t.Context()
	v1 := &fstest.MapFile{Data: []byte(`CREATE TABLE a (x INTEGER) STRICT;`)}
	v2 := &fstest.MapFile{Data: []byte(`ALTER TABLE a ADD COLUMN y TEXT; CREATE INDEX a_y ON a (y);`)}
	bad := &fstest.MapFile{Data: []byte(`CREATE TABLE b (x INTEGER); INSERT INTO nowhere VALUES (1);`)}

	t.Run("upgrade 1 to 2 keeps rows", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "m.db")
		db := openT(t, path, Options{migrations: fstest.MapFS{"migrations/0001_a.sql": v1}})
		if _, err := db.w.Exec(`INSERT INTO a (x) VALUES (7)`); err != nil {
			t.Fatal(err)
		}
		db.Close()
		db = openT(t, path, Options{migrations: fstest.MapFS{"migrations/0001_a.sql": v1, "migrations/0002_b.sql": v2}})
		var x int
		var y sql.NullString
		if err := db.r.QueryRow(`SELECT x, y FROM a`).Scan(&x, &y); err != nil || x != 7 || y.Valid {
			t.Fatalf("row after upgrade: %d %v %v", x, y, err)
		}
		if v, _ := db.SchemaVersion(ctx); v != 2 {
			t.Fatalf("version %d, want 2", v)
		}
	})

	t.Run("failed migration rolls back", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "m.db")
		_, err := Open(path, Options{migrations: fstest.MapFS{"migrations/0001_a.sql": v1, "migrations/0002_bad.sql": bad}})
		if err == nil || !strings.Contains(err.Error(), "0002_bad") {
			t.Fatalf("open with a failing migration: %v; want an error naming it", err)
		}
		db := openT(t, path, Options{migrations: fstest.MapFS{"migrations/0001_a.sql": v1}})
		if v, _ := db.SchemaVersion(ctx); v != 1 {
			t.Fatalf("version after failed migration %d, want 1", v)
		}
		var n int
		_ = db.r.QueryRow(`SELECT COUNT(*) FROM sqlite_schema WHERE name = 'b'`).Scan(&n)
		if n != 0 {
			t.Fatalf("half of the failed migration was kept (table b exists)")
		}
	})

	t.Run("newer database is refused", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "m.db")
		db := openT(t, path, Options{migrations: fstest.MapFS{"migrations/0001_a.sql": v1, "migrations/0002_b.sql": v2}})
		db.Close()
		_, err := Open(path, Options{migrations: fstest.MapFS{"migrations/0001_a.sql": v1}})
		if err == nil || !strings.Contains(err.Error(), "newer") {
			t.Fatalf("old build on a newer database: %v; want a refusal", err)
		}
	})

	for name, fsys := range map[string]fstest.MapFS{
		"gap":       {"migrations/0001_a.sql": v1, "migrations/0003_c.sql": v2},
		"repeat":    {"migrations/0001_a.sql": v1, "migrations/0001_b.sql": v2},
		"bad name":  {"migrations/0001_a.sql": v1, "migrations/2_b.sql": v2},
		"no files":  {},
		"from zero": {"migrations/0000_a.sql": v1},
	} {
		t.Run("refuses "+name, func(t *testing.T) {
			if _, err := Open(filepath.Join(t.TempDir(), "m.db"), Options{migrations: fsys}); err == nil {
				t.Fatalf("migrations with a %s were accepted", name)
			}
		})
	}
}

// ---- busy ----

// TestBusy holds the write lock from a connection of its own (as another
// process would) and checks that a write gives up with ErrBusy after the busy
// timeout and the retries, writes nothing, that reads go on meanwhile, and that
// writes work again once the lock is gone.
func TestBusy(t *testing.T) {
	ctx := t.Context()
	path := filepath.Join(t.TempDir(), "busy.db")
	db := openT(t, path, Options{BusyTimeout: 30 * time.Millisecond, BusyRetries: 2})
	if _, err := db.CreateSite(ctx, Site{ID: "s", Name: "s"}); err != nil {
		t.Fatal(err)
	}

	other, err := sql.Open("sqlite3", path+"?_busy_timeout=10")
	if err != nil {
		t.Fatal(err)
	}
	defer other.Close()
	conn, err := other.Conn(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if _, err := conn.ExecContext(ctx, "BEGIN IMMEDIATE"); err != nil {
		t.Fatal(err)
	}

	start := time.Now()
	_, err = db.CreateSite(ctx, Site{ID: "late", Name: "late"})
	took := time.Since(start)
	if !errors.Is(err, ErrBusy) {
		t.Fatalf("write while another connection holds the lock: %v, want ErrBusy", err)
	}
	// 3 attempts of >= 30 ms each (busy timeout) plus 5 and 20 ms back-off.
	if took < 90*time.Millisecond {
		t.Errorf("gave up after %v, before 3 busy timeouts of 30 ms", took)
	}
	if _, _, err := db.ReportProgress(ctx, ProgressReport{ReportID: "r", BlockID: "b", Start: time.Unix(1, 0), End: time.Unix(2, 0)}); !errors.Is(err, ErrBusy) {
		t.Fatalf("report while locked: %v, want ErrBusy", err)
	}
	if _, err := db.GetSite(ctx, "s"); err != nil {
		t.Fatalf("read while another connection holds the write lock: %v", err)
	}

	if _, err := conn.ExecContext(ctx, "ROLLBACK"); err != nil {
		t.Fatal(err)
	}
	if _, err := db.GetSite(ctx, "late"); !errors.Is(err, ErrNotFound) {
		t.Fatalf("busy write left a record: %v", err)
	}
	if _, err := db.CreateSite(ctx, Site{ID: "late", Name: "late"}); err != nil {
		t.Fatalf("write after the lock is released: %v", err)
	}
}

// TestBusyRetrySucceeds releases the lock during the retries: the call
// succeeds without the caller seeing the contention.
func TestBusyRetrySucceeds(t *testing.T) {
	ctx := t.Context()
	path := filepath.Join(t.TempDir(), "busy.db")
	db := openT(t, path, Options{BusyTimeout: 20 * time.Millisecond, BusyRetries: 5})
	other, err := sql.Open("sqlite3", path)
	if err != nil {
		t.Fatal(err)
	}
	defer other.Close()
	conn, err := other.Conn(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if _, err := conn.ExecContext(ctx, "BEGIN IMMEDIATE"); err != nil {
		t.Fatal(err)
	}
	released := make(chan error, 1)
	go func() {
		time.Sleep(60 * time.Millisecond)
		_, err := conn.ExecContext(context.Background(), "ROLLBACK")
		released <- err
	}()
	if _, err := db.CreateSite(ctx, Site{ID: "s", Name: "s"}); err != nil {
		t.Fatalf("write across a short lock: %v", err)
	}
	if err := <-released; err != nil {
		t.Fatal(err)
	}
}

// ---- clock ----

// TestPagingWithTies freezes the clock so that every record has the same
// creation instant: order and paging then rest on the id alone.
func TestPagingWithTies(t *testing.T) {
	ctx := t.Context()
	frozen := time.Date(2033, 1, 1, 0, 0, 0, 0, time.UTC)
	for _, path := range []string{":memory:", filepath.Join(t.TempDir(), "ties.db")} {
		db := openT(t, path, Options{Now: func() time.Time { return frozen }})
		order := []string{"m", "c", "x", "a", "q", "b", "z"}
		for _, id := range order {
			if _, err := db.CreateSite(ctx, Site{ID: id, Name: id}); err != nil {
				t.Fatal(err)
			}
		}
		var got []string
		token := ""
		for {
			page, next, err := db.ListSites(ctx, Page{Size: 2, Token: token})
			if err != nil {
				t.Fatal(err)
			}
			for _, s := range page {
				got = append(got, s.ID)
				if !s.CreatedAt.Equal(frozen) {
					t.Fatalf("CreatedAt %v, want the frozen %v", s.CreatedAt, frozen)
				}
			}
			if next == "" {
				break
			}
			token = next
		}
		if strings.Join(got, "") != "abcmqxz" {
			t.Fatalf("%s: sites with equal stamps listed as %v, want by id", path, got)
		}
	}
}

// ---- integrity ----

// TestIntegrityCheckFindsBrokenInvariants breaks each invariant with raw SQL
// (bypassing the store's methods) and expects IntegrityCheck to name it.
func TestIntegrityCheckFindsBrokenInvariants(t *testing.T) {
	ctx := t.Context()
	t0 := time.Date(2032, 5, 5, 1, 0, 0, 0, time.UTC)
	setup := func(t *testing.T) *DB {
		db := openT(t, filepath.Join(t.TempDir(), "i.db"), Options{})
		if _, err := db.CreateSite(ctx, Site{ID: "s", Name: "s"}); err != nil {
			t.Fatal(err)
		}
		if _, err := db.CreateTarget(ctx, Target{ID: "t", Name: "t", Kind: KindFixed}); err != nil {
			t.Fatal(err)
		}
		if _, err := db.CreateBlocks(ctx, []Block{{ID: "b", SiteID: "s", TargetID: "t", FramesWanted: 5}}); err != nil {
			t.Fatal(err)
		}
		if _, _, err := db.ReportProgress(ctx, ProgressReport{ReportID: "r", BlockID: "b", FramesKept: 2, Start: t0, End: t0}); err != nil {
			t.Fatal(err)
		}
		for i := range 3 {
			if _, err := db.CreatePlan(ctx, Plan{ID: fmt.Sprint("p", i), SiteID: "s", Start: t0, End: t0}); err != nil {
				t.Fatal(err)
			}
		}
		if err := db.IntegrityCheck(ctx); err != nil {
			t.Fatalf("before damage: %v", err)
		}
		return db
	}
	cases := []struct {
		name, damage, mention string
	}{
		{"frames without reports", `UPDATE blocks SET frames_done = 3`, "frames done 3, reports applied 2"},
		{"report lost", `DELETE FROM progress_reports`, "block b"},
		{"plan version gap", `DELETE FROM plans WHERE version = 2`, "plan versions"},
		{"orphan block", `PRAGMA foreign_keys = OFF; DELETE FROM targets; PRAGMA foreign_keys = ON`, "refers to missing targets"},
		{"queued at wanted", `PRAGMA ignore_check_constraints = ON; UPDATE blocks SET frames_done = 5; UPDATE progress_reports SET frames_applied = 5, frames_kept = 5; PRAGMA ignore_check_constraints = OFF`, "state queued with 5 of 5"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			db := setup(t)
			// One raw connection so that the connection pragmas apply to the
			// statements after them.
			conn, err := db.w.Conn(ctx)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := conn.ExecContext(ctx, c.damage); err != nil {
				t.Fatalf("damage: %v", err)
			}
			conn.Close()
			err = db.IntegrityCheck(ctx)
			if !errors.Is(err, ErrIntegrity) || !strings.Contains(err.Error(), c.mention) {
				t.Fatalf("IntegrityCheck after %s: %v; want ErrIntegrity mentioning %q", c.name, err, c.mention)
			}
		})
	}
}

// TestTwoHandlesOneFile opens the same file twice, as two processes would,
// and writes from both at once: BEGIN IMMEDIATE and the busy timeout
// serialise them, plan versions stay 1..n and every report counts once.
func TestTwoHandlesOneFile(t *testing.T) {
	ctx := t.Context()
	path := filepath.Join(t.TempDir(), "two.db")
	a := openT(t, path, Options{})
	b := openT(t, path, Options{})
	if _, err := a.CreateSite(ctx, Site{ID: "s", Name: "s"}); err != nil {
		t.Fatal(err)
	}
	if _, err := b.CreateTarget(ctx, Target{ID: "t", Name: "t", Kind: KindFixed}); err != nil {
		t.Fatal(err)
	}
	if _, err := a.CreateBlocks(ctx, []Block{{ID: "blk", SiteID: "s", TargetID: "t", FramesWanted: 1000}}); err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC)
	const each = 25
	errc := make(chan error, 4*each)
	var wg sync.WaitGroup
	for h, db := range []*DB{a, b} {
		for w := range 2 {
			wg.Go(func() {
				for i := range each {
					id := fmt.Sprintf("h%d-w%d-%d", h, w, i)
					if _, err := db.CreatePlan(ctx, Plan{ID: id, SiteID: "s", Start: t0, End: t0}); err != nil {
						errc <- err
						return
					}
					// Both handles send every report: one applies it.
					r := ProgressReport{ReportID: fmt.Sprintf("w%d-%d", w, i), BlockID: "blk", FramesKept: 1, Start: t0, End: t0}
					if _, _, err := db.ReportProgress(ctx, r); err != nil {
						errc <- err
						return
					}
				}
			})
		}
	}
	wg.Wait()
	close(errc)
	for err := range errc {
		t.Fatal(err)
	}
	p, err := b.LatestPlan(ctx, "s")
	if err != nil || p.Version != 4*each {
		t.Fatalf("latest plan %+v, %v; want version %d", p, err, 4*each)
	}
	blk, err := a.GetBlock(ctx, "blk")
	if err != nil || blk.FramesDone != 2*each {
		t.Fatalf("block %+v, %v; want %d frames (each report once)", blk, err, 2*each)
	}
	if err := a.IntegrityCheck(ctx); err != nil {
		t.Fatal(err)
	}
}

// TestFileURI opens a database through a file: URI with a query of the
// caller's own; the store's settings still apply.
func TestFileURI(t *testing.T) {
	path := filepath.Join(t.TempDir(), "uri.db")
	db := openT(t, "file:"+path+"?cache=private", Options{})
	if _, err := db.CreateSite(t.Context(), Site{ID: "s", Name: "s"}); err != nil {
		t.Fatal(err)
	}
	if got := pragma(t, db.w, "journal_mode"); got != "wal" {
		t.Fatalf("journal_mode %s, want wal", got)
	}
	if got := pragma(t, db.w, "synchronous"); got != "2" {
		t.Fatalf("synchronous %s, want 2", got)
	}
	db.Close()
	again := openT(t, path, Options{})
	if _, err := again.GetSite(t.Context(), "s"); err != nil {
		t.Fatalf("site written through the URI not in the file: %v", err)
	}
}

// TestCopyCoversEveryTable lists every table and column the migrations
// create and fails for one that Copy does not write, so a migration that
// adds a table or a column must extend Copy (its typed records or
// rawTables) in the same change.
func TestCopyCoversEveryTable(t *testing.T) {
	db := openT(t, filepath.Join(t.TempDir(), "cover.db"), Options{})
	copied := map[string]map[string]bool{}
	for _, tb := range (&records{}).rows() {
		cols := map[string]bool{}
		for _, c := range strings.Split(tb.cols, ",") {
			cols[strings.TrimSpace(c)] = true
		}
		copied[tb.table] = cols
	}
	rows, err := db.w.Query(`SELECT name FROM sqlite_master WHERE type = 'table'
		AND name NOT LIKE 'sqlite_%' AND name <> 'schema_migrations' ORDER BY name`)
	if err != nil {
		t.Fatal(err)
	}
	var tables []string
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			t.Fatal(err)
		}
		tables = append(tables, n)
	}
	rows.Close()
	if len(tables) < 10 {
		t.Fatalf("found only %d tables (%v): the listing is wrong", len(tables), tables)
	}
	for _, tb := range tables {
		cols, ok := copied[tb]
		if !ok {
			t.Errorf("table %s is not copied by Copy", tb)
			continue
		}
		crow, err := db.w.Query(`SELECT name FROM pragma_table_info(?)`, tb)
		if err != nil {
			t.Fatal(err)
		}
		for crow.Next() {
			var c string
			if err := crow.Scan(&c); err != nil {
				t.Fatal(err)
			}
			if !cols[c] {
				t.Errorf("column %s.%s is not copied by Copy", tb, c)
			}
		}
		crow.Close()
	}
}
