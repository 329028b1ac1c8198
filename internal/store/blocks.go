package store

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"time"
)

// Block states.
const (
	StateQueued    = "queued"    // waiting for frames
	StateCompleted = "completed" // frames done reached frames wanted
	StateWithdrawn = "withdrawn" // taken off the queue by an operator
)

// Block is an imaging block: FramesWanted frames of TargetID at SiteID.
// Spec is the server's encoding of the rest (filter, exposure, run lengths,
// constraint set, dates). NetworkID, when not empty, names the network whose
// shared queue holds the block; SiteID is then its home site (migration
// 0008).
type Block struct {
	ID, SiteID, TargetID     string
	NetworkID                string
	Priority                 float64
	State                    string // StateQueued, StateCompleted or StateWithdrawn
	FramesWanted, FramesDone int
	Spec                     []byte
	CreatedAt, UpdatedAt     time.Time
	Revision                 int64
	// Program is the name of the program whose time the block spends; ""
	// for none. It must name a stored program (else ErrNotFound); it is
	// set when the block is queued and cleared when the program is
	// deleted.
	Program string
}

const blockCols = `id, site_id, target_id, priority, state, frames_wanted, frames_done, spec, created_at, updated_at, revision, program, network_id`

func scanBlock(s scanner) (Block, error) {
	var x Block
	var created, updated int64
	var program, network sql.NullString
	if err := s.Scan(&x.ID, &x.SiteID, &x.TargetID, &x.Priority, &x.State, &x.FramesWanted, &x.FramesDone,
		&x.Spec, &created, &updated, &x.Revision, &program, &network); err != nil {
		return Block{}, err
	}
	x.CreatedAt, x.UpdatedAt = decTime(created), decTime(updated)
	x.Program, x.NetworkID = program.String, network.String
	return x, nil
}

// nullable stores an empty reference (id or name) as NULL.
func nullable(id string) any {
	if id == "" {
		return nil
	}
	return id
}

// blockRow is a block's values in blockCols order.
func blockRow(b Block) []any {
	return []any{b.ID, b.SiteID, b.TargetID, b.Priority, b.State, b.FramesWanted, b.FramesDone,
		blob(b.Spec), b.CreatedAt.UnixNano(), b.UpdatedAt.UnixNano(), b.Revision, nullable(b.Program), nullable(b.NetworkID)}
}

func validState(s string) bool {
	return s == StateQueued || s == StateCompleted || s == StateWithdrawn
}

// checkNewBlock enforces what a newly queued block must be.
func checkNewBlock(b Block) error {
	switch {
	case b.ID == "":
		return invalidf("block id is empty")
	case b.SiteID == "":
		return invalidf("site id is empty")
	case b.TargetID == "":
		return invalidf("target id is empty")
	case math.IsNaN(b.Priority) || math.IsInf(b.Priority, 0):
		return invalidf("priority %v is not finite", b.Priority)
	case b.FramesWanted < 1:
		return invalidf("frames wanted %d is below 1", b.FramesWanted)
	case b.FramesDone != 0:
		return invalidf("frames done %d: a new block starts at 0", b.FramesDone)
	case b.State != "" && b.State != StateQueued:
		return invalidf("state %q: a new block is %q", b.State, StateQueued)
	}
	return nil
}

// CreateBlocks queues blocks in one transaction: all of them or, on any
// error, none. An unknown site, target or network is ErrNotFound, a block id that
// exists (or repeats within the batch) ErrAlreadyExists; the error names the
// block and the missing id. The store sets State (queued), FramesDone (0),
// CreatedAt, UpdatedAt and Revision (1) and returns the stored records in the
// order given. The blocks of one call get consecutive nanosecond creation
// stamps, so that listing keeps the order of the batch. An empty batch does
// nothing.
func (d *sqliteDB) CreateBlocks(ctx context.Context, blocks []Block) ([]Block, error) {
	const op = "create blocks"
	seen := make(map[string]bool, len(blocks))
	for _, b := range blocks {
		if err := checkNewBlock(b); err != nil {
			return nil, mapErr(ctx, op, fmt.Errorf("block %q: %w", b.ID, err))
		}
		if seen[b.ID] {
			return nil, mapErr(ctx, op, fmt.Errorf("block %q appears twice in the batch: %w", b.ID, ErrAlreadyExists))
		}
		seen[b.ID] = true
	}
	if len(blocks) == 0 {
		return nil, nil
	}
	now := d.now()
	out := make([]Block, len(blocks))
	for i, b := range blocks {
		t := now.Add(time.Duration(i))
		b.State, b.FramesDone, b.CreatedAt, b.UpdatedAt, b.Revision = StateQueued, 0, t, t, 1
		out[i] = b
	}
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		ins, err := tx.PrepareContext(ctx, `INSERT INTO blocks (`+blockCols+`) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`)
		if err != nil {
			return err
		}
		defer ins.Close()
		sites := map[string]bool{}
		targets := map[string]bool{}
		programs := map[string]bool{}
		networks := map[string]bool{}
		exists := func(table, id string, cache map[string]bool) (bool, error) {
			if ok, hit := cache[id]; hit {
				return ok, nil
			}
			key := "id"
			if table == "programs" {
				key = "name"
			}
			var n int
			if err := tx.QueryRowContext(ctx, `SELECT COUNT(*) FROM `+table+` WHERE `+key+` = ?`, id).Scan(&n); err != nil {
				return false, err
			}
			cache[id] = n > 0
			return n > 0, nil
		}
		for _, b := range out {
			ok, err := exists("sites", b.SiteID, sites)
			if err != nil {
				return err
			}
			if !ok {
				return fmt.Errorf("block %q: site %q: %w", b.ID, b.SiteID, ErrNotFound)
			}
			if ok, err = exists("targets", b.TargetID, targets); err != nil {
				return err
			}
			if !ok {
				return fmt.Errorf("block %q: target %q: %w", b.ID, b.TargetID, ErrNotFound)
			}
			if b.Program != "" {
				if ok, err = exists("programs", b.Program, programs); err != nil {
					return err
				}
				if !ok {
					return fmt.Errorf("block %q: program %q: %w", b.ID, b.Program, ErrNotFound)
				}
			}
			if b.NetworkID != "" {
				if ok, err = exists("networks", b.NetworkID, networks); err != nil {
					return err
				}
				if !ok {
					return fmt.Errorf("block %q: network %q: %w", b.ID, b.NetworkID, ErrNotFound)
				}
			}
			if _, err := ins.ExecContext(ctx, blockRow(b)...); err != nil {
				return mapErr(ctx, fmt.Sprintf("block %q", b.ID), err)
			}
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// GetBlock returns the block with that id, or ErrNotFound.
func (d *sqliteDB) GetBlock(ctx context.Context, id string) (Block, error) {
	b, err := scanBlock(d.r.QueryRowContext(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = ?`, id))
	if err != nil {
		return Block{}, mapErr(ctx, fmt.Sprintf("get block %q", id), err)
	}
	return b, nil
}

// BlockFilter selects blocks for ListBlocks; an empty field matches all.
type BlockFilter struct {
	SiteID    string
	TargetID  string
	State     string // "", StateQueued, StateCompleted or StateWithdrawn
	NetworkID string // the blocks of a network (whatever their home site)
}

// blockConds are the filter's conditions as (column, value) pairs.
func (f BlockFilter) conds() []struct{ col, val string } {
	return []struct{ col, val string }{{"network_id", f.NetworkID}, {"site_id", f.SiteID}, {"target_id", f.TargetID}, {"state", f.State}}
}

func (f BlockFilter) scope() string {
	s := "blocks\x00" + f.SiteID + "\x00" + f.TargetID + "\x00" + f.State
	if f.NetworkID != "" {
		s += "\x00" + f.NetworkID
	}
	return s
}

// ListBlocks returns one page of the blocks that match f, in order of
// creation (then id), and the token of the next page ("" after the last).
// An unknown state is ErrInvalid; unknown site or target ids match nothing.
func (d *sqliteDB) ListBlocks(ctx context.Context, f BlockFilter, p Page) ([]Block, string, error) {
	const op = "list blocks"
	if f.State != "" && !validState(f.State) {
		return nil, "", mapErr(ctx, op, invalidf("state %q is unknown", f.State))
	}
	scope := f.scope()
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	// Only the conditions asked for, so that SQLite can use the index on
	// (site_id, state, created_at, id).
	where, args := "", []any{}
	for _, cond := range f.conds() {
		if cond.val != "" {
			where += cond.col + " = ? AND "
			args = append(args, cond.val)
		}
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+blockCols+` FROM blocks
		WHERE `+where+`(created_at, id) > (?, ?) ORDER BY created_at, id LIMIT ?`,
		append(args, c.key, c.id, size+1)...)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanBlock, func(b Block) cursor { return cursor{b.CreatedAt.UnixNano(), b.ID} })
	return out, next, mapErr(ctx, op, err)
}

// WithdrawBlock takes a queued block off the queue and returns it. A block
// already withdrawn is returned unchanged (so a retried call succeeds); a
// completed block is ErrConflict.
func (d *sqliteDB) WithdrawBlock(ctx context.Context, id string) (Block, error) {
	op := fmt.Sprintf("withdraw block %q", id)
	var out Block
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		b, err := scanBlock(tx.QueryRowContext(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = ?`, id))
		if err != nil {
			return err
		}
		switch b.State {
		case StateWithdrawn:
			out = b
			return nil
		case StateCompleted:
			return fmt.Errorf("block is completed: %w", ErrConflict)
		}
		now := d.now()
		b.State, b.UpdatedAt, b.Revision = StateWithdrawn, now, b.Revision+1
		if _, err := tx.ExecContext(ctx, `UPDATE blocks SET state = ?, updated_at = ?, revision = ? WHERE id = ?`,
			b.State, now.UnixNano(), b.Revision, b.ID); err != nil {
			return err
		}
		out = b
		return nil
	})
	if err != nil {
		return Block{}, err
	}
	return out, nil
}

// QueueSize counts the queued blocks of a site, or of every site when siteID
// is empty. An unknown site is ErrNotFound.
func (d *sqliteDB) QueueSize(ctx context.Context, siteID string) (int, error) {
	op := fmt.Sprintf("queue size of site %q", siteID)
	var n int
	if siteID == "" {
		err := d.r.QueryRowContext(ctx, `SELECT COUNT(*) FROM blocks WHERE state = 'queued'`).Scan(&n)
		return n, mapErr(ctx, op, err)
	}
	var sites int
	err := d.r.QueryRowContext(ctx, `SELECT
		(SELECT COUNT(*) FROM sites WHERE id = ?1),
		(SELECT COUNT(*) FROM blocks WHERE site_id = ?1 AND state = 'queued')`, siteID).Scan(&sites, &n)
	if err != nil {
		return 0, mapErr(ctx, op, err)
	}
	if sites == 0 {
		return 0, mapErr(ctx, op, ErrNotFound)
	}
	return n, nil
}
