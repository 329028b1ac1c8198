package store

import (
	"context"
	"database/sql"
	"fmt"
	"slices"
	"time"
)

// Plan is one version of a site's schedule over [Start, End]. Versions count
// 1, 2, 3, ... per site. Body is the server's encoding of the assignments,
// unplaced blocks and objective.
type Plan struct {
	ID, SiteID string
	Version    int64
	Start, End time.Time
	Body       []byte
	CreatedAt  time.Time
}

const planCols = `id, site_id, version, start_at, end_at, body, created_at`

func scanPlan(s scanner) (Plan, error) {
	var x Plan
	var start, end, created int64
	if err := s.Scan(&x.ID, &x.SiteID, &x.Version, &start, &end, &x.Body, &created); err != nil {
		return Plan{}, err
	}
	x.Start, x.End, x.CreatedAt = decTime(start), decTime(end), decTime(created)
	return x, nil
}

// CreatePlan stores a new plan version for p.SiteID. The store assigns the
// next version of that site (ignoring p.Version) and CreatedAt in the same
// transaction, so concurrent calls get distinct consecutive versions; it
// returns the stored plan. An unknown site is ErrNotFound, an existing plan id
// ErrAlreadyExists, an interval that is missing or ends before it starts
// ErrInvalid.
func (d *sqliteDB) CreatePlan(ctx context.Context, p Plan) (Plan, error) {
	ps, err := d.CreatePlans(ctx, []Plan{p})
	if err != nil {
		return Plan{}, err
	}
	return ps[0], nil
}

// CreatePlans stores several plan versions, of one site or several, in one
// transaction: all of them or, on any error, none (a network's members get
// their new versions together). Each is its site's next version in the
// order given; otherwise as CreatePlan.
func (d *sqliteDB) CreatePlans(ctx context.Context, ps []Plan) ([]Plan, error) {
	out, spans, err := checkPlans(ps)
	op := plansOp(out)
	if err != nil {
		return nil, mapErr(ctx, op, err)
	}
	err = d.write(ctx, op, func(tx *sql.Tx) error {
		for i := range out {
			p := &out[i]
			var sites int
			var last int64
			if err := tx.QueryRowContext(ctx, `SELECT
				(SELECT COUNT(*) FROM sites WHERE id = ?1),
				(SELECT COALESCE(MAX(version), 0) FROM plans WHERE site_id = ?1)`, p.SiteID).Scan(&sites, &last); err != nil {
				return err
			}
			if sites == 0 {
				return fmt.Errorf("site %q: %w", p.SiteID, ErrNotFound)
			}
			p.Version, p.CreatedAt = last+1, d.now()
			if _, err := tx.ExecContext(ctx, `INSERT INTO plans (`+planCols+`) VALUES (?, ?, ?, ?, ?, ?, ?)`,
				p.ID, p.SiteID, p.Version, spans[i][0], spans[i][1], blob(p.Body), p.CreatedAt.UnixNano()); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// checkPlans validates plans to store and encodes their intervals.
func checkPlans(ps []Plan) ([]Plan, [][2]int64, error) {
	out := slices.Clone(ps)
	spans := make([][2]int64, len(ps))
	if len(ps) == 0 {
		return out, spans, invalidf("no plan to store")
	}
	for i := range out {
		p := &out[i]
		var start, end int64
		var err error
		switch {
		case p.ID == "":
			err = invalidf("plan id is empty")
		case p.SiteID == "":
			err = invalidf("site id is empty")
		}
		if err == nil {
			start, err = encTime(p.Start, "start")
		}
		if err == nil {
			end, err = encTime(p.End, "end")
		}
		if err == nil && end < start {
			err = invalidf("end %s is before start %s", p.End.Format(time.RFC3339Nano), p.Start.Format(time.RFC3339Nano))
		}
		if err != nil {
			return out, spans, err
		}
		p.Start, p.End = decTime(start), decTime(end)
		spans[i] = [2]int64{start, end}
	}
	return out, spans, nil
}

// plansOp names a CreatePlans call in errors.
func plansOp(ps []Plan) string {
	if len(ps) == 1 {
		return fmt.Sprintf("create plan %q for site %q", ps[0].ID, ps[0].SiteID)
	}
	return fmt.Sprintf("create %d plans", len(ps))
}

// GetPlan returns the plan with that id, or ErrNotFound.
func (d *sqliteDB) GetPlan(ctx context.Context, id string) (Plan, error) {
	p, err := scanPlan(d.r.QueryRowContext(ctx, `SELECT `+planCols+` FROM plans WHERE id = ?`, id))
	if err != nil {
		return Plan{}, mapErr(ctx, fmt.Sprintf("get plan %q", id), err)
	}
	return p, nil
}

// PlanByVersion returns version v of a site's plan, or ErrNotFound.
func (d *sqliteDB) PlanByVersion(ctx context.Context, siteID string, v int64) (Plan, error) {
	p, err := scanPlan(d.r.QueryRowContext(ctx, `SELECT `+planCols+` FROM plans WHERE site_id = ? AND version = ?`, siteID, v))
	if err != nil {
		return Plan{}, mapErr(ctx, fmt.Sprintf("get plan version %d of site %q", v, siteID), err)
	}
	return p, nil
}

// LatestPlan returns the highest version of a site's plan; ErrNotFound when
// the site has no plan (or does not exist).
func (d *sqliteDB) LatestPlan(ctx context.Context, siteID string) (Plan, error) {
	p, err := scanPlan(d.r.QueryRowContext(ctx, `SELECT `+planCols+` FROM plans WHERE site_id = ? ORDER BY version DESC LIMIT 1`, siteID))
	if err != nil {
		return Plan{}, mapErr(ctx, fmt.Sprintf("latest plan of site %q", siteID), err)
	}
	return p, nil
}

// ListPlans returns one page of a site's plans by ascending version and the
// token of the next page. An unknown site has no plans.
func (d *sqliteDB) ListPlans(ctx context.Context, siteID string, p Page) ([]Plan, string, error) {
	op := fmt.Sprintf("list plans of site %q", siteID)
	scope := "plans\x00" + siteID
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	rows, err := d.r.QueryContext(ctx, `SELECT `+planCols+` FROM plans
		WHERE site_id = ? AND version > ? ORDER BY version LIMIT ?`, siteID, c.key, size+1)
	if err != nil {
		return nil, "", mapErr(ctx, op, err)
	}
	out, next, err := collect(rows, size, scope, scanPlan, func(p Plan) cursor { return cursor{p.Version, p.ID} })
	return out, next, mapErr(ctx, op, err)
}
