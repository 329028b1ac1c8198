package store

import (
	"context"
	"database/sql"
	"fmt"
	"time"
)

// Site is a telescope at a place. Spec is the server's encoding of the site's
// full description (location, horizon, mount, overheads, ...).
type Site struct {
	ID, Name             string
	Spec                 []byte
	CreatedAt, UpdatedAt time.Time
	Revision             int64
}

const siteCols = `id, name, spec, created_at, updated_at, revision`

func scanSite(s scanner) (Site, error) {
	var x Site
	var created, updated int64
	if err := s.Scan(&x.ID, &x.Name, &x.Spec, &created, &updated, &x.Revision); err != nil {
		return Site{}, err
	}
	x.CreatedAt, x.UpdatedAt = decTime(created), decTime(updated)
	return x, nil
}

func checkSite(s Site) error {
	if s.ID == "" {
		return invalidf("site id is empty")
	}
	if s.Name == "" {
		return invalidf("site name is empty")
	}
	return nil
}

// CreateSite stores a new site. The store sets CreatedAt, UpdatedAt and
// Revision (1); it returns the stored record. An existing id is
// ErrAlreadyExists.
func (d *sqliteDB) CreateSite(ctx context.Context, s Site) (Site, error) {
	op := fmt.Sprintf("create site %q", s.ID)
	if err := checkSite(s); err != nil {
		return Site{}, mapErr(ctx, op, err)
	}
	now := d.now()
	s.CreatedAt, s.UpdatedAt, s.Revision = now, now, 1
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		_, err := tx.ExecContext(ctx, `INSERT INTO sites (`+siteCols+`) VALUES (?, ?, ?, ?, ?, ?)`,
			s.ID, s.Name, blob(s.Spec), now.UnixNano(), now.UnixNano(), s.Revision)
		return err
	})
	if err != nil {
		return Site{}, err
	}
	return s, nil
}

// GetSite returns the site with that id, or ErrNotFound.
func (d *sqliteDB) GetSite(ctx context.Context, id string) (Site, error) {
	s, err := scanSite(d.r.QueryRowContext(ctx, `SELECT `+siteCols+` FROM sites WHERE id = ?`, id))
	if err != nil {
		return Site{}, mapErr(ctx, fmt.Sprintf("get site %q", id), err)
	}
	return s, nil
}

// ListSites returns one page of sites in order of creation (then id) and the
// token of the next page ("" after the last).
func (d *sqliteDB) ListSites(ctx context.Context, p Page) ([]Site, string, error) {
	const op, scope = "list sites", "sites"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+siteCols+` FROM sites
		WHERE (created_at, id) > (?, ?) ORDER BY created_at, id LIMIT ?`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanSite, func(s Site) cursor { return cursor{s.CreatedAt.UnixNano(), s.ID} })
	return out, next, mapErr(ctx, op, err)
}

// UpdateSite replaces the name and spec of site s.ID. s.Revision must be the
// revision the caller read (else ErrConflict); the stored record, with the
// next revision and a new UpdatedAt, is returned.
func (d *sqliteDB) UpdateSite(ctx context.Context, s Site) (Site, error) {
	op := fmt.Sprintf("update site %q", s.ID)
	if err := checkSite(s); err != nil {
		return Site{}, mapErr(ctx, op, err)
	}
	var out Site
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		cur, err := scanSite(tx.QueryRowContext(ctx, `SELECT `+siteCols+` FROM sites WHERE id = ?`, s.ID))
		if err != nil {
			return err
		}
		if cur.Revision != s.Revision {
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, s.Revision, ErrConflict)
		}
		now := d.now()
		out = Site{ID: s.ID, Name: s.Name, Spec: s.Spec, CreatedAt: cur.CreatedAt, UpdatedAt: now, Revision: cur.Revision + 1}
		_, err = tx.ExecContext(ctx, `UPDATE sites SET name = ?, spec = ?, updated_at = ?, revision = ? WHERE id = ?`,
			out.Name, blob(out.Spec), now.UnixNano(), out.Revision, out.ID)
		return err
	})
	if err != nil {
		return Site{}, err
	}
	return out, nil
}

// DeleteSite deletes a site together with its plans and its blocks that are
// no longer queued (and their progress reports). While a queued block uses
// the site it is ErrConflict.
func (d *sqliteDB) DeleteSite(ctx context.Context, id string) error {
	op := fmt.Sprintf("delete site %q", id)
	return d.write(ctx, op, func(tx *sql.Tx) error {
		var exists, queued int
		if err := tx.QueryRowContext(ctx, `SELECT
			(SELECT COUNT(*) FROM sites WHERE id = ?),
			(SELECT COUNT(*) FROM blocks WHERE site_id = ? AND state = 'queued')`, id, id).Scan(&exists, &queued); err != nil {
			return err
		}
		if exists == 0 {
			return ErrNotFound
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks use it: %w", queued, ErrConflict)
		}
		_, err := tx.ExecContext(ctx, `DELETE FROM sites WHERE id = ?`, id)
		return err
	})
}
