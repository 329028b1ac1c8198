package store

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"time"
)

// BlockEdit is one entry of a block's audit trail: who changed it (a token
// id), when, how (Action: "update" or "withdraw"), which request fields
// (field-mask paths, comma-separated) and the block's revision after the
// change.
type BlockEdit struct {
	BlockID  string
	At       time.Time
	Actor    string
	Action   string
	Fields   string
	Revision int64
}

func insertEdit(ctx context.Context, tx *sql.Tx, e BlockEdit) error {
	_, err := tx.ExecContext(ctx, `INSERT INTO block_edits (block_id, at, actor, action, fields, revision) VALUES (?, ?, ?, ?, ?, ?)`,
		e.BlockID, e.At.UnixNano(), e.Actor, e.Action, e.Fields, e.Revision)
	return err
}

// UpdateBlock replaces a queued block's request (Priority, FramesWanted,
// Spec) when its stored revision is b.Revision, and records the change in
// the audit trail with actor and fields, in one transaction. A block that
// is not queued, or whose revision moved on, is ErrConflict; FramesWanted
// below FramesDone is ErrInvalid; an unknown id ErrNotFound.
func (d *sqliteDB) UpdateBlock(ctx context.Context, b Block, actor, fields string) (Block, error) {
	op := fmt.Sprintf("update block %q", b.ID)
	if math.IsNaN(b.Priority) || math.IsInf(b.Priority, 0) || b.FramesWanted < 1 {
		return Block{}, mapErr(ctx, op, invalidf("priority %v or frames wanted %d out of range", b.Priority, b.FramesWanted))
	}
	var out Block
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		cur, err := scanBlock(tx.QueryRowContext(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = ?`, b.ID))
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
		if _, err := tx.ExecContext(ctx, `UPDATE blocks SET priority = ?, frames_wanted = ?, spec = ?, state = ?, updated_at = ?, revision = ? WHERE id = ?`,
			cur.Priority, cur.FramesWanted, blob(cur.Spec), cur.State, now.UnixNano(), cur.Revision, cur.ID); err != nil {
			return err
		}
		out = cur
		return insertEdit(ctx, tx, BlockEdit{BlockID: cur.ID, At: now, Actor: actor, Action: "update", Fields: fields, Revision: cur.Revision})
	})
	if err != nil {
		return Block{}, err
	}
	return out, nil
}

// WithdrawMatching withdraws, in one transaction, every queued block of a
// site (and of a target, when targetID is not empty) whose id keep accepts
// (nil: all), records each in the audit trail with actor, and returns them
// in creation order. An unknown site is ErrNotFound.
func (d *sqliteDB) WithdrawMatching(ctx context.Context, siteID, targetID, actor string, keep func(Block) bool) ([]Block, error) {
	op := fmt.Sprintf("withdraw blocks of site %q", siteID)
	var out []Block
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		out = nil
		var n int
		if err := tx.QueryRowContext(ctx, `SELECT COUNT(*) FROM sites WHERE id = ?`, siteID).Scan(&n); err != nil {
			return err
		}
		if n == 0 {
			return fmt.Errorf("site %q: %w", siteID, ErrNotFound)
		}
		q := `SELECT ` + blockCols + ` FROM blocks WHERE site_id = ? AND state = 'queued'`
		args := []any{siteID}
		if targetID != "" {
			q += ` AND target_id = ?`
			args = append(args, targetID)
		}
		rows, err := tx.QueryContext(ctx, q+` ORDER BY created_at, id`, args...)
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
			if _, err := tx.ExecContext(ctx, `UPDATE blocks SET state = ?, updated_at = ?, revision = ? WHERE id = ?`,
				b.State, now.UnixNano(), b.Revision, b.ID); err != nil {
				return err
			}
			if err := insertEdit(ctx, tx, BlockEdit{BlockID: b.ID, At: now, Actor: actor, Action: "withdraw", Revision: b.Revision}); err != nil {
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

// BlockEdits returns a block's audit trail, oldest first.
func (d *sqliteDB) BlockEdits(ctx context.Context, blockID string) ([]BlockEdit, error) {
	op := fmt.Sprintf("edits of block %q", blockID)
	rows, err := d.r.QueryContext(ctx, `SELECT block_id, at, actor, action, fields, revision FROM block_edits WHERE block_id = ? ORDER BY at, revision`, blockID)
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []BlockEdit
	for rows.Next() {
		var e BlockEdit
		var at int64
		if err := rows.Scan(&e.BlockID, &at, &e.Actor, &e.Action, &e.Fields, &e.Revision); err != nil {
			return nil, mapErr(ctx, op, err)
		}
		e.At = decTime(at)
		out = append(out, e)
	}
	return out, mapErr(ctx, op, rows.Err())
}

// TargetIDsByName returns the ids of the targets with exactly that name, in
// order of creation (normally none or one: the server keeps names unique).
func (d *sqliteDB) TargetIDsByName(ctx context.Context, name string) ([]string, error) {
	op := fmt.Sprintf("targets named %q", name)
	rows, err := d.r.QueryContext(ctx, `SELECT id FROM targets WHERE name = ? ORDER BY created_at, id`, name)
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var id string
		if err := rows.Scan(&id); err != nil {
			return nil, mapErr(ctx, op, err)
		}
		out = append(out, id)
	}
	return out, mapErr(ctx, op, rows.Err())
}
