package store

import (
	"context"
	"database/sql"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
)

// CopyStats counts the records Copy wrote.
type CopyStats struct {
	Sites, Targets, Blocks, ProgressReports, Plans, Tokens, Programs, Charges int
	// Others counts the rows of the tables copied as they are (rawTables).
	Others int
}

func (c CopyStats) String() string {
	return fmt.Sprintf("%d sites, %d targets, %d blocks, %d progress reports, %d plans, %d tokens, %d programs, %d charges, %d other records",
		c.Sites, c.Targets, c.Blocks, c.ProgressReports, c.Plans, c.Tokens, c.Programs, c.Charges, c.Others)
}

// rawTables are the tables Copy copies row by row as they are, in an order
// that satisfies their foreign keys (after the typed records). Their
// columns hold the same kinds in both dialects (integers, reals, text,
// bytes), so a value read from one is written to the other unchanged.
// TestCopyCoversEveryTable fails when a migration adds a table that is in
// neither this list nor the typed records.
var rawTables = []struct{ table, cols, order string }{
	{"target_imports", "request_id, fingerprint, target_ids, created_at", "request_id"},
	{"magnitude_observations", "id, target_id, observed_at, magnitude, sigma, note, created_at", "id"},
	{"magnitude_fits", "id, target_id, spec, applied, created_at", "id"},
	{"block_edits", "block_id, at, actor, action, fields, revision", "block_id, at, revision, action"},
}

// Copy copies every record of from into to, which must be empty (else
// ErrConflict), keeping ids, instants, revisions, frames, versions and token
// hashes as they are; either store may be SQLite or PostgreSQL. The records
// are read through the paged List methods, so nothing may write to from
// while it runs (stop its daemons first), and written to in one transaction:
// all of them or, on any error, none. to's IntegrityCheck must pass after.
func Copy(ctx context.Context, from, to *DB) (CopyStats, error) {
	var st CopyStats
	var recs records
	if err := recs.read(ctx, from); err != nil {
		return st, fmt.Errorf("store: copy: read: %w", err)
	}
	if err := to.importRecords(ctx, &recs); err != nil {
		return st, fmt.Errorf("store: copy: write: %w", err)
	}
	if err := to.IntegrityCheck(ctx); err != nil {
		return st, fmt.Errorf("store: copy: %w", err)
	}
	st = CopyStats{Sites: len(recs.sites), Targets: len(recs.targets), Blocks: len(recs.blocks),
		ProgressReports: len(recs.reports), Plans: len(recs.plans), Tokens: len(recs.tokens),
		Programs: len(recs.programs), Charges: len(recs.charges)}
	for _, rs := range recs.raw {
		st.Others += len(rs)
	}
	return st, nil
}

// records is a whole database in memory.
type records struct {
	sites   []Site
	targets []Target
	nets    []Network
	blocks  []Block
	reports []ProgressReport
	plans   []Plan
	tokens  []Token
	// programs and their ledger (migration 0009)
	programs []Program
	charges  []Charge
	raw      [][][]any // rows of rawTables[i]
}

// all pages through one list.
func all[T any](list func(Page) ([]T, string, error)) ([]T, error) {
	var out []T
	token := ""
	for {
		got, next, err := list(Page{Size: MaxPageSize, Token: token})
		if err != nil {
			return nil, err
		}
		out = append(out, got...)
		if next == "" {
			return out, nil
		}
		token = next
	}
}

func (r *records) read(ctx context.Context, d *DB) error {
	var err error
	if r.sites, err = all(func(p Page) ([]Site, string, error) { return d.ListSites(ctx, p) }); err != nil {
		return err
	}
	if r.targets, err = all(func(p Page) ([]Target, string, error) { return d.ListTargets(ctx, p) }); err != nil {
		return err
	}
	if r.nets, err = all(func(p Page) ([]Network, string, error) { return d.ListNetworks(ctx, p) }); err != nil {
		return err
	}
	if r.blocks, err = all(func(p Page) ([]Block, string, error) { return d.ListBlocks(ctx, BlockFilter{}, p) }); err != nil {
		return err
	}
	for _, b := range r.blocks {
		rs, err := all(func(p Page) ([]ProgressReport, string, error) { return d.ListProgressReports(ctx, b.ID, p) })
		if err != nil {
			return err
		}
		r.reports = append(r.reports, rs...)
	}
	for _, s := range r.sites {
		ps, err := all(func(p Page) ([]Plan, string, error) { return d.ListPlans(ctx, s.ID, p) })
		if err != nil {
			return err
		}
		r.plans = append(r.plans, ps...)
	}
	if r.programs, err = all(func(p Page) ([]Program, string, error) { return d.ListPrograms(ctx, p) }); err != nil {
		return err
	}
	for _, p := range r.programs {
		cs, err := d.ProgramCharges(ctx, p.Name, time.Time{}, time.Time{})
		if err != nil {
			return err
		}
		r.charges = append(r.charges, cs...)
	}
	if r.tokens, err = all(func(p Page) ([]Token, string, error) { return d.ListTokens(ctx, p) }); err != nil {
		return err
	}
	r.raw = make([][][]any, len(rawTables))
	for i, t := range rawTables {
		if r.raw[i], err = d.rawRows(ctx, t.table, t.cols, t.order); err != nil {
			return fmt.Errorf("%s: %w", t.table, err)
		}
	}
	return nil
}

// rawRows reads every row of one table, columns as listed, in order.
func (d *DB) rawRows(ctx context.Context, table, cols, order string) ([][]any, error) {
	q := `SELECT ` + cols + ` FROM ` + table + ` ORDER BY ` + order
	n := strings.Count(cols, ",") + 1
	var out [][]any
	// drain reads a query's rows; both drivers' row sets have these methods.
	drain := func(rows interface {
		Next() bool
		Scan(...any) error
		Err() error
	}) error {
		for rows.Next() {
			row, ptrs := make([]any, n), make([]any, n)
			for i := range row {
				ptrs[i] = &row[i]
			}
			if err := rows.Scan(ptrs...); err != nil {
				return err
			}
			out = append(out, row)
		}
		return rows.Err()
	}
	var err error
	if d.pg != nil {
		err = d.pg.read(ctx, "copy", func(tx pgx.Tx) error {
			rows, err := tx.Query(ctx, q)
			if err != nil {
				return err
			}
			defer rows.Close()
			return drain(rows)
		})
	} else {
		err = d.sqliteDB.read(ctx, "copy", func(tx *sql.Tx) error {
			rows, err := tx.QueryContext(ctx, q)
			if err != nil {
				return err
			}
			defer rows.Close()
			return drain(rows)
		})
	}
	return out, err
}

// rows returns, per table, the column list and the rows to insert, in an
// order that satisfies the foreign keys.
func (r *records) rows() []struct {
	table, cols string
	rows        [][]any
} {
	type tbl = struct {
		table, cols string
		rows        [][]any
	}
	var out []tbl
	t := tbl{table: "sites", cols: siteCols}
	for _, s := range r.sites {
		t.rows = append(t.rows, []any{s.ID, s.Name, blob(s.Spec), s.CreatedAt.UnixNano(), s.UpdatedAt.UnixNano(), s.Revision})
	}
	out = append(out, t)
	t = tbl{table: "programs", cols: programCols}
	for _, x := range r.programs {
		t.rows = append(t.rows, []any{x.Name, nullable(x.SiteID), blob(x.Spec), x.CreatedAt.UnixNano(), x.UpdatedAt.UnixNano(), x.Revision})
	}
	out = append(out, t)
	t = tbl{table: "targets", cols: targetCols}
	for _, x := range r.targets {
		t.rows = append(t.rows, []any{x.ID, x.Name, x.Kind, blob(x.Spec), x.CreatedAt.UnixNano(), x.UpdatedAt.UnixNano(), x.Revision})
	}
	out = append(out, t)
	t = tbl{table: "networks", cols: networkCols}
	for _, n := range r.nets {
		t.rows = append(t.rows, []any{n.ID, n.Name, blob(n.Spec), n.CreatedAt.UnixNano(), n.UpdatedAt.UnixNano(), n.Revision})
	}
	out = append(out, t)
	t = tbl{table: "network_sites", cols: "network_id, site_id, position"}
	for _, n := range r.nets {
		for i, s := range n.SiteIDs {
			t.rows = append(t.rows, []any{n.ID, s, i})
		}
	}
	out = append(out, t)
	t = tbl{table: "blocks", cols: blockCols}
	for _, b := range r.blocks {
		t.rows = append(t.rows, blockRow(b))
	}
	out = append(out, t)
	t = tbl{table: "progress_reports", cols: reportCols}
	for _, x := range r.reports {
		t.rows = append(t.rows, []any{x.ReportID, x.BlockID, x.FramesKept, x.FramesApplied, x.Start.UnixNano(), x.End.UnixNano(),
			x.Outcome, x.ReceivedAt.UnixNano(), nullable(x.SiteID)})
	}
	out = append(out, t)
	t = tbl{table: "program_charges", cols: chargeCols}
	for _, x := range r.charges {
		t.rows = append(t.rows, []any{x.ReportID, x.Program, x.BlockID, x.Start.UnixNano(), x.Exposure.Nanoseconds(), x.Overheads.Nanoseconds()})
	}
	out = append(out, t)
	t = tbl{table: "plans", cols: planCols}
	for _, p := range r.plans {
		t.rows = append(t.rows, []any{p.ID, p.SiteID, p.Version, p.Start.UnixNano(), p.End.UnixNano(), blob(p.Body), p.CreatedAt.UnixNano()})
	}
	out = append(out, t)
	t = tbl{table: "tokens", cols: tokenCols}
	for _, x := range r.tokens {
		var revoked, expires any
		if x.RevokedAt != nil {
			revoked = x.RevokedAt.UnixNano()
		}
		if x.ExpiresAt != nil {
			expires = x.ExpiresAt.UnixNano()
		}
		t.rows = append(t.rows, []any{x.ID, blob(x.Hash), x.Role, x.Label, x.CreatedAt.UnixNano(), revoked, expires, x.SiteID})
	}
	out = append(out, t)
	for i, rt := range rawTables {
		t = tbl{table: rt.table, cols: rt.cols}
		if i < len(r.raw) {
			t.rows = r.raw[i]
		}
		out = append(out, t)
	}
	return out
}

const emptyCheck = `SELECT (SELECT COUNT(*) FROM sites) + (SELECT COUNT(*) FROM targets) + (SELECT COUNT(*) FROM tokens)`

// importRecords writes r into d (which must be empty) in one transaction.
func (d *DB) importRecords(ctx context.Context, r *records) error {
	const op = "import"
	placeholders := func(n int, dollar bool) string {
		ps := make([]string, n)
		for i := range ps {
			ps[i] = "?"
			if dollar {
				ps[i] = "$" + strconv.Itoa(i+1)
			}
		}
		return strings.Join(ps, ", ")
	}
	notEmpty := func(n int) error {
		if n > 0 {
			return fmt.Errorf("the destination database holds %d sites, targets and tokens; copy only into an empty one: %w", n, ErrConflict)
		}
		return nil
	}
	tables := r.rows()
	if d.pg != nil {
		return d.pg.write(ctx, op, func(tx pgx.Tx) error {
			var n int
			if err := tx.QueryRow(ctx, emptyCheck).Scan(&n); err != nil {
				return err
			}
			if err := notEmpty(n); err != nil {
				return err
			}
			for _, t := range tables {
				q := `INSERT INTO ` + t.table + ` (` + t.cols + `) VALUES (` + placeholders(strings.Count(t.cols, ",")+1, true) + `)`
				batch := &pgx.Batch{}
				for _, row := range t.rows {
					batch.Queue(q, row...)
				}
				if err := tx.SendBatch(ctx, batch).Close(); err != nil {
					return fmt.Errorf("%s: %w", t.table, err)
				}
			}
			return nil
		})
	}
	return d.sqliteDB.write(ctx, op, func(tx *sql.Tx) error {
		var n int
		if err := tx.QueryRowContext(ctx, emptyCheck).Scan(&n); err != nil {
			return err
		}
		if err := notEmpty(n); err != nil {
			return err
		}
		for _, t := range tables {
			ins, err := tx.PrepareContext(ctx, `INSERT INTO `+t.table+` (`+t.cols+`) VALUES (`+placeholders(strings.Count(t.cols, ",")+1, false)+`)`)
			if err != nil {
				return err
			}
			for _, row := range t.rows {
				if _, err := ins.ExecContext(ctx, row...); err != nil {
					ins.Close()
					return fmt.Errorf("%s: %w", t.table, err)
				}
			}
			ins.Close()
		}
		return nil
	})
}
