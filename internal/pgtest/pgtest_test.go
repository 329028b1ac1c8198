package pgtest

import (
	"os"
	"testing"

	"github.com/jackc/pgx/v5"
)

func TestMain(m *testing.M) { os.Exit(Main(m)) }

// TestNewDatabase checks that each database is fresh and separate and that
// the server is a real PostgreSQL.
func TestNewDatabase(t *testing.T) {
	ctx := t.Context()
	a, b := NewDatabase(t), NewDatabase(t)
	ca, err := pgx.Connect(ctx, a)
	if err != nil {
		t.Fatal(err)
	}
	defer ca.Close(ctx)
	if _, err := ca.Exec(ctx, `CREATE TABLE x (v int)`); err != nil {
		t.Fatal(err)
	}
	var version string
	if err := ca.QueryRow(ctx, `SHOW server_version`).Scan(&version); err != nil {
		t.Fatal(err)
	}
	t.Logf("server version %s", version)
	cb, err := pgx.Connect(ctx, b)
	if err != nil {
		t.Fatal(err)
	}
	defer cb.Close(ctx)
	var n int
	if err := cb.QueryRow(ctx, `SELECT count(*) FROM pg_tables WHERE tablename = 'x'`).Scan(&n); err != nil || n != 0 {
		t.Fatalf("table of one database seen in another: %d, %v", n, err)
	}
}
