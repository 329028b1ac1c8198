package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"

	"github.com/mattn/go-sqlite3"
)

// Sentinel errors. Every error of this package that has one of these meanings
// wraps it; test with errors.Is.
var (
	// ErrNotFound: the record asked for, or one it refers to, does not exist.
	ErrNotFound = errors.New("store: not found")
	// ErrAlreadyExists: a record with that id (or token hash) exists.
	ErrAlreadyExists = errors.New("store: already exists")
	// ErrConflict: a precondition fails: a stale Revision, deleting a site or
	// target that queued blocks use, withdrawing a completed block, a progress
	// report id reused for a different report.
	ErrConflict = errors.New("store: conflict")
	// ErrBusy: the database stayed locked by another connection (SQLITE_BUSY
	// or SQLITE_LOCKED) through the busy timeout and the retries. Nothing was
	// written; the call may be retried.
	ErrBusy = errors.New("store: database busy")
	// ErrInvalid: the record breaks a rule the store itself enforces (empty
	// id, unknown state or kind, frames wanted below one, a non-finite
	// priority, an interval that ends before it starts, a malformed page
	// token, ...).
	ErrInvalid = errors.New("store: invalid")
	// ErrIntegrity: IntegrityCheck found damage or a broken invariant.
	ErrIntegrity = errors.New("store: integrity check failed")
)

var sentinels = []error{ErrNotFound, ErrAlreadyExists, ErrConflict, ErrBusy, ErrInvalid, ErrIntegrity}

// invalidf returns an ErrInvalid with a message.
func invalidf(format string, args ...any) error {
	return fmt.Errorf(format+": %w", append(args, ErrInvalid)...)
}

// isBusy reports whether err is SQLite's SQLITE_BUSY or SQLITE_LOCKED (with
// any extended code), the errors after which a write transaction is retried.
func isBusy(err error) bool {
	var se sqlite3.Error
	if errors.As(err, &se) {
		return se.Code == sqlite3.ErrBusy || se.Code == sqlite3.ErrLocked
	}
	return false
}

// mapErr gives err its meaning and the name of the operation op. Errors that
// already wrap a sentinel or a context error keep it; driver errors are
// classified by their SQLite result code.
func mapErr(ctx context.Context, op string, err error) error {
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
	if errors.Is(err, sql.ErrNoRows) {
		return fmt.Errorf("%s: %w", op, ErrNotFound)
	}
	var se sqlite3.Error
	if errors.As(err, &se) {
		switch se.Code {
		case sqlite3.ErrBusy, sqlite3.ErrLocked:
			return fmt.Errorf("%s: %w: %w", op, ErrBusy, err)
		case sqlite3.ErrInterrupt:
			if ctx.Err() != nil {
				return fmt.Errorf("%s: %w: %w", op, ctx.Err(), err)
			}
		case sqlite3.ErrConstraint:
			switch se.ExtendedCode {
			case sqlite3.ErrConstraintPrimaryKey, sqlite3.ErrConstraintUnique:
				return fmt.Errorf("%s: %w: %w", op, ErrAlreadyExists, err)
			case sqlite3.ErrConstraintForeignKey:
				return fmt.Errorf("%s: %w: %w", op, ErrNotFound, err)
			default:
				return fmt.Errorf("%s: %w: %w", op, ErrInvalid, err)
			}
		}
	}
	return fmt.Errorf("%s: %w", op, err)
}
