package store

import (
	"context"
	"database/sql"
	"fmt"
	"time"
)

// Target kinds.
const (
	KindFixed = "fixed" // ICRS position, optional proper motion
	KindOrbit = "orbit" // two-body orbital elements
)

// Target is something to point at. Spec is the server's encoding of the
// position or of the orbital elements and magnitude law.
type Target struct {
	ID, Name, Kind       string // Kind is KindFixed or KindOrbit
	Spec                 []byte
	CreatedAt, UpdatedAt time.Time
	Revision             int64
}

const targetCols = `id, name, kind, spec, created_at, updated_at, revision`

func scanTarget(s scanner) (Target, error) {
	var x Target
	var created, updated int64
	if err := s.Scan(&x.ID, &x.Name, &x.Kind, &x.Spec, &created, &updated, &x.Revision); err != nil {
		return Target{}, err
	}
	x.CreatedAt, x.UpdatedAt = decTime(created), decTime(updated)
	return x, nil
}

func checkTarget(t Target) error {
	if t.ID == "" {
		return invalidf("target id is empty")
	}
	if t.Name == "" {
		return invalidf("target name is empty")
	}
	if t.Kind != KindFixed && t.Kind != KindOrbit {
		return invalidf("target kind %q is neither %q nor %q", t.Kind, KindFixed, KindOrbit)
	}
	return nil
}

// CreateTarget stores a new target. The store sets CreatedAt, UpdatedAt and
// Revision (1); it returns the stored record. An existing id is
// ErrAlreadyExists.
func (d *sqliteDB) CreateTarget(ctx context.Context, t Target) (Target, error) {
	op := fmt.Sprintf("create target %q", t.ID)
	if err := checkTarget(t); err != nil {
		return Target{}, mapErr(ctx, op, err)
	}
	now := d.now()
	t.CreatedAt, t.UpdatedAt, t.Revision = now, now, 1
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		_, err := tx.ExecContext(ctx, `INSERT INTO targets (`+targetCols+`) VALUES (?, ?, ?, ?, ?, ?, ?)`,
			t.ID, t.Name, t.Kind, blob(t.Spec), now.UnixNano(), now.UnixNano(), t.Revision)
		return err
	})
	if err != nil {
		return Target{}, err
	}
	return t, nil
}

// GetTarget returns the target with that id, or ErrNotFound.
func (d *sqliteDB) GetTarget(ctx context.Context, id string) (Target, error) {
	t, err := scanTarget(d.r.QueryRowContext(ctx, `SELECT `+targetCols+` FROM targets WHERE id = ?`, id))
	if err != nil {
		return Target{}, mapErr(ctx, fmt.Sprintf("get target %q", id), err)
	}
	return t, nil
}

// ListTargets returns one page of targets in order of creation (then id) and
// the token of the next page ("" after the last).
func (d *sqliteDB) ListTargets(ctx context.Context, p Page) ([]Target, string, error) {
	const op, scope = "list targets", "targets"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+targetCols+` FROM targets
		WHERE (created_at, id) > (?, ?) ORDER BY created_at, id LIMIT ?`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanTarget, func(t Target) cursor { return cursor{t.CreatedAt.UnixNano(), t.ID} })
	return out, next, mapErr(ctx, op, err)
}

// UpdateTarget replaces the name, kind and spec of target t.ID. t.Revision
// must be the revision the caller read (else ErrConflict); the stored record,
// with the next revision and a new UpdatedAt, is returned.
func (d *sqliteDB) UpdateTarget(ctx context.Context, t Target) (Target, error) {
	op := fmt.Sprintf("update target %q", t.ID)
	if err := checkTarget(t); err != nil {
		return Target{}, mapErr(ctx, op, err)
	}
	var out Target
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		cur, err := scanTarget(tx.QueryRowContext(ctx, `SELECT `+targetCols+` FROM targets WHERE id = ?`, t.ID))
		if err != nil {
			return err
		}
		if cur.Revision != t.Revision {
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, t.Revision, ErrConflict)
		}
		now := d.now()
		out = Target{ID: t.ID, Name: t.Name, Kind: t.Kind, Spec: t.Spec, CreatedAt: cur.CreatedAt, UpdatedAt: now, Revision: cur.Revision + 1}
		_, err = tx.ExecContext(ctx, `UPDATE targets SET name = ?, kind = ?, spec = ?, updated_at = ?, revision = ? WHERE id = ?`,
			out.Name, out.Kind, blob(out.Spec), now.UnixNano(), out.Revision, out.ID)
		return err
	})
	if err != nil {
		return Target{}, err
	}
	return out, nil
}

// DeleteTarget deletes a target together with its blocks that are no longer
// queued (and their progress reports). While a queued block uses the target
// it is ErrConflict.
func (d *sqliteDB) DeleteTarget(ctx context.Context, id string) error {
	op := fmt.Sprintf("delete target %q", id)
	return d.write(ctx, op, func(tx *sql.Tx) error {
		var exists, queued int
		if err := tx.QueryRowContext(ctx, `SELECT
			(SELECT COUNT(*) FROM targets WHERE id = ?),
			(SELECT COUNT(*) FROM blocks WHERE target_id = ? AND state = 'queued')`, id, id).Scan(&exists, &queued); err != nil {
			return err
		}
		if exists == 0 {
			return ErrNotFound
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks use it: %w", queued, ErrConflict)
		}
		_, err := tx.ExecContext(ctx, `DELETE FROM targets WHERE id = ?`, id)
		return err
	})
}
