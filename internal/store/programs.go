package store

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"time"
)

// Program is whose time blocks spend on a shared telescope, keyed by Name.
// Spec is the server's encoding of the rest (allocation, period,
// description); SiteID, when set, holds the program to one site (it must be
// a stored site, else ErrNotFound).
type Program struct {
	Name, SiteID         string
	Spec                 []byte
	CreatedAt, UpdatedAt time.Time
	Revision             int64
}

const programCols = `name, site_id, spec, created_at, updated_at, revision`

func scanProgram(s scanner) (Program, error) {
	var x Program
	var created, updated int64
	var site sql.NullString
	if err := s.Scan(&x.Name, &site, &x.Spec, &created, &updated, &x.Revision); err != nil {
		return Program{}, err
	}
	x.SiteID = site.String
	x.CreatedAt, x.UpdatedAt = decTime(created), decTime(updated)
	return x, nil
}

func checkProgram(p Program) error {
	if p.Name == "" {
		return invalidf("program name is empty")
	}
	return nil
}

// Charge is one row of the program ledger: the time one progress report
// charged to a program (ReportProgress).
type Charge struct {
	ReportID, Program, BlockID string
	// Start is the start of the reported run; a charge belongs to the
	// period that contains it.
	Start     time.Time
	Exposure  time.Duration
	Overheads time.Duration
}

const chargeCols = `report_id, program, block_id, start_at, exposure, overheads`

func scanCharge(s scanner) (Charge, error) {
	var x Charge
	var start, exp, over int64
	if err := s.Scan(&x.ReportID, &x.Program, &x.BlockID, &start, &exp, &over); err != nil {
		return Charge{}, err
	}
	x.Start, x.Exposure, x.Overheads = decTime(start), time.Duration(exp), time.Duration(over)
	return x, nil
}

// charge splits what a report charges to the block's program into exposure
// (Exposure capped at the interval) and overheads (the rest of the
// interval, plus Setup).
func (r ProgressReport) charge() (exposure, overheads time.Duration) {
	span := r.End.Sub(r.Start)
	exposure = min(max(r.Exposure, 0), span)
	return exposure, span - exposure + max(r.Setup, 0)
}

// CreateProgram stores a new program. The store sets CreatedAt, UpdatedAt
// and Revision (1). A name that exists is ErrAlreadyExists; an unknown
// SiteID is ErrNotFound.
func (d *sqliteDB) CreateProgram(ctx context.Context, p Program) (Program, error) {
	op := fmt.Sprintf("create program %q", p.Name)
	if err := checkProgram(p); err != nil {
		return Program{}, mapErr(ctx, op, err)
	}
	now := d.now()
	p.CreatedAt, p.UpdatedAt, p.Revision = now, now, 1
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		if err := siteExists(ctx, tx, p.SiteID); err != nil {
			return err
		}
		_, err := tx.ExecContext(ctx, `INSERT INTO programs (`+programCols+`) VALUES (?, ?, ?, ?, ?, ?)`,
			p.Name, nullable(p.SiteID), blob(p.Spec), now.UnixNano(), now.UnixNano(), p.Revision)
		return err
	})
	if err != nil {
		return Program{}, err
	}
	return p, nil
}

// siteExists is nil for "" or a stored site, ErrNotFound otherwise.
func siteExists(ctx context.Context, tx *sql.Tx, id string) error {
	if id == "" {
		return nil
	}
	var n int
	if err := tx.QueryRowContext(ctx, `SELECT COUNT(*) FROM sites WHERE id = ?`, id).Scan(&n); err != nil {
		return err
	}
	if n == 0 {
		return fmt.Errorf("site %q: %w", id, ErrNotFound)
	}
	return nil
}

// GetProgram returns the program with that name, or ErrNotFound.
func (d *sqliteDB) GetProgram(ctx context.Context, name string) (Program, error) {
	p, err := scanProgram(d.r.QueryRowContext(ctx, `SELECT `+programCols+` FROM programs WHERE name = ?`, name))
	if err != nil {
		return Program{}, mapErr(ctx, fmt.Sprintf("get program %q", name), err)
	}
	return p, nil
}

// ListPrograms returns one page of programs in order of creation (then
// name) and the token of the next page ("" after the last).
func (d *sqliteDB) ListPrograms(ctx context.Context, p Page) ([]Program, string, error) {
	const op, scope = "list programs", "programs"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+programCols+` FROM programs
		WHERE (created_at, name) > (?, ?) ORDER BY created_at, name LIMIT ?`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanProgram, func(x Program) cursor { return cursor{x.CreatedAt.UnixNano(), x.Name} })
	return out, next, mapErr(ctx, op, err)
}

// UpdateProgram replaces the site and spec of program p.Name. p.Revision
// must be the revision the caller read (else ErrConflict); an unknown
// SiteID is ErrNotFound. The stored record, with the next revision and a
// new UpdatedAt, is returned.
func (d *sqliteDB) UpdateProgram(ctx context.Context, p Program) (Program, error) {
	op := fmt.Sprintf("update program %q", p.Name)
	if err := checkProgram(p); err != nil {
		return Program{}, mapErr(ctx, op, err)
	}
	var out Program
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		cur, err := scanProgram(tx.QueryRowContext(ctx, `SELECT `+programCols+` FROM programs WHERE name = ?`, p.Name))
		if err != nil {
			return err
		}
		if cur.Revision != p.Revision {
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, p.Revision, ErrConflict)
		}
		if err := siteExists(ctx, tx, p.SiteID); err != nil {
			return err
		}
		now := d.now()
		out = Program{Name: p.Name, SiteID: p.SiteID, Spec: p.Spec, CreatedAt: cur.CreatedAt, UpdatedAt: now, Revision: cur.Revision + 1}
		_, err = tx.ExecContext(ctx, `UPDATE programs SET site_id = ?, spec = ?, updated_at = ?, revision = ? WHERE name = ?`,
			nullable(out.SiteID), blob(out.Spec), now.UnixNano(), out.Revision, out.Name)
		return err
	})
	if err != nil {
		return Program{}, err
	}
	return out, nil
}

// DeleteProgram deletes a program and its charges; blocks no longer queued
// that refer to it lose the reference. While a queued block refers to it it
// is ErrConflict; an unknown name is ErrNotFound.
func (d *sqliteDB) DeleteProgram(ctx context.Context, name string) error {
	op := fmt.Sprintf("delete program %q", name)
	return d.write(ctx, op, func(tx *sql.Tx) error {
		var exists, queued int
		if err := tx.QueryRowContext(ctx, `SELECT
			(SELECT COUNT(*) FROM programs WHERE name = ?1),
			(SELECT COUNT(*) FROM blocks WHERE program = ?1 AND state = 'queued')`, name).Scan(&exists, &queued); err != nil {
			return err
		}
		if exists == 0 {
			return ErrNotFound
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks spend its time: %w", queued, ErrConflict)
		}
		_, err := tx.ExecContext(ctx, `DELETE FROM programs WHERE name = ?`, name)
		return err
	})
}

// ProgramCharges returns the ledger rows of a program whose runs started in
// [from, to), in order of start (then report id). A zero from or to leaves
// that side open. An unknown program has none.
func (d *sqliteDB) ProgramCharges(ctx context.Context, program string, from, to time.Time) ([]Charge, error) {
	op := fmt.Sprintf("charges of program %q", program)
	lo, hi := chargeBounds(from, to)
	rows, err := d.r.QueryContext(ctx, `SELECT `+chargeCols+` FROM program_charges
		WHERE program = ? AND start_at >= ? AND start_at < ? ORDER BY start_at, report_id`, program, lo, hi)
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []Charge
	for rows.Next() {
		c, err := scanCharge(rows)
		if err != nil {
			return nil, mapErr(ctx, op, err)
		}
		out = append(out, c)
	}
	return out, mapErr(ctx, op, rows.Err())
}

// chargeBounds turns ProgramCharges' interval into nanoseconds, a zero
// instant meaning no bound.
func chargeBounds(from, to time.Time) (lo, hi int64) {
	lo, hi = math.MinInt64, math.MaxInt64
	if !from.IsZero() {
		lo = from.UnixNano()
	}
	if !to.IsZero() {
		hi = to.UnixNano()
	}
	return lo, hi
}
