package store

import (
	"context"
	"errors"
	"fmt"
	"hash/fnv"
	"net/url"
	"strings"
	"sync"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"
)

// pgDB is the PostgreSQL implementation of Store (github.com/jackc/pgx/v5),
// for several daemons on one database. Every write is one explicit
// transaction (pgx.BeginTxFunc) at READ COMMITTED; read-modify-write calls
// take the rows they change with SELECT ... FOR UPDATE (or the site's row
// with FOR NO KEY UPDATE for plan versions), so they behave as SQLite's
// single writer does for the rows they touch while other rows proceed in
// parallel. Statements wait for a lock at most Options.BusyTimeout
// (lock_timeout); a write that fails on a lock timeout, a deadlock or a
// serialization failure is run again up to Options.BusyRetries times and then
// fails with ErrBusy.
type pgDB struct {
	opts Options
	pool *pgxpool.Pool
	// locks holds the connections that keep planning locks and LISTEN
	// (replicas.go).
	locks *pgxpool.Pool

	mu        sync.Mutex
	listeners []*pgListener
}

// IsPostgresDSN reports whether db names a PostgreSQL database (a
// postgres:// or postgresql:// URL) rather than a SQLite file.
func IsPostgresDSN(db string) bool {
	return strings.HasPrefix(db, "postgres://") || strings.HasPrefix(db, "postgresql://")
}

// OpenDSN opens a PostgreSQL database when db is a postgres:// URL and a
// SQLite file otherwise; the daemon's --db flag goes through it.
func OpenDSN(db string, opts Options) (*DB, error) {
	if IsPostgresDSN(db) {
		return OpenPostgres(db, opts)
	}
	return Open(db, opts)
}

// Advisory-lock classes (the first key of pg_advisory_lock(int4, int4)),
// named after what they guard.
const (
	lockClassMigrations  int32 = 0x6e6c0001 // "nl" 1: applying migrations
	lockClassSitePlanner int32 = 0x6e6c0002 // "nl" 2: planning one site; second key = siteKey(id)
)

// siteKey is the second advisory-lock key of a site: its id's 32-bit FNV-1a
// hash. Two sites may share a key (then they are planned one after the other,
// which is safe).
func siteKey(id string) int32 {
	h := fnv.New32a()
	_, _ = h.Write([]byte(id))
	return int32(h.Sum32())
}

// OpenPostgres connects to the PostgreSQL database dsn (a postgres:// URL)
// and brings its schema up to date under an advisory lock, so that replicas
// starting together apply each migration once. Options.MaxReaders bounds the
// pool (default 4 readers + 8 = 12 connections).
func OpenPostgres(dsn string, opts Options) (*DB, error) {
	p, err := openPG(dsn, opts)
	if err != nil {
		return nil, err
	}
	return &DB{impl: p, pg: p}, nil
}

func openPG(dsn string, opts Options) (*pgDB, error) {
	opts = opts.withDefaults()
	cfg, err := pgxpool.ParseConfig(dsn)
	if err != nil {
		return nil, invalidf("store: open postgres: %v", err)
	}
	cfg.MaxConns = int32(opts.MaxReaders + 8)
	if cfg.ConnConfig.RuntimeParams == nil {
		cfg.ConnConfig.RuntimeParams = map[string]string{}
	}
	cfg.ConnConfig.RuntimeParams["lock_timeout"] = fmt.Sprintf("%dms", opts.BusyTimeout.Milliseconds())
	cfg.ConnConfig.RuntimeParams["application_name"] = "nightloomd"
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("store: open postgres: %w", err)
	}
	d := &pgDB{opts: opts, pool: pool}
	if d.locks, err = newLockPool(ctx, cfg); err != nil {
		pool.Close()
		return nil, fmt.Errorf("store: open postgres: %w", err)
	}
	if err := d.migrate(ctx); err != nil {
		pool.Close()
		d.locks.Close()
		return nil, fmt.Errorf("store: open postgres %s: %w", redactDSN(dsn), err)
	}
	return d, nil
}

// RedactDSN returns db fit for a log: a postgres:// URL without its password
// (a SQLite path as it is).
func RedactDSN(db string) string {
	if !IsPostgresDSN(db) {
		return db
	}
	u, err := url.Parse(db)
	if err != nil {
		return "(unparsable postgres URL)"
	}
	if _, has := u.User.Password(); has {
		u.User = url.UserPassword(u.User.Username(), "REDACTED")
	}
	return u.String()
}

// redactDSN drops a password from dsn for messages.
func redactDSN(dsn string) string {
	cfg, err := pgconn.ParseConfig(dsn)
	if err != nil {
		return "(unparsable DSN)"
	}
	return fmt.Sprintf("host=%s port=%d dbname=%s user=%s", cfg.Host, cfg.Port, cfg.Database, cfg.User)
}

// Close stops the listener and closes the pool; calls in flight finish first.
func (d *pgDB) Close() error {
	d.mu.Lock()
	ls := d.listeners
	d.listeners = nil
	d.mu.Unlock()
	for _, l := range ls {
		l.stop()
	}
	d.locks.Close()
	d.pool.Close()
	return nil
}

func (d *pgDB) now() time.Time {
	return time.Unix(0, d.opts.Now().UnixNano()).UTC()
}

// write runs fn in one read-write transaction and commits it, running it
// again after a lock timeout, deadlock or serialization failure up to
// Options.BusyRetries times. The error names op.
func (d *pgDB) write(ctx context.Context, op string, fn func(tx pgx.Tx) error) error {
	backoff := 5 * time.Millisecond
	for attempt := 0; ; attempt++ {
		err := pgx.BeginTxFunc(ctx, d.pool, pgx.TxOptions{}, fn)
		if err == nil {
			return nil
		}
		if !pgRetryable(err) || attempt >= d.opts.BusyRetries || ctx.Err() != nil {
			return pgMapErr(ctx, op, err)
		}
		t := time.NewTimer(backoff)
		select {
		case <-ctx.Done():
			t.Stop()
			return pgMapErr(ctx, op, ctx.Err())
		case <-t.C:
		}
		backoff *= 4
	}
}

// read runs fn in one read-only REPEATABLE READ transaction (a consistent
// snapshot).
func (d *pgDB) read(ctx context.Context, op string, fn func(tx pgx.Tx) error) error {
	err := pgx.BeginTxFunc(ctx, d.pool, pgx.TxOptions{IsoLevel: pgx.RepeatableRead, AccessMode: pgx.ReadOnly}, fn)
	return pgMapErr(ctx, op, err)
}

// PostgreSQL error codes (SQLSTATE, PostgreSQL documentation, appendix A).
const (
	pgUniqueViolation      = "23505"
	pgForeignKeyViolation  = "23503"
	pgCheckViolation       = "23514"
	pgNotNullViolation     = "23502"
	pgSerializationFailure = "40001"
	pgDeadlockDetected     = "40P01"
	pgLockNotAvailable     = "55P03" // lock_timeout
	pgQueryCanceled        = "57014"
)

// pgRetryable reports whether a write transaction failed in a way that
// running it again may fix.
func pgRetryable(err error) bool {
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		switch pe.Code {
		case pgSerializationFailure, pgDeadlockDetected, pgLockNotAvailable:
			return true
		}
	}
	return false
}

// pgMapErr is mapErr for PostgreSQL: the one place where driver errors get
// the store's meaning. No rows -> ErrNotFound, unique violation ->
// ErrAlreadyExists, foreign key violation -> ErrNotFound, check violation ->
// ErrInvalid, serialization failure / deadlock / lock timeout -> ErrBusy.
func pgMapErr(ctx context.Context, op string, err error) error {
	if err == nil {
		return nil
	}
	for _, s := range sentinels {
		if errors.Is(err, s) {
			return fmt.Errorf("%s: %w", op, err)
		}
	}
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return fmt.Errorf("%s: %w", op, err)
	}
	if errors.Is(err, pgx.ErrNoRows) {
		return fmt.Errorf("%s: %w", op, ErrNotFound)
	}
	var pe *pgconn.PgError
	if errors.As(err, &pe) {
		switch pe.Code {
		case pgUniqueViolation:
			return fmt.Errorf("%s: %w: %w", op, ErrAlreadyExists, err)
		case pgForeignKeyViolation:
			return fmt.Errorf("%s: %w: %w", op, ErrNotFound, err)
		case pgCheckViolation, pgNotNullViolation:
			return fmt.Errorf("%s: %w: %w", op, ErrInvalid, err)
		case pgSerializationFailure, pgDeadlockDetected, pgLockNotAvailable:
			return fmt.Errorf("%s: %w: %w", op, ErrBusy, err)
		case pgQueryCanceled:
			if ctx.Err() != nil {
				return fmt.Errorf("%s: %w: %w", op, ctx.Err(), err)
			}
			return fmt.Errorf("%s: %w: %w", op, ErrBusy, err)
		}
	}
	if ctx.Err() != nil {
		return fmt.Errorf("%s: %w: %w", op, ctx.Err(), err)
	}
	return fmt.Errorf("%s: %w", op, err)
}

// migrate applies the missing migrations of migrations/postgres while it
// holds the migrations advisory lock on one connection, each migration in
// its own transaction together with its schema_migrations row.
func (d *pgDB) migrate(ctx context.Context) error {
	fsys := d.opts.migrations
	ms, err := loadMigrationsDir(fsys, "migrations/postgres")
	if err != nil {
		return err
	}
	if d.opts.maxVersion > 0 && d.opts.maxVersion < len(ms) {
		ms = ms[:d.opts.maxVersion]
	}
	conn, err := d.pool.Acquire(ctx)
	if err != nil {
		return err
	}
	defer conn.Release()
	// Wait for another replica's migrations however long they take: the
	// session's lock_timeout does not apply here.
	if _, err := conn.Exec(ctx, `SET lock_timeout = 0`); err != nil {
		return err
	}
	if _, err := conn.Exec(ctx, `SELECT pg_advisory_lock($1, 0)`, lockClassMigrations); err != nil {
		return fmt.Errorf("migrations lock: %w", err)
	}
	defer func() {
		_, _ = conn.Exec(context.Background(), `SELECT pg_advisory_unlock($1, 0)`, lockClassMigrations)
		_, _ = conn.Exec(context.Background(), `RESET lock_timeout`)
	}()
	if _, err := conn.Exec(ctx, `CREATE TABLE IF NOT EXISTS schema_migrations (
		version    INTEGER NOT NULL PRIMARY KEY,
		name       TEXT    NOT NULL,
		applied_at BIGINT  NOT NULL
	)`); err != nil {
		return fmt.Errorf("create schema_migrations: %w", err)
	}
	current := func() (int, error) {
		var v int
		err := conn.QueryRow(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&v)
		return v, err
	}
	v, err := current()
	if err != nil {
		return err
	}
	if v > len(ms) && d.opts.maxVersion == 0 {
		return fmt.Errorf("database schema is at version %d, newer than this build knows (%d); use a newer nightloomd", v, len(ms))
	}
	for _, m := range ms {
		if m.version <= v {
			continue
		}
		err := pgx.BeginTxFunc(ctx, conn, pgx.TxOptions{}, func(tx pgx.Tx) error {
			if _, err := tx.Exec(ctx, m.sql); err != nil {
				return err
			}
			_, err := tx.Exec(ctx, `INSERT INTO schema_migrations (version, name, applied_at) VALUES ($1, $2, $3)`,
				m.version, m.name, d.now().UnixNano())
			return err
		})
		if err != nil {
			return fmt.Errorf("migration %04d_%s: %w", m.version, m.name, err)
		}
	}
	return nil
}

// SchemaVersion returns the highest migration applied to the database.
func (d *pgDB) SchemaVersion(ctx context.Context) (int, error) {
	var v int
	err := d.pool.QueryRow(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&v)
	return v, pgMapErr(ctx, "schema version", err)
}

// collectPG is collect for pgx rows.
func collectPG[T any](rows pgx.Rows, size int, scope string, scan func(scanner) (T, error), pos func(T) cursor) ([]T, string, error) {
	defer rows.Close()
	out := make([]T, 0, min(size, 64))
	more := false
	for rows.Next() {
		if len(out) == size {
			more = true
			break
		}
		v, err := scan(rows)
		if err != nil {
			return nil, "", err
		}
		out = append(out, v)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, "", err
	}
	if !more {
		return out, "", nil
	}
	return out, encodeToken(scope, pos(out[len(out)-1])), nil
}
