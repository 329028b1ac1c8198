package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"strings"
	"time"
)

// ProgressReport is what the control software did for a block: FramesKept
// frames over [Start, End] with an Outcome (the server's word for how the run
// ended). ReportID is chosen by the client so that a retried report is
// counted once. ReceivedAt is stamped by the store.
type ProgressReport struct {
	ReportID, BlockID string
	FramesKept        int
	// FramesApplied is what the report added to the block's frames done
	// (FramesKept capped at what was still wanted); set by the store.
	FramesApplied int
	Start, End    time.Time
	Outcome       string
	ReceivedAt    time.Time
	// Exposure is the exposure time of the frames kept (frames kept times
	// the block's exposure), set by the caller for the program ledger: a
	// block with a program charges it Exposure and, as overheads, the rest
	// of the interval. Not stored with the report, not part of its
	// identity.
	Exposure time.Duration
	// Setup is the time spent getting to the run (slew, settle, filter
	// change, focus, acquisition) when the caller knows it, charged as
	// overheads on top of the interval; like Exposure, not stored with the
	// report.
	Setup time.Duration
	// SiteID is the site that reported: one member of a network block's
	// network ("" for a report stored before migration 0008, or when the
	// caller does not say: the block's own site).
	SiteID string
}

const reportCols = `report_id, block_id, frames_kept, frames_applied, start_at, end_at, outcome, received_at, site_id`

func scanReport(s scanner) (ProgressReport, error) {
	var x ProgressReport
	var start, end, received int64
	var site sql.NullString
	if err := s.Scan(&x.ReportID, &x.BlockID, &x.FramesKept, &x.FramesApplied, &start, &end, &x.Outcome, &received, &site); err != nil {
		return ProgressReport{}, err
	}
	x.Start, x.End, x.ReceivedAt = decTime(start), decTime(end), decTime(received)
	x.SiteID = site.String
	return x, nil
}

// ReportProgress applies a progress report to its block in one IMMEDIATE
// transaction, durable (fsync'd) when it returns, and returns the block after
// it.
//
// The block's frames done grow by FramesKept, capped at frames wanted; a
// queued block whose frames done reach frames wanted becomes completed. A
// report for a block that is completed or withdrawn is recorded too (the
// frames were taken), adding what is still missing and leaving the state
// alone.
//
// When the block has a program, the report charges it (ProgramCharges) in
// the same transaction: Exposure, capped at the interval, and as overheads
// the rest of the interval plus Setup.
//
// Reports are idempotent on ReportID: a report whose id is stored already,
// with the same block, frames, interval and outcome, changes nothing and
// returns the block as it is now with duplicate true. The same id with
// different content is ErrConflict. An unknown block is ErrNotFound; an empty
// id, negative frames, or an interval that is missing or ends before it starts
// is ErrInvalid.
func (d *sqliteDB) ReportProgress(ctx context.Context, r ProgressReport) (Block, bool, error) {
	op := fmt.Sprintf("report progress %q for block %q", r.ReportID, r.BlockID)
	start, end, err := checkReport(r)
	if err != nil {
		return Block{}, false, mapErr(ctx, op, err)
	}
	var (
		out       Block
		duplicate bool
	)
	err = d.write(ctx, op, func(tx *sql.Tx) error {
		duplicate = false
		prev, err := scanReport(tx.QueryRowContext(ctx, `SELECT `+reportCols+` FROM progress_reports WHERE report_id = ?`, r.ReportID))
		switch {
		case err == nil:
			if prev.BlockID != r.BlockID || prev.FramesKept != r.FramesKept || prev.Start.UnixNano() != start ||
				prev.End.UnixNano() != end || prev.Outcome != r.Outcome {
				return fmt.Errorf("report id was used for another report (block %q, %d frames, %s to %s, outcome %q): %w",
					prev.BlockID, prev.FramesKept, prev.Start.Format(time.RFC3339Nano), prev.End.Format(time.RFC3339Nano),
					prev.Outcome, ErrConflict)
			}
			duplicate = true
			out, err = scanBlock(tx.QueryRowContext(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = ?`, r.BlockID))
			return err
		case !errors.Is(err, sql.ErrNoRows):
			return err
		}

		b, err := scanBlock(tx.QueryRowContext(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = ?`, r.BlockID))
		if errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("block: %w", ErrNotFound)
		}
		if err != nil {
			return err
		}
		applied := min(r.FramesKept, b.FramesWanted-b.FramesDone)
		now := d.now()
		if applied > 0 {
			b.FramesDone += applied
			if b.State == StateQueued && b.FramesDone == b.FramesWanted {
				b.State = StateCompleted
			}
			b.UpdatedAt, b.Revision = now, b.Revision+1
			if _, err := tx.ExecContext(ctx, `UPDATE blocks SET frames_done = ?, state = ?, updated_at = ?, revision = ? WHERE id = ?`,
				b.FramesDone, b.State, now.UnixNano(), b.Revision, b.ID); err != nil {
				return err
			}
		}
		if _, err := tx.ExecContext(ctx, `INSERT INTO progress_reports (`+reportCols+`)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)`,
			r.ReportID, r.BlockID, r.FramesKept, applied, start, end, r.Outcome, now.UnixNano(), nullable(r.SiteID)); err != nil {
			return err
		}
		if b.Program != "" {
			exp, over := r.charge()
			if _, err := tx.ExecContext(ctx, `INSERT INTO program_charges (`+chargeCols+`) VALUES (?, ?, ?, ?, ?, ?)`,
				r.ReportID, b.Program, b.ID, start, exp.Nanoseconds(), over.Nanoseconds()); err != nil {
				return err
			}
		}
		out = b
		return nil
	})
	if err != nil {
		return Block{}, false, err
	}
	return out, duplicate, nil
}

// reportColsOf is reportCols qualified by a table alias.
func reportColsOf(alias string) string {
	cols := strings.Split(reportCols, ", ")
	for i := range cols {
		cols[i] = alias + "." + cols[i]
	}
	return strings.Join(cols, ", ")
}

func checkReport(r ProgressReport) (start, end int64, err error) {
	switch {
	case r.ReportID == "":
		return 0, 0, invalidf("report id is empty")
	case r.BlockID == "":
		return 0, 0, invalidf("block id is empty")
	case r.FramesKept < 0:
		return 0, 0, invalidf("frames kept %d is negative", r.FramesKept)
	}
	if start, err = encTime(r.Start, "start"); err != nil {
		return 0, 0, err
	}
	if end, err = encTime(r.End, "end"); err != nil {
		return 0, 0, err
	}
	if end < start {
		return 0, 0, invalidf("end %s is before start %s", r.End.Format(time.RFC3339Nano), r.Start.Format(time.RFC3339Nano))
	}
	return start, end, nil
}

// GetProgressReport returns the stored report with that id, or ErrNotFound.
func (d *sqliteDB) GetProgressReport(ctx context.Context, reportID string) (ProgressReport, error) {
	r, err := scanReport(d.r.QueryRowContext(ctx, `SELECT `+reportCols+` FROM progress_reports WHERE report_id = ?`, reportID))
	if err != nil {
		return ProgressReport{}, mapErr(ctx, fmt.Sprintf("get progress report %q", reportID), err)
	}
	return r, nil
}

// ListProgressReports returns one page of a block's reports in the order they
// were received (then id) and the token of the next page. An unknown block
// has no reports.
func (d *sqliteDB) ListProgressReports(ctx context.Context, blockID string, p Page) ([]ProgressReport, string, error) {
	op := fmt.Sprintf("list progress reports of block %q", blockID)
	scope := "progress\x00" + blockID
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+reportCols+` FROM progress_reports
		WHERE block_id = ? AND (received_at, report_id) > (?, ?) ORDER BY received_at, report_id LIMIT ?`,
		blockID, c.key, c.id, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanReport, func(r ProgressReport) cursor {
		return cursor{r.ReceivedAt.UnixNano(), r.ReportID}
	})
	return out, next, mapErr(ctx, op, err)
}

// ReportsEndingAfter returns the reports made at a site whose interval ends
// after t, ordered by interval start (then id): what replans and
// NextAssignment need to know of runs that a report ended early. A report
// made at a site is one whose SiteID is that site, or, without SiteID, one
// for a block of that site.
func (d *sqliteDB) ReportsEndingAfter(ctx context.Context, siteID string, t time.Time) ([]ProgressReport, error) {
	op := fmt.Sprintf("list progress reports of site %q ending after %s", siteID, t.Format(time.RFC3339Nano))
	rows, err := d.r.QueryContext(ctx, `SELECT `+reportColsOf("r")+` FROM progress_reports r JOIN blocks b ON b.id = r.block_id
		WHERE (r.site_id = ?1 OR (r.site_id IS NULL AND b.site_id = ?1)) AND r.end_at > ?2 ORDER BY r.start_at, r.report_id`,
		siteID, t.UTC().UnixNano())
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []ProgressReport
	for rows.Next() {
		r, err := scanReport(rows)
		if err != nil {
			return nil, mapErr(ctx, op, err)
		}
		out = append(out, r)
	}
	if err := rows.Err(); err != nil {
		return nil, mapErr(ctx, op, err)
	}
	return out, nil
}
