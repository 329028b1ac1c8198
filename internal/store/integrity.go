package store

import (
	"context"
	"database/sql"
	"fmt"
	"strings"
)

// IntegrityCheck verifies the database file and the store's own invariants,
// all on one snapshot:
//
//   - PRAGMA integrity_check reports "ok" (b-trees, indexes, free list);
//   - PRAGMA foreign_key_check finds no row that refers to a missing parent;
//   - every block has frames_done equal to the sum of frames its progress
//     reports applied, never above frames wanted, and a state that matches
//     its frames (queued below wanted, completed at wanted);
//   - every site's plan versions are 1..n without gaps.
//
// It returns nil, or an error wrapping ErrIntegrity that lists up to ten
// problems of each kind.
func (d *sqliteDB) IntegrityCheck(ctx context.Context) error {
	const op = "integrity check"
	var problems []string
	err := d.read(ctx, op, func(tx *sql.Tx) error {
		checks := []struct {
			what, query string
		}{
			{"integrity_check", `PRAGMA integrity_check(10)`},
			{"foreign_key_check", `SELECT "table" || ' rowid ' || COALESCE(rowid, 'NULL') || ' refers to missing ' || parent FROM pragma_foreign_key_check LIMIT 10`},
			{"frames", `SELECT 'block ' || b.id || ': frames done ' || b.frames_done || ', reports applied ' || COALESCE(SUM(p.frames_applied), 0)
				FROM blocks b LEFT JOIN progress_reports p ON p.block_id = b.id
				GROUP BY b.id HAVING b.frames_done <> COALESCE(SUM(p.frames_applied), 0) LIMIT 10`},
			{"state", `SELECT 'block ' || id || ': state ' || state || ' with ' || frames_done || ' of ' || frames_wanted || ' frames'
				FROM blocks WHERE frames_done > frames_wanted OR frames_done < 0
				OR (state = 'queued' AND frames_done >= frames_wanted)
				OR (state = 'completed' AND frames_done <> frames_wanted)
				OR state NOT IN ('queued', 'completed', 'withdrawn') LIMIT 10`},
			{"plan versions", `SELECT 'site ' || site_id || ': ' || COUNT(*) || ' plans, highest version ' || MAX(version)
				FROM plans GROUP BY site_id HAVING COUNT(*) <> MAX(version) OR MIN(version) <> 1 LIMIT 10`},
		}
		for _, c := range checks {
			rows, err := tx.QueryContext(ctx, c.query)
			if err != nil {
				return fmt.Errorf("%s: %w", c.what, err)
			}
			for rows.Next() {
				var s string
				if err := rows.Scan(&s); err != nil {
					rows.Close()
					return fmt.Errorf("%s: %w", c.what, err)
				}
				if c.what == "integrity_check" && s == "ok" {
					continue
				}
				problems = append(problems, c.what+": "+s)
			}
			if err := rows.Close(); err != nil {
				return err
			}
			if err := rows.Err(); err != nil {
				return fmt.Errorf("%s: %w", c.what, err)
			}
		}
		return nil
	})
	if err != nil {
		return err
	}
	if len(problems) > 0 {
		return fmt.Errorf("%s: %s: %w", op, strings.Join(problems, "; "), ErrIntegrity)
	}
	return nil
}
