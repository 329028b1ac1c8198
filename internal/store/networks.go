package store

import (
	"context"
	"database/sql"
	"fmt"
	"strings"
	"time"
)

// Network is a named group of sites sharing one queue (migration 0008).
// SiteIDs are its members in order; Spec is the server's encoding of the
// rest (description).
type Network struct {
	ID, Name             string
	SiteIDs              []string
	Spec                 []byte
	CreatedAt, UpdatedAt time.Time
	Revision             int64
}

const networkCols = `id, name, spec, created_at, updated_at, revision`

func scanNetwork(s scanner) (Network, error) {
	var x Network
	var created, updated int64
	if err := s.Scan(&x.ID, &x.Name, &x.Spec, &created, &updated, &x.Revision); err != nil {
		return Network{}, err
	}
	x.CreatedAt, x.UpdatedAt = decTime(created), decTime(updated)
	return x, nil
}

// checkNetwork enforces what a new network must be.
func checkNetwork(n Network) error {
	switch {
	case n.ID == "":
		return invalidf("network id is empty")
	case n.Name == "":
		return invalidf("network name is empty")
	case len(n.SiteIDs) == 0:
		return invalidf("network %q has no sites", n.ID)
	}
	seen := map[string]bool{}
	for _, s := range n.SiteIDs {
		if s == "" || seen[s] {
			return invalidf("network %q: site id %q empty or given twice", n.ID, s)
		}
		seen[s] = true
	}
	return nil
}

// networkMembersQuery lists the members of the networks whose ids are in a
// list, in their order.
const networkMembersQuery = `SELECT network_id, site_id FROM network_sites WHERE network_id IN (%s) ORDER BY network_id, position`

// CreateNetwork stores a new network with its members, in one transaction.
// The store sets CreatedAt, UpdatedAt and Revision (1). An existing id or
// name is ErrAlreadyExists; an unknown site ErrNotFound (naming it); no
// sites, or a site given twice, ErrInvalid.
func (d *sqliteDB) CreateNetwork(ctx context.Context, n Network) (Network, error) {
	op := fmt.Sprintf("create network %q", n.ID)
	if err := checkNetwork(n); err != nil {
		return Network{}, mapErr(ctx, op, err)
	}
	now := d.now()
	n.CreatedAt, n.UpdatedAt, n.Revision = now, now, 1
	err := d.write(ctx, op, func(tx *sql.Tx) error {
		for _, s := range n.SiteIDs {
			var k int
			if err := tx.QueryRowContext(ctx, `SELECT COUNT(*) FROM sites WHERE id = ?`, s).Scan(&k); err != nil {
				return err
			}
			if k == 0 {
				return fmt.Errorf("site %q: %w", s, ErrNotFound)
			}
		}
		if _, err := tx.ExecContext(ctx, `INSERT INTO networks (`+networkCols+`) VALUES (?, ?, ?, ?, ?, ?)`,
			n.ID, n.Name, blob(n.Spec), now.UnixNano(), now.UnixNano(), n.Revision); err != nil {
			return err
		}
		for i, s := range n.SiteIDs {
			if _, err := tx.ExecContext(ctx, `INSERT INTO network_sites (network_id, site_id, position) VALUES (?, ?, ?)`, n.ID, s, i); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return Network{}, err
	}
	return n, nil
}

// GetNetwork returns the network with that id and its members, or
// ErrNotFound.
func (d *sqliteDB) GetNetwork(ctx context.Context, id string) (Network, error) {
	op := fmt.Sprintf("get network %q", id)
	n, err := scanNetwork(d.r.QueryRowContext(ctx, `SELECT `+networkCols+` FROM networks WHERE id = ?`, id))
	if err != nil {
		return Network{}, mapErr(ctx, op, err)
	}
	ns := []Network{n}
	if err := d.members(ctx, ns); err != nil {
		return Network{}, mapErr(ctx, op, err)
	}
	return ns[0], nil
}

// members fills the SiteIDs of ns.
func (d *sqliteDB) members(ctx context.Context, ns []Network) error {
	if len(ns) == 0 {
		return nil
	}
	args := make([]any, len(ns))
	at := map[string]int{}
	for i, n := range ns {
		args[i] = n.ID
		at[n.ID] = i
	}
	rows, err := d.r.QueryContext(ctx, fmt.Sprintf(networkMembersQuery, strings.TrimSuffix(strings.Repeat("?, ", len(ns)), ", ")), args...)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		var nid, sid string
		if err := rows.Scan(&nid, &sid); err != nil {
			return err
		}
		ns[at[nid]].SiteIDs = append(ns[at[nid]].SiteIDs, sid)
	}
	return rows.Err()
}

// ListNetworks returns one page of networks in creation order (then id),
// with their members, and the token of the next page.
func (d *sqliteDB) ListNetworks(ctx context.Context, p Page) ([]Network, string, error) {
	const op, scope = "list networks", "networks"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+networkCols+` FROM networks
		WHERE (created_at, id) > (?, ?) ORDER BY created_at, id LIMIT ?`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanNetwork, func(n Network) cursor { return cursor{n.CreatedAt.UnixNano(), n.ID} })
	if err == nil {
		err = d.members(ctx, out)
	}
	return out, next, mapErr(ctx, op, err)
}

// NetworksOfSite returns the ids of the networks a site belongs to, in
// creation order.
func (d *sqliteDB) NetworksOfSite(ctx context.Context, siteID string) ([]string, error) {
	op := fmt.Sprintf("networks of site %q", siteID)
	rows, err := d.r.QueryContext(ctx, `SELECT n.id FROM networks n JOIN network_sites m ON m.network_id = n.id
		WHERE m.site_id = ? ORDER BY n.created_at, n.id`, siteID)
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

// DeleteNetwork removes a network and its membership. It is ErrConflict
// while queued blocks belong to the network (the others keep their home
// sites and lose the network), ErrNotFound for an unknown id.
func (d *sqliteDB) DeleteNetwork(ctx context.Context, id string) error {
	op := fmt.Sprintf("delete network %q", id)
	return d.write(ctx, op, func(tx *sql.Tx) error {
		var exists, queued int
		if err := tx.QueryRowContext(ctx, `SELECT
			(SELECT COUNT(*) FROM networks WHERE id = ?1),
			(SELECT COUNT(*) FROM blocks WHERE network_id = ?1 AND state = 'queued')`, id).Scan(&exists, &queued); err != nil {
			return err
		}
		if exists == 0 {
			return ErrNotFound
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks belong to it: %w", queued, ErrConflict)
		}
		_, err := tx.ExecContext(ctx, `DELETE FROM networks WHERE id = ?`, id)
		return err
	})
}
