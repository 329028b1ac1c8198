package store_test

import (
	"os"
	"testing"

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
