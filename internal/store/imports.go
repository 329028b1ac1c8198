package store

import (
	"bytes"
	"context"
	"database/sql"
	"errors"
	"fmt"
	"strings"
)

// ImportTargets stores the targets ts in one IMMEDIATE transaction, all or
// nothing, and records requestID with fingerprint (32 bytes, the caller's
// hash of what was asked). A second call with a stored requestID and the
// same fingerprint stores nothing and returns the targets of the first call
// as they are now, with replay true (a target deleted since is left out);
// with a different fingerprint it is ErrConflict. An empty request id, a
// fingerprint of another length or a bad target is ErrInvalid; an existing
// target id is ErrAlreadyExists.
func (d *sqliteDB) ImportTargets(ctx context.Context, requestID string, fingerprint []byte, ts []Target) ([]Target, bool, error) {
	op := fmt.Sprintf("import %d targets (request %q)", len(ts), requestID)
	if requestID == "" {
		return nil, false, mapErr(ctx, op, invalidf("import request id is empty"))
	}
	if len(fingerprint) != 32 {
		return nil, false, mapErr(ctx, op, invalidf("import fingerprint has %d bytes, want 32", len(fingerprint)))
	}
	for _, t := range ts {
		if err := checkTarget(t); err != nil {
			return nil, false, mapErr(ctx, op, err)
		}
	}
	var out []Target
	replay := false
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		out, replay = nil, false
		var fp []byte
		var ids string
		err := tx.QueryRowContext(ctx, `SELECT fingerprint, target_ids FROM target_imports WHERE request_id = ?`, requestID).Scan(&fp, &ids)
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
				t, err := scanTarget(tx.QueryRowContext(ctx, `SELECT `+targetCols+` FROM targets WHERE id = ?`, id))
				if errors.Is(err, sql.ErrNoRows) {
					continue
				}
				if err != nil {
					return err
				}
				out = append(out, t)
			}
			return nil
		case !errors.Is(err, sql.ErrNoRows):
			return err
		}
		now := d.now()
		idList := make([]string, 0, len(ts))
		for _, t := range ts {
			t.CreatedAt, t.UpdatedAt, t.Revision = now, now, 1
			if _, err := tx.ExecContext(ctx, `INSERT INTO targets (`+targetCols+`) VALUES (?, ?, ?, ?, ?, ?, ?)`,
				t.ID, t.Name, t.Kind, blob(t.Spec), now.UnixNano(), now.UnixNano(), t.Revision); err != nil {
				return err
			}
			out = append(out, t)
			idList = append(idList, t.ID)
		}
		_, err = tx.ExecContext(ctx, `INSERT INTO target_imports (request_id, fingerprint, target_ids, created_at) VALUES (?, ?, ?, ?)`,
			requestID, fingerprint, strings.Join(idList, "\n"), now.UnixNano())
		return err
	})
	if err != nil {
		return nil, false, err
	}
	return out, replay, nil
}
