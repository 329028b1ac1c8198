package store

// The PostgreSQL side of the records added after the first dialect: target
// imports, magnitude observations and fits, and the reports a replan reads.
// Each method's contract is documented on the SQLite implementation.

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
)

func (d *pgDB) ReportsEndingAfter(ctx context.Context, siteID string, t time.Time) ([]ProgressReport, error) {
	op := fmt.Sprintf("list progress reports of site %q ending after %s", siteID, t.Format(time.RFC3339Nano))
	rows, err := d.pool.Query(ctx, `SELECT `+reportColsOf("r")+` FROM progress_reports r JOIN blocks b ON b.id = r.block_id
		WHERE (r.site_id = $1 OR (r.site_id IS NULL AND b.site_id = $1)) AND r.end_at > $2 ORDER BY r.start_at, r.report_id`,
		siteID, t.UTC().UnixNano())
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []ProgressReport
	for rows.Next() {
		r, err := scanReport(rows)
		if err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		out = append(out, r)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}

func (d *pgDB) ImportTargets(ctx context.Context, requestID string, fingerprint []byte, ts []Target) ([]Target, bool, error) {
	op := fmt.Sprintf("import %d targets (request %q)", len(ts), requestID)
	if requestID == "" {
		return nil, false, pgMapErr(ctx, op, invalidf("import request id is empty"))
	}
	if len(fingerprint) != 32 {
		return nil, false, pgMapErr(ctx, op, invalidf("import fingerprint has %d bytes, want 32", len(fingerprint)))
	}
	for _, t := range ts {
		if err := checkTarget(t); err != nil {
			return nil, false, pgMapErr(ctx, op, err)
		}
	}
	var out []Target
	replay := false
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		out, replay = nil, false
		// Two imports under one request id serialise on this lock.
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtext('nightloom import ' || $1))`, requestID); err != nil {
			return err
		}
		var fp []byte
		var ids string
		err := tx.QueryRow(ctx, `SELECT fingerprint, target_ids FROM target_imports WHERE request_id = $1`, requestID).Scan(&fp, &ids)
		switch {
		case err == nil:
			if !bytes.Equal(fp, fingerprint) {
				return fmt.Errorf("request id %q was used for a different import: %w", requestID, ErrConflict)
			}
			replay = true
			for _, id := range strings.Split(ids, "\n") {
				if id == "" {
					continue
				}
				t, err := scanTarget(tx.QueryRow(ctx, `SELECT `+targetCols+` FROM targets WHERE id = $1`, id))
				if errors.Is(err, pgx.ErrNoRows) {
					continue
				}
				if err != nil {
					return err
				}
				out = append(out, t)
			}
			return nil
		case !errors.Is(err, pgx.ErrNoRows):
			return err
		}
		now := d.now()
		idList := make([]string, 0, len(ts))
		for _, t := range ts {
			t.CreatedAt, t.UpdatedAt, t.Revision = now, now, 1
			if _, err := tx.Exec(ctx, `INSERT INTO targets (`+targetCols+`) VALUES ($1, $2, $3, $4, $5, $6, $7)`,
				t.ID, t.Name, t.Kind, blob(t.Spec), now.UnixNano(), now.UnixNano(), t.Revision); err != nil {
				return err
			}
			out = append(out, t)
			idList = append(idList, t.ID)
		}
		_, err = tx.Exec(ctx, `INSERT INTO target_imports (request_id, fingerprint, target_ids, created_at) VALUES ($1, $2, $3, $4)`,
			requestID, fingerprint, strings.Join(idList, "\n"), now.UnixNano())
		return err
	})
	if err != nil {
		return nil, false, err
	}
	return out, replay, nil
}

func (d *pgDB) AddMagnitudeObservations(ctx context.Context, obs []MagnitudeObservation) (int, error) {
	op := fmt.Sprintf("add %d magnitude observations", len(obs))
	for _, o := range obs {
		if o.ID == "" || o.TargetID == "" || math.IsNaN(o.Magnitude) || math.IsInf(o.Magnitude, 0) || !(o.Sigma > 0) || math.IsInf(o.Sigma, 0) {
			return 0, pgMapErr(ctx, op, invalidf("magnitude observation %q: needs an id, a target, a finite magnitude and a positive sigma", o.ID))
		}
	}
	added := 0
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		added = 0
		now := d.now()
		for _, o := range obs {
			var cur MagnitudeObservation
			var at, created int64
			err := tx.QueryRow(ctx, `SELECT target_id, observed_at, magnitude, sigma, note, created_at FROM magnitude_observations
				WHERE id = $1 FOR UPDATE`, o.ID).Scan(&cur.TargetID, &at, &cur.Magnitude, &cur.Sigma, &cur.Note, &created)
			switch {
			case err == nil:
				if cur.TargetID != o.TargetID || at != o.ObservedAt.UnixNano() || cur.Magnitude != o.Magnitude || cur.Sigma != o.Sigma || cur.Note != o.Note {
					return fmt.Errorf("magnitude observation %q is stored with other values: %w", o.ID, ErrConflict)
				}
				continue
			case !errors.Is(err, pgx.ErrNoRows):
				return err
			}
			var one int
			if err := tx.QueryRow(ctx, `SELECT 1 FROM targets WHERE id = $1`, o.TargetID).Scan(&one); err != nil {
				if errors.Is(err, pgx.ErrNoRows) {
					return fmt.Errorf("target %q: %w", o.TargetID, ErrNotFound)
				}
				return err
			}
			if _, err := tx.Exec(ctx, `INSERT INTO magnitude_observations (id, target_id, observed_at, magnitude, sigma, note, created_at)
				VALUES ($1, $2, $3, $4, $5, $6, $7)`, o.ID, o.TargetID, o.ObservedAt.UnixNano(), o.Magnitude, o.Sigma, o.Note, now.UnixNano()); err != nil {
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

func (d *pgDB) MagnitudeObservations(ctx context.Context, targetID string, limit int) ([]MagnitudeObservation, error) {
	op := fmt.Sprintf("list magnitude observations of %q", targetID)
	rows, err := d.pool.Query(ctx, `SELECT id, target_id, observed_at, magnitude, sigma, note, created_at FROM magnitude_observations
		WHERE target_id = $1 ORDER BY observed_at, id LIMIT $2`, targetID, limit)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []MagnitudeObservation
	for rows.Next() {
		var o MagnitudeObservation
		var at, created int64
		if err := rows.Scan(&o.ID, &o.TargetID, &at, &o.Magnitude, &o.Sigma, &o.Note, &created); err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		o.ObservedAt, o.CreatedAt = decTime(at), decTime(created)
		out = append(out, o)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}

func (d *pgDB) CreateMagnitudeFit(ctx context.Context, f MagnitudeFit, target *Target) (MagnitudeFit, error) {
	op := fmt.Sprintf("create magnitude fit %q of %q", f.ID, f.TargetID)
	if f.ID == "" || f.TargetID == "" {
		return MagnitudeFit{}, pgMapErr(ctx, op, invalidf("magnitude fit needs an id and a target"))
	}
	if target != nil {
		if err := checkTarget(*target); err != nil {
			return MagnitudeFit{}, pgMapErr(ctx, op, err)
		}
	}
	f.Applied = target != nil
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		now := d.now()
		f.CreatedAt = now
		if target != nil {
			tag, err := tx.Exec(ctx, `UPDATE targets SET name = $1, kind = $2, spec = $3, updated_at = $4, revision = revision + 1
				WHERE id = $5 AND revision = $6`, target.Name, target.Kind, blob(target.Spec), now.UnixNano(), target.ID, target.Revision)
			if err != nil {
				return err
			}
			if tag.RowsAffected() != 1 {
				return fmt.Errorf("target %q changed since it was read: %w", target.ID, ErrConflict)
			}
		}
		applied := 0
		if f.Applied {
			applied = 1
		}
		_, err := tx.Exec(ctx, `INSERT INTO magnitude_fits (id, target_id, spec, applied, created_at) VALUES ($1, $2, $3, $4, $5)`,
			f.ID, f.TargetID, blob(f.Spec), applied, now.UnixNano())
		return err
	})
	if err != nil {
		return MagnitudeFit{}, err
	}
	return f, nil
}

func (d *pgDB) MagnitudeFits(ctx context.Context, targetID string) ([]MagnitudeFit, error) {
	op := fmt.Sprintf("list magnitude fits of %q", targetID)
	rows, err := d.pool.Query(ctx, `SELECT id, target_id, spec, applied, created_at FROM magnitude_fits
		WHERE target_id = $1 ORDER BY created_at, id`, targetID)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []MagnitudeFit
	for rows.Next() {
		var f MagnitudeFit
		var applied int
		var created int64
		if err := rows.Scan(&f.ID, &f.TargetID, &f.Spec, &applied, &created); err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		f.Applied, f.CreatedAt = applied == 1, decTime(created)
		out = append(out, f)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}

func insertEditPG(ctx context.Context, tx pgx.Tx, e BlockEdit) error {
	_, err := tx.Exec(ctx, `INSERT INTO block_edits (block_id, at, actor, action, fields, revision) VALUES ($1, $2, $3, $4, $5, $6)`,
		e.BlockID, e.At.UnixNano(), e.Actor, e.Action, e.Fields, e.Revision)
	return err
}

func (d *pgDB) UpdateBlock(ctx context.Context, b Block, actor, fields string) (Block, error) {
	op := fmt.Sprintf("update block %q", b.ID)
	if math.IsNaN(b.Priority) || math.IsInf(b.Priority, 0) || b.FramesWanted < 1 {
		return Block{}, pgMapErr(ctx, op, invalidf("priority %v or frames wanted %d out of range", b.Priority, b.FramesWanted))
	}
	var out Block
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		cur, err := scanBlock(tx.QueryRow(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = $1 FOR UPDATE`, b.ID))
		if err != nil {
			return err
		}
		switch {
		case cur.State != StateQueued:
			return fmt.Errorf("block is %s: %w", cur.State, ErrConflict)
		case cur.Revision != b.Revision:
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, b.Revision, ErrConflict)
		case b.FramesWanted < cur.FramesDone:
			return invalidf("frames wanted %d is below the %d frames done", b.FramesWanted, cur.FramesDone)
		}
		now := d.now()
		cur.Priority, cur.FramesWanted, cur.Spec = b.Priority, b.FramesWanted, b.Spec
		cur.UpdatedAt, cur.Revision = now, cur.Revision+1
		if cur.FramesDone >= cur.FramesWanted {
			cur.State = StateCompleted
		}
		if _, err := tx.Exec(ctx, `UPDATE blocks SET priority = $1, frames_wanted = $2, spec = $3, state = $4, updated_at = $5, revision = $6 WHERE id = $7`,
			cur.Priority, cur.FramesWanted, blob(cur.Spec), cur.State, now.UnixNano(), cur.Revision, cur.ID); err != nil {
			return err
		}
		out = cur
		return insertEditPG(ctx, tx, BlockEdit{BlockID: cur.ID, At: now, Actor: actor, Action: "update", Fields: fields, Revision: cur.Revision})
	})
	if err != nil {
		return Block{}, err
	}
	return out, nil
}

func (d *pgDB) WithdrawMatching(ctx context.Context, siteID, targetID, actor string, keep func(Block) bool) ([]Block, error) {
	op := fmt.Sprintf("withdraw blocks of site %q", siteID)
	var out []Block
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		out = nil
		var n int
		if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM sites WHERE id = $1`, siteID).Scan(&n); err != nil {
			return err
		}
		if n == 0 {
			return fmt.Errorf("site %q: %w", siteID, ErrNotFound)
		}
		q := `SELECT ` + blockCols + ` FROM blocks WHERE site_id = $1 AND state = 'queued'`
		args := []any{siteID}
		if targetID != "" {
			q += ` AND target_id = $2`
			args = append(args, targetID)
		}
		rows, err := tx.Query(ctx, q+` ORDER BY created_at, id FOR UPDATE`, args...)
		if err != nil {
			return err
		}
		var found []Block
		for rows.Next() {
			b, err := scanBlock(rows)
			if err != nil {
				rows.Close()
				return err
			}
			found = append(found, b)
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return err
		}
		now := d.now()
		for _, b := range found {
			if keep != nil && !keep(b) {
				continue
			}
			b.State, b.UpdatedAt, b.Revision = StateWithdrawn, now, b.Revision+1
			if _, err := tx.Exec(ctx, `UPDATE blocks SET state = $1, updated_at = $2, revision = $3 WHERE id = $4`,
				b.State, now.UnixNano(), b.Revision, b.ID); err != nil {
				return err
			}
			if err := insertEditPG(ctx, tx, BlockEdit{BlockID: b.ID, At: now, Actor: actor, Action: "withdraw", Revision: b.Revision}); err != nil {
				return err
			}
			out = append(out, b)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

func (d *pgDB) BlockEdits(ctx context.Context, blockID string) ([]BlockEdit, error) {
	op := fmt.Sprintf("edits of block %q", blockID)
	rows, err := d.pool.Query(ctx, `SELECT block_id, at, actor, action, fields, revision FROM block_edits WHERE block_id = $1 ORDER BY at, revision`, blockID)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []BlockEdit
	for rows.Next() {
		var e BlockEdit
		var at int64
		if err := rows.Scan(&e.BlockID, &at, &e.Actor, &e.Action, &e.Fields, &e.Revision); err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		e.At = decTime(at)
		out = append(out, e)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}

func (d *pgDB) TargetIDsByName(ctx context.Context, name string) ([]string, error) {
	op := fmt.Sprintf("targets named %q", name)
	rows, err := d.pool.Query(ctx, `SELECT id FROM targets WHERE name = $1 ORDER BY created_at, id`, name)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var id string
		if err := rows.Scan(&id); err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		out = append(out, id)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}
