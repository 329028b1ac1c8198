package store

import (
	"context"
	"fmt"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
)

// The PostgreSQL side of networks; contracts on the SQLite methods
// (networks.go).

func (d *pgDB) CreateNetwork(ctx context.Context, n Network) (Network, error) {
	op := fmt.Sprintf("create network %q", n.ID)
	if err := checkNetwork(n); err != nil {
		return Network{}, pgMapErr(ctx, op, err)
	}
	now := d.now()
	n.CreatedAt, n.UpdatedAt, n.Revision = now, now, 1
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		for _, s := range n.SiteIDs {
			var k int
			if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM sites WHERE id = $1`, s).Scan(&k); err != nil {
				return err
			}
			if k == 0 {
				return fmt.Errorf("site %q: %w", s, ErrNotFound)
			}
		}
		if _, err := tx.Exec(ctx, `INSERT INTO networks (`+networkCols+`) VALUES ($1, $2, $3, $4, $5, $6)`,
			n.ID, n.Name, blob(n.Spec), now.UnixNano(), now.UnixNano(), n.Revision); err != nil {
			return err
		}
		for i, s := range n.SiteIDs {
			if _, err := tx.Exec(ctx, `INSERT INTO network_sites (network_id, site_id, position) VALUES ($1, $2, $3)`, n.ID, s, i); err != nil {
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

func (d *pgDB) GetNetwork(ctx context.Context, id string) (Network, error) {
	op := fmt.Sprintf("get network %q", id)
	n, err := scanNetwork(d.pool.QueryRow(ctx, `SELECT `+networkCols+` FROM networks WHERE id = $1`, id))
	if err != nil {
		return Network{}, pgMapErr(ctx, op, err)
	}
	ns := []Network{n}
	if err := d.members(ctx, ns); err != nil {
		return Network{}, pgMapErr(ctx, op, err)
	}
	return ns[0], nil
}

func (d *pgDB) members(ctx context.Context, ns []Network) error {
	if len(ns) == 0 {
		return nil
	}
	args := make([]any, len(ns))
	ph := make([]string, len(ns))
	at := map[string]int{}
	for i, n := range ns {
		args[i], ph[i] = n.ID, "$"+strconv.Itoa(i+1)
		at[n.ID] = i
	}
	rows, err := d.pool.Query(ctx, fmt.Sprintf(networkMembersQuery, strings.Join(ph, ", ")), args...)
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

func (d *pgDB) ListNetworks(ctx context.Context, p Page) ([]Network, string, error) {
	const op, scope = "list networks", "networks"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+networkCols+` FROM networks
		WHERE (created_at, id) > ($1, $2) ORDER BY created_at, id LIMIT $3`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanNetwork, func(n Network) cursor { return cursor{n.CreatedAt.UnixNano(), n.ID} })
	if err == nil {
		err = d.members(ctx, out)
	}
	return out, next, pgMapErr(ctx, op, err)
}

func (d *pgDB) NetworksOfSite(ctx context.Context, siteID string) ([]string, error) {
	op := fmt.Sprintf("networks of site %q", siteID)
	rows, err := d.pool.Query(ctx, `SELECT n.id FROM networks n JOIN network_sites m ON m.network_id = n.id
		WHERE m.site_id = $1 ORDER BY n.created_at, n.id`, siteID)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var id string
		if err := rows.Scan(&id); err != nil {
			return nil, pgMapErr(ctx, op, err)
		}
		out = append(out, id)
	}
	return out, pgMapErr(ctx, op, rows.Err())
}

func (d *pgDB) DeleteNetwork(ctx context.Context, id string) error {
	op := fmt.Sprintf("delete network %q", id)
	return d.write(ctx, op, func(tx pgx.Tx) error {
		var exists, queued int
		if err := tx.QueryRow(ctx, `SELECT
			(SELECT COUNT(*) FROM networks WHERE id = $1),
			(SELECT COUNT(*) FROM blocks WHERE network_id = $1 AND state = 'queued')`, id).Scan(&exists, &queued); err != nil {
			return err
		}
		if exists == 0 {
			return ErrNotFound
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks belong to it: %w", queued, ErrConflict)
		}
		_, err := tx.Exec(ctx, `DELETE FROM networks WHERE id = $1`, id)
		return err
	})
}
