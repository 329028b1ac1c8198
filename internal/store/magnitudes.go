package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"time"
)

// MagnitudeObservation is one measured total magnitude of a target.
type MagnitudeObservation struct {
	ID, TargetID string
	ObservedAt   time.Time
	Magnitude    float64
	Sigma        float64 // 1-sigma uncertainty, mag, > 0
	Note         string
	CreatedAt    time.Time // set by the store
}

// MagnitudeFit is one stored fit of a target's magnitude law. Spec is the
// server's encoding of the fit.
type MagnitudeFit struct {
	ID, TargetID string
	Spec         []byte
	Applied      bool
	CreatedAt    time.Time // set by the store
}

// AddMagnitudeObservations stores observations in one transaction, all or
// nothing. An observation whose id is stored already with the same target,
// time, magnitude, sigma and note is skipped (a retry); with different
// content it is ErrConflict. An unknown target is ErrNotFound; an empty id,
// a non-finite magnitude or a sigma that is not positive is ErrInvalid. It
// returns how many were new.
func (d *sqliteDB) AddMagnitudeObservations(ctx context.Context, obs []MagnitudeObservation) (int, error) {
	op := fmt.Sprintf("add %d magnitude observations", len(obs))
	for _, o := range obs {
		if o.ID == "" || o.TargetID == "" || math.IsNaN(o.Magnitude) || math.IsInf(o.Magnitude, 0) || !(o.Sigma > 0) || math.IsInf(o.Sigma, 0) {
			return 0, mapErr(ctx, op, invalidf("magnitude observation %q: needs an id, a target, a finite magnitude and a positive sigma", o.ID))
		}
	}
	added := 0
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		added = 0
		now := d.now()
		for _, o := range obs {
			var cur MagnitudeObservation
			var at, created int64
			err := tx.QueryRowContext(ctx, `SELECT target_id, observed_at, magnitude, sigma, note, created_at FROM magnitude_observations WHERE id = ?`,
				o.ID).Scan(&cur.TargetID, &at, &cur.Magnitude, &cur.Sigma, &cur.Note, &created)
			switch {
			case err == nil:
				if cur.TargetID != o.TargetID || at != o.ObservedAt.UnixNano() || cur.Magnitude != o.Magnitude || cur.Sigma != o.Sigma || cur.Note != o.Note {
					return fmt.Errorf("magnitude observation %q is stored with other values: %w", o.ID, ErrConflict)
				}
				continue
			case !errors.Is(err, sql.ErrNoRows):
				return err
			}
			var one int
			if err := tx.QueryRowContext(ctx, `SELECT 1 FROM targets WHERE id = ?`, o.TargetID).Scan(&one); err != nil {
				if errors.Is(err, sql.ErrNoRows) {
					return fmt.Errorf("target %q: %w", o.TargetID, ErrNotFound)
				}
				return err
			}
			if _, err := tx.ExecContext(ctx, `INSERT INTO magnitude_observations (id, target_id, observed_at, magnitude, sigma, note, created_at)
				VALUES (?, ?, ?, ?, ?, ?, ?)`, o.ID, o.TargetID, o.ObservedAt.UnixNano(), o.Magnitude, o.Sigma, o.Note, now.UnixNano()); err != nil {
				return err
			}
			added++
		}
		return nil
	})
	if err != nil {
		return 0, err
	}
	return added, nil
}

// MagnitudeObservations returns a target's observations in time order (then
// id); at most limit of them (the earliest).
func (d *sqliteDB) MagnitudeObservations(ctx context.Context, targetID string, limit int) ([]MagnitudeObservation, error) {
	op := fmt.Sprintf("list magnitude observations of %q", targetID)
	rows, err := d.r.QueryContext(ctx, `SELECT id, target_id, observed_at, magnitude, sigma, note, created_at FROM magnitude_observations
		WHERE target_id = ? ORDER BY observed_at, id LIMIT ?`, targetID, limit)
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []MagnitudeObservation
	for rows.Next() {
		var o MagnitudeObservation
		var at, created int64
		if err := rows.Scan(&o.ID, &o.TargetID, &at, &o.Magnitude, &o.Sigma, &o.Note, &created); err != nil {
			return nil, mapErr(ctx, op, err)
		}
		o.ObservedAt, o.CreatedAt = decTime(at), decTime(created)
		out = append(out, o)
	}
	return out, mapErr(ctx, op, rows.Err())
}

// CreateMagnitudeFit stores a fit. When apply is set, target (its name,
// kind and spec, with the revision the caller read) is updated in the same
// transaction, so that the fit and the target's new law land together;
// a stale revision is ErrConflict. It returns the stored fit.
func (d *sqliteDB) CreateMagnitudeFit(ctx context.Context, f MagnitudeFit, target *Target) (MagnitudeFit, error) {
	op := fmt.Sprintf("create magnitude fit %q of %q", f.ID, f.TargetID)
	if f.ID == "" || f.TargetID == "" {
		return MagnitudeFit{}, mapErr(ctx, op, invalidf("magnitude fit needs an id and a target"))
	}
	if target != nil {
		if err := checkTarget(*target); err != nil {
			return MagnitudeFit{}, mapErr(ctx, op, err)
		}
	}
	f.Applied = target != nil
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		now := d.now()
		f.CreatedAt = now
		if target != nil {
			res, err := tx.ExecContext(ctx, `UPDATE targets SET name = ?, kind = ?, spec = ?, updated_at = ?, revision = revision + 1
				WHERE id = ? AND revision = ?`, target.Name, target.Kind, blob(target.Spec), now.UnixNano(), target.ID, target.Revision)
			if err != nil {
				return err
			}
			if n, _ := res.RowsAffected(); n != 1 {
				return fmt.Errorf("target %q changed since it was read: %w", target.ID, ErrConflict)
			}
		}
		applied := 0
		if f.Applied {
			applied = 1
		}
		_, err := tx.ExecContext(ctx, `INSERT INTO magnitude_fits (id, target_id, spec, applied, created_at) VALUES (?, ?, ?, ?, ?)`,
			f.ID, f.TargetID, blob(f.Spec), applied, now.UnixNano())
		return err
	})
	if err != nil {
		return MagnitudeFit{}, err
	}
	return f, nil
}

// MagnitudeFits returns a target's fits, oldest first.
func (d *sqliteDB) MagnitudeFits(ctx context.Context, targetID string) ([]MagnitudeFit, error) {
	op := fmt.Sprintf("list magnitude fits of %q", targetID)
	rows, err := d.r.QueryContext(ctx, `SELECT id, target_id, spec, applied, created_at FROM magnitude_fits
		WHERE target_id = ? ORDER BY created_at, id`, targetID)
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []MagnitudeFit
	for rows.Next() {
		var f MagnitudeFit
		var applied int
		var created int64
		if err := rows.Scan(&f.ID, &f.TargetID, &f.Spec, &applied, &created); err != nil {
			return nil, mapErr(ctx, op, err)
		}
		f.Applied, f.CreatedAt = applied == 1, decTime(created)
		out = append(out, f)
	}
	return out, mapErr(ctx, op, rows.Err())
}
