package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"net/url"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	_ "github.com/mattn/go-sqlite3" // registers the "sqlite3" driver
)

// Options tune Open. The zero value is the production setting.
type Options struct {
	// BusyTimeout is how long one statement waits for a lock held by another
	// connection (SQLite's busy_timeout) before it fails with SQLITE_BUSY.
	// Zero means 5 s.
	BusyTimeout time.Duration
	// BusyRetries is how many more times a write transaction is run after it
	// failed with SQLITE_BUSY or SQLITE_LOCKED; after that the call fails with
	// ErrBusy. Zero means 2; a negative value means no retry.
	BusyRetries int
	// MaxReaders bounds the read-only connections of a file database.
	// Zero means 4. (An in-memory database has one connection in all.)
	MaxReaders int
	// Now is the clock that stamps CreatedAt, UpdatedAt, ReceivedAt and
	// RevokedAt. Nil means time.Now.
	Now func() time.Time

	// synchronous overrides synchronous=FULL; only the benchmark that
	// measures what FULL costs sets it, so there is no exported way to open
	// a database with weaker durability.
	synchronous string
	// migrations and maxVersion let the migration tests run another set of
	// migrations, or stop at a version; zero values mean the embedded set,
	// all of it.
	migrations fs.FS
	maxVersion int
}

const (
	defaultBusyTimeout = 5 * time.Second
	defaultBusyRetries = 2
	defaultMaxReaders  = 4
)

func (o Options) withDefaults() Options {
	if o.BusyTimeout <= 0 {
		o.BusyTimeout = defaultBusyTimeout
	}
	switch {
	case o.BusyRetries == 0:
		o.BusyRetries = defaultBusyRetries
	case o.BusyRetries < 0:
		o.BusyRetries = 0
	}
	if o.MaxReaders <= 0 {
		o.MaxReaders = defaultMaxReaders
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	if o.synchronous == "" {
		o.synchronous = "FULL"
	}
	if o.migrations == nil {
		o.migrations = embeddedMigrations
	}
	return o
}

// sqliteDB is the SQLite implementation of Store.
type sqliteDB struct {
	opts Options
	// w is the writer: one connection, transactions begin IMMEDIATE.
	w *sql.DB
	// r is the reader pool (read-only connections); w itself for an
	// in-memory database.
	r *sql.DB
	// keep holds an in-memory database alive whatever database/sql does
	// with the pool's connection; nil for a file database.
	keepDB *sql.DB
	keep   *sql.Conn
}

var memorySeq atomic.Uint64

// Open opens (creating if needed) the database at path and brings its schema
// up to date. path is a file name, a "file:" URI, or ":memory:" for a fresh
// private in-memory database (each Open of ":memory:" is a new database).
func Open(path string, opts Options) (*DB, error) {
	s, err := openSQLite(path, opts)
	if err != nil {
		return nil, err
	}
	return &DB{sqliteDB: s, impl: s}, nil
}

func openSQLite(path string, opts Options) (*sqliteDB, error) {
	opts = opts.withDefaults()
	base, memory, err := baseDSN(path)
	if err != nil {
		return nil, err
	}

	common := url.Values{}
	common.Set("_foreign_keys", "1")
	common.Set("_busy_timeout", strconv.FormatInt(opts.BusyTimeout.Milliseconds(), 10))
	common.Set("_synchronous", opts.synchronous)

	writer := cloneValues(common)
	writer.Set("_txlock", "immediate")
	if !memory {
		writer.Set("_journal_mode", "WAL")
	}

	d := &sqliteDB{opts: opts}
	ctx := context.Background()
	fail := func(err error) (*sqliteDB, error) {
		_ = d.Close()
		return nil, fmt.Errorf("store: open %s: %w", path, err)
	}

	if memory {
		// Hold one connection that never runs a statement (so it takes no
		// shared-cache table lock) until Close.
		if d.keepDB, err = sql.Open("sqlite3", joinDSN(base, common)); err != nil {
			return fail(err)
		}
		if d.keep, err = d.keepDB.Conn(ctx); err != nil {
			return fail(err)
		}
	}

	if d.w, err = sql.Open("sqlite3", joinDSN(base, writer)); err != nil {
		return fail(err)
	}
	d.w.SetMaxOpenConns(1)
	d.w.SetMaxIdleConns(1)
	d.w.SetConnMaxLifetime(0)
	d.w.SetConnMaxIdleTime(0)

	if !memory {
		var mode string
		if err := d.w.QueryRowContext(ctx, "PRAGMA journal_mode").Scan(&mode); err != nil {
			return fail(err)
		}
		if !strings.EqualFold(mode, "wal") {
			return fail(fmt.Errorf("journal mode is %q, want wal", mode))
		}
	}

	if err := d.migrate(ctx); err != nil {
		return fail(err)
	}

	if memory {
		// Shared-cache connections lock whole tables and do not wait on
		// the busy timeout, so reads share the writer's one connection.
		d.r = d.w
		return d, nil
	}
	reader := cloneValues(common)
	reader.Set("_query_only", "1")
	if d.r, err = sql.Open("sqlite3", joinDSN(base, reader)); err != nil {
		return fail(err)
	}
	d.r.SetMaxOpenConns(opts.MaxReaders)
	d.r.SetMaxIdleConns(opts.MaxReaders)
	if err := d.r.PingContext(ctx); err != nil {
		return fail(err)
	}
	return d, nil
}

// baseDSN turns Open's path into the part of the DSN before the query, and
// says whether it is an in-memory database.
func baseDSN(path string) (base string, memory bool, err error) {
	switch {
	case path == "":
		return "", false, invalidf("store: open: empty path")
	case path == ":memory:":
		return fmt.Sprintf("file:nightloom-memory-%d?mode=memory&cache=shared", memorySeq.Add(1)), true, nil
	case strings.HasPrefix(path, "file:"):
		u, q, _ := strings.Cut(path, "?")
		vals, err := url.ParseQuery(q)
		if err != nil {
			return "", false, invalidf("store: open %s: %v", path, err)
		}
		if vals.Get("mode") == "memory" || strings.HasPrefix(u, "file::memory:") {
			vals.Set("mode", "memory")
			vals.Set("cache", "shared")
			memory = true
		}
		return u + "?" + vals.Encode(), memory, nil
	case strings.ContainsAny(path, "?#"):
		return "", false, invalidf("store: open %s: a file name may not contain '?' or '#'; use a file: URI", path)
	default:
		return path + "?", false, nil
	}
}

func joinDSN(base string, v url.Values) string {
	if strings.HasSuffix(base, "?") {
		return base + v.Encode()
	}
	return base + "&" + v.Encode()
}

func cloneValues(v url.Values) url.Values {
	c := url.Values{}
	for k, vs := range v {
		c[k] = append([]string(nil), vs...)
	}
	return c
}

// Close closes the database. Calls in flight finish first.
func (d *sqliteDB) Close() error {
	var errs []error
	if d.r != nil && d.r != d.w {
		errs = append(errs, d.r.Close())
	}
	if d.w != nil {
		errs = append(errs, d.w.Close())
	}
	if d.keep != nil {
		errs = append(errs, d.keep.Close())
	}
	if d.keepDB != nil {
		errs = append(errs, d.keepDB.Close())
	}
	return errors.Join(errs...)
}

// now is the store's clock, normalised to what a read gives back.
func (d *sqliteDB) now() time.Time {
	return time.Unix(0, d.opts.Now().UnixNano()).UTC()
}

// write runs fn in one IMMEDIATE transaction on the writer connection and
// commits it; fn must use only tx. It runs fn again (from a fresh
// transaction) after SQLITE_BUSY/LOCKED, up to Options.BusyRetries times.
// The error names op.
func (d *sqliteDB) write(ctx context.Context, op string, fn func(tx *sql.Tx) error) error {
	backoff := 5 * time.Millisecond
	for attempt := 0; ; attempt++ {
		err := d.writeOnce(ctx, fn)
		if err == nil {
			return nil
		}
		if !isBusy(err) || attempt >= d.opts.BusyRetries || ctx.Err() != nil {
			return mapErr(ctx, op, err)
		}
		t := time.NewTimer(backoff)
		select {
		case <-ctx.Done():
			t.Stop()
			return mapErr(ctx, op, ctx.Err())
		case <-t.C:
		}
		backoff *= 4
	}
}

func (d *sqliteDB) writeOnce(ctx context.Context, fn func(tx *sql.Tx) error) error {
	tx, err := d.w.BeginTx(ctx, nil)
	if err != nil {
		return err
	}
	if err := fn(tx); err != nil {
		_ = tx.Rollback()
		return err
	}
	// A failed COMMIT is rolled back by the driver, so a retry is safe.
	return tx.Commit()
}

// read runs fn in one read transaction (a consistent snapshot) on the reader
// pool.
func (d *sqliteDB) read(ctx context.Context, op string, fn func(tx *sql.Tx) error) error {
	tx, err := d.r.BeginTx(ctx, nil)
	if err != nil {
		return mapErr(ctx, op, err)
	}
	defer func() { _ = tx.Rollback() }()
	if err := fn(tx); err != nil {
		return mapErr(ctx, op, err)
	}
	return nil
}

// scanner is *sql.Row or *sql.Rows.
type scanner interface{ Scan(dest ...any) error }

// Instants are stored as int64 nanoseconds since the Unix epoch, which covers
// the years 1678 to 2262.
var (
	minInstant = time.Unix(0, math.MinInt64).UTC()
	maxInstant = time.Unix(0, math.MaxInt64).UTC()
)

// encTime encodes an instant the caller supplied; what names the field for
// the error. The zero time is refused.
func encTime(t time.Time, what string) (int64, error) {
	if t.IsZero() {
		return 0, invalidf("%s is not set", what)
	}
	if t.Before(minInstant) || t.After(maxInstant) {
		return 0, invalidf("%s %s is outside the years 1678-2262", what, t.Format(time.RFC3339))
	}
	return t.UnixNano(), nil
}

func decTime(ns int64) time.Time { return time.Unix(0, ns).UTC() }

// blob keeps a nil slice from being bound as SQL NULL.
func blob(b []byte) []byte {
	if b == nil {
		return []byte{}
	}
	return b
}
