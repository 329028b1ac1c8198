package store

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"
)

// What several daemons on one PostgreSQL database need beyond the records:
// a lock that serialises the planning of a site across daemons, and the
// announcement of every stored plan version to every daemon. A SQLite
// database belongs to one daemon, so there these are no-ops.
//
// Plan versions travel by LISTEN/NOTIFY rather than by polling: CreatePlan
// sends the NOTIFY in the transaction that stores the version, so PostgreSQL
// delivers it at commit, to every listening daemon, in commit order (which
// the site's row lock makes version order), within milliseconds and with no
// query while nothing happens. Polling would add its period to every
// delivery and a query per site per period on every daemon. A notification
// sent while a daemon's listening connection is down is lost, so the
// listener reports a resync after every (re)connection and the receiver
// fills the gap from the plans table.

// SharedByReplicas reports whether other daemons may use the same database
// (PostgreSQL) rather than only this process (SQLite).
func (d *DB) SharedByReplicas() bool { return d.pg != nil }

// DefaultPlanLockTimeout is how long LockSitePlanning waits for another
// daemon's planning of the same site before it gives up with ErrBusy.
const DefaultPlanLockTimeout = 10 * time.Second

// LockSitePlanning takes the cross-daemon lock that serialises the planning
// of one site (a PostgreSQL session advisory lock keyed by the site, held on
// a connection of its own until unlock is called; PostgreSQL releases it by
// itself if this daemon dies). It waits at most timeout (zero means
// DefaultPlanLockTimeout) and then fails with ErrBusy, which the server maps
// to ABORTED so that the caller retries. On SQLite it returns at once: the
// server's own per-site mutex is the whole lock.
func (d *DB) LockSitePlanning(ctx context.Context, siteID string, timeout time.Duration) (unlock func(), err error) {
	if d.pg == nil {
		return func() {}, nil
	}
	return d.pg.lockSite(ctx, siteID, timeout)
}

func (d *pgDB) lockSite(ctx context.Context, siteID string, timeout time.Duration) (func(), error) {
	if timeout <= 0 {
		timeout = DefaultPlanLockTimeout
	}
	op := fmt.Sprintf("lock planning of site %q", siteID)
	c, err := d.locks.Acquire(ctx)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	_, err = c.Exec(ctx, `SELECT set_config('lock_timeout', $1, false), pg_advisory_lock($2, $3)`,
		strconv.FormatInt(timeout.Milliseconds(), 10)+"ms", lockClassSitePlanner, siteKey(siteID))
	if err != nil {
		_ = c.Conn().Close(context.Background()) // the pool drops a closed connection
		c.Release()
		return nil, pgMapErr(ctx, op, err)
	}
	return func() {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		if _, err := c.Exec(ctx, `SELECT pg_advisory_unlock($1, $2)`, lockClassSitePlanner, siteKey(siteID)); err != nil {
			// Closing the session releases its advisory locks.
			_ = c.Conn().Close(ctx)
		}
		c.Release()
	}, nil
}

// PlanVersion announces that a site's plan version was stored (by any
// daemon). A zero PlanVersion is a resync: notifications may have been lost
// before it, so the receiver should look at the plans table.
type PlanVersion struct {
	SiteID  string
	Version int64
}

// WatchPlanVersions calls fn, from one goroutine and in commit order, for
// every plan version stored in the database by any daemon, until ctx ends; it
// returns ctx's error. It calls fn(PlanVersion{}) (a resync) once listening
// starts and after every reconnection. On SQLite it returns ErrNotShared at
// once (the server publishes its own versions).
func (d *DB) WatchPlanVersions(ctx context.Context, fn func(PlanVersion)) error {
	if d.pg == nil {
		return ErrNotShared
	}
	return d.pg.watchPlanVersions(ctx, fn)
}

// ErrNotShared: the database is not shared by several daemons (SQLite).
var ErrNotShared = errors.New("store: database is not shared by replicas")

// pgListener is the state of the LISTEN connection, for Close.
type pgListener struct {
	cancel context.CancelFunc
	done   chan struct{}
}

func (l *pgListener) stop() {
	l.cancel()
	<-l.done
}

func (d *pgDB) watchPlanVersions(ctx context.Context, fn func(PlanVersion)) error {
	ctx, cancel := context.WithCancel(ctx)
	l := &pgListener{cancel: cancel, done: make(chan struct{})}
	d.mu.Lock()
	d.listeners = append(d.listeners, l)
	d.mu.Unlock()
	defer close(l.done)
	backoff := 50 * time.Millisecond
	for ctx.Err() == nil {
		err := d.listenOnce(ctx, fn)
		if ctx.Err() != nil {
			break
		}
		_ = err // the connection dropped: reconnect after a pause
		t := time.NewTimer(backoff)
		select {
		case <-ctx.Done():
			t.Stop()
		case <-t.C:
		}
		backoff = min(2*backoff, 2*time.Second)
	}
	return ctx.Err()
}

// listenOnce listens on one connection until it fails or ctx ends.
func (d *pgDB) listenOnce(ctx context.Context, fn func(PlanVersion)) error {
	c, err := d.locks.Acquire(ctx)
	if err != nil {
		return err
	}
	conn := c.Hijack() // never returned to the pool: it stays in LISTEN
	defer conn.Close(context.Background())
	if _, err := conn.Exec(ctx, `LISTEN `+planChannel); err != nil {
		return err
	}
	fn(PlanVersion{})
	for {
		n, err := conn.WaitForNotification(ctx)
		if err != nil {
			return err
		}
		if pv, ok := parsePlanNotification(n.Payload); ok {
			fn(pv)
		}
	}
}

// parsePlanNotification reads CreatePlan's payload "<version> <site id>".
func parsePlanNotification(payload string) (PlanVersion, bool) {
	vs, site, ok := strings.Cut(payload, " ")
	v, err := strconv.ParseInt(vs, 10, 64)
	if !ok || err != nil || v < 1 || site == "" {
		return PlanVersion{}, false
	}
	return PlanVersion{SiteID: site, Version: v}, true
}

// lockPoolSize bounds the connections that hold planning locks at once (one
// per site being planned by this daemon); the listener's connection leaves
// the pool. With the statement pool a daemon opens at most
// MaxReaders + 8 + lockPoolSize + 1 connections (29 by default).
const lockPoolSize = 16

// newLockPool makes the pool of connections that hold planning locks and
// listen for notifications, apart from the pool of statements so that
// waiting for a lock never starves the calls that the lock holder makes
// (the holder's statements use the other pool).
func newLockPool(ctx context.Context, cfg *pgxpool.Config) (*pgxpool.Pool, error) {
	lc := cfg.Copy()
	lc.MaxConns = lockPoolSize
	lc.MinConns = 0
	return pgxpool.NewWithConfig(ctx, lc)
}
