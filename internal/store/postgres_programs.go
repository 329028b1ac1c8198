package store

import (
	"context"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
)

// The PostgreSQL twins of programs.go; the contracts are documented there.

func (d *pgDB) CreateProgram(ctx context.Context, p Program) (Program, error) {
	op := fmt.Sprintf("create program %q", p.Name)
	if err := checkProgram(p); err != nil {
		return Program{}, pgMapErr(ctx, op, err)
	}
	now := d.now()
	p.CreatedAt, p.UpdatedAt, p.Revision = now, now, 1
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		if err := siteExistsPG(ctx, tx, p.SiteID); err != nil {
			return err
		}
		_, err := tx.Exec(ctx, `INSERT INTO programs (`+programCols+`) VALUES ($1, $2, $3, $4, $5, $6)`,
			p.Name, nullable(p.SiteID), blob(p.Spec), now.UnixNano(), now.UnixNano(), p.Revision)
		return err
	})
	if err != nil {
		return Program{}, err
	}
	return p, nil
}

// siteExistsPG is nil for "" or a stored site (locked against deletion
// until the transaction ends), ErrNotFound otherwise.
func siteExistsPG(ctx context.Context, tx pgx.Tx, id string) error {
	if id == "" {
		return nil
	}
	var n int
	if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM (SELECT 1 FROM sites WHERE id = $1 FOR KEY SHARE) s`, id).Scan(&n); err != nil {
		return err
	}
	if n == 0 {
		return fmt.Errorf("site %q: %w", id, ErrNotFound)
	}
	return nil
}

func (d *pgDB) GetProgram(ctx context.Context, name string) (Program, error) {
	p, err := scanProgram(d.pool.QueryRow(ctx, `SELECT `+programCols+` FROM programs WHERE name = $1`, name))
	if err != nil {
		return Program{}, pgMapErr(ctx, fmt.Sprintf("get program %q", name), err)
	}
	return p, nil
}

func (d *pgDB) ListPrograms(ctx context.Context, p Page) ([]Program, string, error) {
	const op, scope = "list programs", "programs"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+programCols+` FROM programs
		WHERE (created_at, name) > ($1, $2) ORDER BY created_at, name LIMIT $3`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanProgram, func(x Program) cursor { return cursor{x.CreatedAt.UnixNano(), x.Name} })
	return out, next, pgMapErr(ctx, op, err)
}

func (d *pgDB) UpdateProgram(ctx context.Context, p Program) (Program, error) {
	op := fmt.Sprintf("update program %q", p.Name)
	if err := checkProgram(p); err != nil {
		return Program{}, pgMapErr(ctx, op, err)
	}
	var out Program
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		cur, err := scanProgram(tx.QueryRow(ctx, `SELECT `+programCols+` FROM programs WHERE name = $1 FOR UPDATE`, p.Name))
		if err != nil {
			return err
		}
		if cur.Revision != p.Revision {
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, p.Revision, ErrConflict)
		}
		if err := siteExistsPG(ctx, tx, p.SiteID); err != nil {
			return err
		}
		now := d.now()
		out = Program{Name: p.Name, SiteID: p.SiteID, Spec: p.Spec, CreatedAt: cur.CreatedAt, UpdatedAt: now, Revision: cur.Revision + 1}
		_, err = tx.Exec(ctx, `UPDATE programs SET site_id = $1, spec = $2, updated_at = $3, revision = $4 WHERE name = $5`,
			nullable(out.SiteID), blob(out.Spec), now.UnixNano(), out.Revision, out.Name)
		return err
	})
	if err != nil {
		return Program{}, err
	}
	return out, nil
}

func (d *pgDB) DeleteProgram(ctx context.Context, name string) error {
	op := fmt.Sprintf("delete program %q", name)
	return d.write(ctx, op, func(tx pgx.Tx) error {
		// The row lock makes a concurrent CreateBlocks naming the program
		// wait (its foreign key check locks the row too) and then fail.
		var one int
		if err := tx.QueryRow(ctx, `SELECT 1 FROM programs WHERE name = $1 FOR UPDATE`, name).Scan(&one); err != nil {
			return err
		}
		var queued int
		if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM blocks WHERE program = $1 AND state = 'queued'`, name).Scan(&queued); err != nil {
			return err
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks spend its time: %w", queued, ErrConflict)
		}
		_, err := tx.Exec(ctx, `DELETE FROM programs WHERE name = $1`, name)
		return err
	})
}

func (d *pgDB) ProgramCharges(ctx context.Context, program string, from, to time.Time) ([]Charge, error) {
	op := fmt.Sprintf("charges of program %q", program)
	lo, hi := chargeBounds(from, to)
	rows, err := d.pool.Query(ctx, `SELECT `+chargeCols+` FROM program_charges
		WHERE program = $1 AND start_at >= $2 AND start_at < $3 ORDER BY start_at, report_id`, program, lo, hi)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []Charge
	for rows.Next() {
		c, err := scanCharge(rows)
		if err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		out = append(out, c)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}
