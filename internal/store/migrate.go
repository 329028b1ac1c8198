package store

import (
	"context"
	"database/sql"
	"embed"
	"fmt"
	"io/fs"
	"path"
	"regexp"
	"sort"
	"strconv"
)

// embeddedMigrations are the schema's history: migrations/NNNN_name.sql,
// numbered from 0001 without gaps. A released file is never edited; a change
// of schema is a new file.
//
// The PostgreSQL dialect of the same history is migrations/postgres/, file
// for file.
//
//go:embed migrations/*.sql migrations/postgres/*.sql
var embeddedMigrations embed.FS

type migration struct {
	version int
	name    string
	sql     string
}

var migrationName = regexp.MustCompile(`^([0-9]{4})_([a-z0-9_]+)\.sql$`)

// loadMigrations reads migrations/*.sql from fsys, checks their names and
// that they are numbered 1, 2, 3, ... and returns them in order.
func loadMigrations(fsys fs.FS) ([]migration, error) {
	return loadMigrationsDir(fsys, "migrations")
}

// loadMigrationsDir is loadMigrations for the folder dir of fsys.
func loadMigrationsDir(fsys fs.FS, dir string) ([]migration, error) {
	names, err := fs.Glob(fsys, dir+"/*.sql")
	if err != nil {
		return nil, err
	}
	var ms []migration
	for _, n := range names {
		base := path.Base(n)
		m := migrationName.FindStringSubmatch(base)
		if m == nil {
			return nil, fmt.Errorf("migration %s: name is not NNNN_name.sql", base)
		}
		v, _ := strconv.Atoi(m[1])
		text, err := fs.ReadFile(fsys, n)
		if err != nil {
			return nil, err
		}
		ms = append(ms, migration{version: v, name: m[2], sql: string(text)})
	}
	sort.Slice(ms, func(i, j int) bool { return ms[i].version < ms[j].version })
	for i, m := range ms {
		if m.version != i+1 {
			return nil, fmt.Errorf("migration %04d_%s: want version %d (versions start at 1 without gaps or repeats)", m.version, m.name, i+1)
		}
	}
	if len(ms) == 0 {
		return nil, fmt.Errorf("no migrations")
	}
	return ms, nil
}

// SchemaVersion returns the highest migration applied to the database.
func (d *sqliteDB) SchemaVersion(ctx context.Context) (int, error) {
	var v int
	err := d.r.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&v)
	return v, mapErr(ctx, "schema version", err)
}

// migrate applies the missing migrations, each in one IMMEDIATE transaction
// that also records it in schema_migrations (so a failed migration leaves the
// database at the previous version, and two processes opening the same file
// at once apply each migration once).
func (d *sqliteDB) migrate(ctx context.Context) error {
	ms, err := loadMigrations(d.opts.migrations)
	if err != nil {
		return err
	}
	if d.opts.maxVersion > 0 && d.opts.maxVersion < len(ms) {
		ms = ms[:d.opts.maxVersion]
	}
	if _, err := d.w.ExecContext(ctx, `CREATE TABLE IF NOT EXISTS schema_migrations (
		version    INTEGER NOT NULL PRIMARY KEY,
		name       TEXT    NOT NULL,
		applied_at INTEGER NOT NULL
	) STRICT`); err != nil {
		return fmt.Errorf("create schema_migrations: %w", err)
	}
	current := func(tx *sql.Tx) (int, error) {
		var v int
		err := tx.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&v)
		return v, err
	}
	for _, m := range ms {
		op := fmt.Sprintf("migration %04d_%s", m.version, m.name)
		err := d.write(ctx, op, func(tx *sql.Tx) error {
			v, err := current(tx)
			if err != nil {
				return err
			}
			if v >= m.version {
				return nil // applied before, or by another process just now
			}
			if v != m.version-1 {
				return fmt.Errorf("database is at version %d", v)
			}
			if _, err := tx.ExecContext(ctx, m.sql); err != nil {
				return err
			}
			_, err = tx.ExecContext(ctx, `INSERT INTO schema_migrations (version, name, applied_at) VALUES (?, ?, ?)`,
				m.version, m.name, d.now().UnixNano())
			return err
		})
		if err != nil {
			return err
		}
	}
	var v int
	if err := d.w.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&v); err != nil {
		return err
	}
	if v > len(ms) {
		return fmt.Errorf("database schema is at version %d, newer than this build knows (%d); use a newer nightloomd", v, len(ms))
	}
	return nil
}
