package store

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
)

// The PostgreSQL implementation of every record method. Each one keeps the
// contract documented on its SQLite twin (sites.go, targets.go, ...); the
// conformance suite checks both.

// ---- sites ----

func (d *pgDB) CreateSite(ctx context.Context, s Site) (Site, error) {
	op := fmt.Sprintf("create site %q", s.ID)
	if err := checkSite(s); err != nil {
		return Site{}, pgMapErr(ctx, op, err)
	}
	now := d.now()
	s.CreatedAt, s.UpdatedAt, s.Revision = now, now, 1
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		_, err := tx.Exec(ctx, `INSERT INTO sites (`+siteCols+`) VALUES ($1, $2, $3, $4, $5, $6)`,
			s.ID, s.Name, blob(s.Spec), now.UnixNano(), now.UnixNano(), s.Revision)
		return err
	})
	if err != nil {
		return Site{}, err
	}
	return s, nil
}

func (d *pgDB) GetSite(ctx context.Context, id string) (Site, error) {
	s, err := scanSite(d.pool.QueryRow(ctx, `SELECT `+siteCols+` FROM sites WHERE id = $1`, id))
	if err != nil {
		return Site{}, pgMapErr(ctx, fmt.Sprintf("get site %q", id), err)
	}
	return s, nil
}

func (d *pgDB) ListSites(ctx context.Context, p Page) ([]Site, string, error) {
	const op, scope = "list sites", "sites"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+siteCols+` FROM sites
		WHERE (created_at, id) > ($1, $2) ORDER BY created_at, id LIMIT $3`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanSite, func(s Site) cursor { return cursor{s.CreatedAt.UnixNano(), s.ID} })
	return out, next, pgMapErr(ctx, op, err)
}

func (d *pgDB) UpdateSite(ctx context.Context, s Site) (Site, error) {
	op := fmt.Sprintf("update site %q", s.ID)
	if err := checkSite(s); err != nil {
		return Site{}, pgMapErr(ctx, op, err)
	}
	var out Site
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		cur, err := scanSite(tx.QueryRow(ctx, `SELECT `+siteCols+` FROM sites WHERE id = $1 FOR UPDATE`, s.ID))
		if err != nil {
			return err
		}
		if cur.Revision != s.Revision {
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, s.Revision, ErrConflict)
		}
		now := d.now()
		out = Site{ID: s.ID, Name: s.Name, Spec: s.Spec, CreatedAt: cur.CreatedAt, UpdatedAt: now, Revision: cur.Revision + 1}
		_, err = tx.Exec(ctx, `UPDATE sites SET name = $1, spec = $2, updated_at = $3, revision = $4 WHERE id = $5`,
			out.Name, blob(out.Spec), now.UnixNano(), out.Revision, out.ID)
		return err
	})
	if err != nil {
		return Site{}, err
	}
	return out, nil
}

func (d *pgDB) DeleteSite(ctx context.Context, id string) error {
	op := fmt.Sprintf("delete site %q", id)
	return d.write(ctx, op, func(tx pgx.Tx) error {
		// The row lock makes a concurrent CreateBlocks for this site wait
		// (its foreign key check locks the row too) and then fail.
		var one int
		if err := tx.QueryRow(ctx, `SELECT 1 FROM sites WHERE id = $1 FOR UPDATE`, id).Scan(&one); err != nil {
			return err
		}
		var queued int
		if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM blocks WHERE site_id = $1 AND state = 'queued'`, id).Scan(&queued); err != nil {
			return err
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks use it: %w", queued, ErrConflict)
		}
		_, err := tx.Exec(ctx, `DELETE FROM sites WHERE id = $1`, id)
		return err
	})
}

// ---- targets ----

func (d *pgDB) CreateTarget(ctx context.Context, t Target) (Target, error) {
	op := fmt.Sprintf("create target %q", t.ID)
	if err := checkTarget(t); err != nil {
		return Target{}, pgMapErr(ctx, op, err)
	}
	now := d.now()
	t.CreatedAt, t.UpdatedAt, t.Revision = now, now, 1
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		_, err := tx.Exec(ctx, `INSERT INTO targets (`+targetCols+`) VALUES ($1, $2, $3, $4, $5, $6, $7)`,
			t.ID, t.Name, t.Kind, blob(t.Spec), now.UnixNano(), now.UnixNano(), t.Revision)
		return err
	})
	if err != nil {
		return Target{}, err
	}
	return t, nil
}

func (d *pgDB) GetTarget(ctx context.Context, id string) (Target, error) {
	t, err := scanTarget(d.pool.QueryRow(ctx, `SELECT `+targetCols+` FROM targets WHERE id = $1`, id))
	if err != nil {
		return Target{}, pgMapErr(ctx, fmt.Sprintf("get target %q", id), err)
	}
	return t, nil
}

func (d *pgDB) ListTargets(ctx context.Context, p Page) ([]Target, string, error) {
	const op, scope = "list targets", "targets"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+targetCols+` FROM targets
		WHERE (created_at, id) > ($1, $2) ORDER BY created_at, id LIMIT $3`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanTarget, func(t Target) cursor { return cursor{t.CreatedAt.UnixNano(), t.ID} })
	return out, next, pgMapErr(ctx, op, err)
}

func (d *pgDB) UpdateTarget(ctx context.Context, t Target) (Target, error) {
	op := fmt.Sprintf("update target %q", t.ID)
	if err := checkTarget(t); err != nil {
		return Target{}, pgMapErr(ctx, op, err)
	}
	var out Target
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		cur, err := scanTarget(tx.QueryRow(ctx, `SELECT `+targetCols+` FROM targets WHERE id = $1 FOR UPDATE`, t.ID))
		if err != nil {
			return err
		}
		if cur.Revision != t.Revision {
			return fmt.Errorf("stored revision is %d, update is based on %d: %w", cur.Revision, t.Revision, ErrConflict)
		}
		now := d.now()
		out = Target{ID: t.ID, Name: t.Name, Kind: t.Kind, Spec: t.Spec, CreatedAt: cur.CreatedAt, UpdatedAt: now, Revision: cur.Revision + 1}
		_, err = tx.Exec(ctx, `UPDATE targets SET name = $1, kind = $2, spec = $3, updated_at = $4, revision = $5 WHERE id = $6`,
			out.Name, out.Kind, blob(out.Spec), now.UnixNano(), out.Revision, out.ID)
		return err
	})
	if err != nil {
		return Target{}, err
	}
	return out, nil
}

func (d *pgDB) DeleteTarget(ctx context.Context, id string) error {
	op := fmt.Sprintf("delete target %q", id)
	return d.write(ctx, op, func(tx pgx.Tx) error {
		var one int
		if err := tx.QueryRow(ctx, `SELECT 1 FROM targets WHERE id = $1 FOR UPDATE`, id).Scan(&one); err != nil {
			return err
		}
		var queued int
		if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM blocks WHERE target_id = $1 AND state = 'queued'`, id).Scan(&queued); err != nil {
			return err
		}
		if queued > 0 {
			return fmt.Errorf("%d queued blocks use it: %w", queued, ErrConflict)
		}
		_, err := tx.Exec(ctx, `DELETE FROM targets WHERE id = $1`, id)
		return err
	})
}

// ---- blocks ----

func (d *pgDB) CreateBlocks(ctx context.Context, blocks []Block) ([]Block, error) {
	const op = "create blocks"
	seen := make(map[string]bool, len(blocks))
	for _, b := range blocks {
		if err := checkNewBlock(b); err != nil {
			return nil, pgMapErr(ctx, op, fmt.Errorf("block %q: %w", b.ID, err))
		}
		if seen[b.ID] {
			return nil, pgMapErr(ctx, op, fmt.Errorf("block %q appears twice in the batch: %w", b.ID, ErrAlreadyExists))
		}
		seen[b.ID] = true
	}
	if len(blocks) == 0 {
		return nil, nil
	}
	now := d.now()
	out := make([]Block, len(blocks))
	for i, b := range blocks {
		t := now.Add(time.Duration(i))
		b.State, b.FramesDone, b.CreatedAt, b.UpdatedAt, b.Revision = StateQueued, 0, t, t, 1
		out[i] = b
	}
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		sites := map[string]bool{}
		targets := map[string]bool{}
		programs := map[string]bool{}
		networks := map[string]bool{}
		exists := func(table, id string, cache map[string]bool) (bool, error) {
			if ok, hit := cache[id]; hit {
				return ok, nil
			}
			key := "id"
			if table == "programs" {
				key = "name"
			}
			var n int
			if err := tx.QueryRow(ctx, `SELECT COUNT(*) FROM `+table+` WHERE `+key+` = $1`, id).Scan(&n); err != nil {
				return false, err
			}
			cache[id] = n > 0
			return n > 0, nil
		}
		for _, b := range out {
			ok, err := exists("sites", b.SiteID, sites)
			if err != nil {
				return err
			}
			if !ok {
				return fmt.Errorf("block %q: site %q: %w", b.ID, b.SiteID, ErrNotFound)
			}
			if ok, err = exists("targets", b.TargetID, targets); err != nil {
				return err
			}
			if !ok {
				return fmt.Errorf("block %q: target %q: %w", b.ID, b.TargetID, ErrNotFound)
			}
			if b.Program != "" {
				if ok, err = exists("programs", b.Program, programs); err != nil {
					return err
				}
				if !ok {
					return fmt.Errorf("block %q: program %q: %w", b.ID, b.Program, ErrNotFound)
				}
			}
			if b.NetworkID != "" {
				if ok, err = exists("networks", b.NetworkID, networks); err != nil {
					return err
				}
				if !ok {
					return fmt.Errorf("block %q: network %q: %w", b.ID, b.NetworkID, ErrNotFound)
				}
			}
		}
		// One round trip for the whole batch; the first failing row names
		// its block.
		batch := &pgx.Batch{}
		for _, b := range out {
			batch.Queue(`INSERT INTO blocks (`+blockCols+`) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)`,
				blockRow(b)...)
		}
		res := tx.SendBatch(ctx, batch)
		for _, b := range out {
			if _, err := res.Exec(); err != nil {
				_ = res.Close()
				return pgMapErr(ctx, fmt.Sprintf("block %q", b.ID), err)
			}
		}
		return res.Close()
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

func (d *pgDB) GetBlock(ctx context.Context, id string) (Block, error) {
	b, err := scanBlock(d.pool.QueryRow(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = $1`, id))
	if err != nil {
		return Block{}, pgMapErr(ctx, fmt.Sprintf("get block %q", id), err)
	}
	return b, nil
}

func (d *pgDB) ListBlocks(ctx context.Context, f BlockFilter, p Page) ([]Block, string, error) {
	const op = "list blocks"
	if f.State != "" && !validState(f.State) {
		return nil, "", pgMapErr(ctx, op, invalidf("state %q is unknown", f.State))
	}
	scope := f.scope()
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	where, args := "", []any{}
	for _, cond := range f.conds() {
		if cond.val != "" {
			args = append(args, cond.val)
			where += cond.col + " = $" + strconv.Itoa(len(args)) + " AND "
		}
	}
	n := len(args)
	rows, err := d.pool.Query(ctx, `SELECT `+blockCols+` FROM blocks
		WHERE `+where+`(created_at, id) > ($`+strconv.Itoa(n+1)+`, $`+strconv.Itoa(n+2)+`) ORDER BY created_at, id LIMIT $`+strconv.Itoa(n+3),
		append(args, c.key, c.id, size+1)...)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanBlock, func(b Block) cursor { return cursor{b.CreatedAt.UnixNano(), b.ID} })
	return out, next, pgMapErr(ctx, op, err)
}

func (d *pgDB) WithdrawBlock(ctx context.Context, id string) (Block, error) {
	op := fmt.Sprintf("withdraw block %q", id)
	var out Block
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		b, err := scanBlock(tx.QueryRow(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = $1 FOR UPDATE`, id))
		if err != nil {
			return err
		}
		switch b.State {
		case StateWithdrawn:
			out = b
			return nil
		case StateCompleted:
			return fmt.Errorf("block is completed: %w", ErrConflict)
		}
		now := d.now()
		b.State, b.UpdatedAt, b.Revision = StateWithdrawn, now, b.Revision+1
		if _, err := tx.Exec(ctx, `UPDATE blocks SET state = $1, updated_at = $2, revision = $3 WHERE id = $4`,
			b.State, now.UnixNano(), b.Revision, b.ID); err != nil {
			return err
		}
		out = b
		return nil
	})
	if err != nil {
		return Block{}, err
	}
	return out, nil
}

func (d *pgDB) QueueSize(ctx context.Context, siteID string) (int, error) {
	op := fmt.Sprintf("queue size of site %q", siteID)
	var n int
	if siteID == "" {
		err := d.pool.QueryRow(ctx, `SELECT COUNT(*) FROM blocks WHERE state = 'queued'`).Scan(&n)
		return n, pgMapErr(ctx, op, err)
	}
	var sites int
	err := d.pool.QueryRow(ctx, `SELECT
		(SELECT COUNT(*) FROM sites WHERE id = $1),
		(SELECT COUNT(*) FROM blocks WHERE site_id = $1 AND state = 'queued')`, siteID).Scan(&sites, &n)
	if err != nil {
		return 0, pgMapErr(ctx, op, err)
	}
	if sites == 0 {
		return 0, pgMapErr(ctx, op, ErrNotFound)
	}
	return n, nil
}

// ---- progress ----

// ReportProgress: see the SQLite implementation. Here the block's row lock
// orders reports of one block; the report id is looked up again under that
// lock, so that two replicas receiving the same retried report count it
// once. A report id taken at the same moment by a report of another block
// makes the insert fail (unique violation); the transaction then runs once
// more and finds the stored report.
func (d *pgDB) ReportProgress(ctx context.Context, r ProgressReport) (Block, bool, error) {
	op := fmt.Sprintf("report progress %q for block %q", r.ReportID, r.BlockID)
	start, end, err := checkReport(r)
	if err != nil {
		return Block{}, false, pgMapErr(ctx, op, err)
	}
	var (
		out       Block
		duplicate bool
	)
	attempt := func(tx pgx.Tx) error {
		duplicate = false
		lookup := func() (bool, error) {
			prev, err := scanReport(tx.QueryRow(ctx, `SELECT `+reportCols+` FROM progress_reports WHERE report_id = $1`, r.ReportID))
			switch {
			case errors.Is(err, pgx.ErrNoRows):
				return false, nil
			case err != nil:
				return false, err
			}
			if prev.BlockID != r.BlockID || prev.FramesKept != r.FramesKept || prev.Start.UnixNano() != start ||
				prev.End.UnixNano() != end || prev.Outcome != r.Outcome {
				return false, fmt.Errorf("report id was used for another report (block %q, %d frames, %s to %s, outcome %q): %w",
					prev.BlockID, prev.FramesKept, prev.Start.Format(time.RFC3339Nano), prev.End.Format(time.RFC3339Nano),
					prev.Outcome, ErrConflict)
			}
			duplicate = true
			out, err = scanBlock(tx.QueryRow(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = $1`, r.BlockID))
			return true, err
		}
		if done, err := lookup(); done || err != nil {
			return err
		}
		b, err := scanBlock(tx.QueryRow(ctx, `SELECT `+blockCols+` FROM blocks WHERE id = $1 FOR UPDATE`, r.BlockID))
		if errors.Is(err, pgx.ErrNoRows) {
			return fmt.Errorf("block: %w", ErrNotFound)
		}
		if err != nil {
			return err
		}
		// Under the block's lock: a concurrent twin of this report has
		// committed or not at all.
		if done, err := lookup(); done || err != nil {
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
			if _, err := tx.Exec(ctx, `UPDATE blocks SET frames_done = $1, state = $2, updated_at = $3, revision = $4 WHERE id = $5`,
				b.FramesDone, b.State, now.UnixNano(), b.Revision, b.ID); err != nil {
				return err
			}
		}
		if _, err := tx.Exec(ctx, `INSERT INTO progress_reports (`+reportCols+`)
			VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9)`,
			r.ReportID, r.BlockID, r.FramesKept, applied, start, end, r.Outcome, now.UnixNano(), nullable(r.SiteID)); err != nil {
			return err
		}
		if b.Program != "" {
			exp, over := r.charge()
			if _, err := tx.Exec(ctx, `INSERT INTO program_charges (`+chargeCols+`) VALUES ($1, $2, $3, $4, $5, $6)`,
				r.ReportID, b.Program, b.ID, start, exp.Nanoseconds(), over.Nanoseconds()); err != nil {
				return err
			}
		}
		out = b
		return nil
	}
	err = d.write(ctx, op, attempt)
	if errors.Is(err, ErrAlreadyExists) {
		err = d.write(ctx, op, attempt)
	}
	if err != nil {
		return Block{}, false, err
	}
	return out, duplicate, nil
}

func (d *pgDB) GetProgressReport(ctx context.Context, reportID string) (ProgressReport, error) {
	r, err := scanReport(d.pool.QueryRow(ctx, `SELECT `+reportCols+` FROM progress_reports WHERE report_id = $1`, reportID))
	if err != nil {
		return ProgressReport{}, pgMapErr(ctx, fmt.Sprintf("get progress report %q", reportID), err)
	}
	return r, nil
}

func (d *pgDB) ListProgressReports(ctx context.Context, blockID string, p Page) ([]ProgressReport, string, error) {
	op := fmt.Sprintf("list progress reports of block %q", blockID)
	scope := "progress\x00" + blockID
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+reportCols+` FROM progress_reports
		WHERE block_id = $1 AND (received_at, report_id) > ($2, $3) ORDER BY received_at, report_id LIMIT $4`,
		blockID, c.key, c.id, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanReport, func(r ProgressReport) cursor {
		return cursor{r.ReceivedAt.UnixNano(), r.ReportID}
	})
	return out, next, pgMapErr(ctx, op, err)
}

// ---- plans ----

// planChannel is the NOTIFY channel on which a stored plan version is
// announced to every replica; the payload is "<version> <site id>".
const planChannel = "nightloom_plan_versions"

// CreatePlan: see the SQLite implementation. The site's row lock (FOR NO KEY
// UPDATE, which does not block blocks referring to the site) orders the
// versions of one site across every replica; the NOTIFY in the same
// transaction is delivered to listeners at commit, in commit order, which is
// version order.
func (d *pgDB) CreatePlan(ctx context.Context, p Plan) (Plan, error) {
	ps, err := d.CreatePlans(ctx, []Plan{p})
	if err != nil {
		return Plan{}, err
	}
	return ps[0], nil
}

func (d *pgDB) CreatePlans(ctx context.Context, ps []Plan) ([]Plan, error) {
	out, spans, err := checkPlans(ps)
	op := plansOp(out)
	if err != nil {
		return nil, pgMapErr(ctx, op, err)
	}
	err = d.write(ctx, op, func(tx pgx.Tx) error {
		for i := range out {
			p := &out[i]
			var one int
			err := tx.QueryRow(ctx, `SELECT 1 FROM sites WHERE id = $1 FOR NO KEY UPDATE`, p.SiteID).Scan(&one)
			if errors.Is(err, pgx.ErrNoRows) {
				return fmt.Errorf("site %q: %w", p.SiteID, ErrNotFound)
			}
			if err != nil {
				return err
			}
			var last int64
			if err := tx.QueryRow(ctx, `SELECT COALESCE(MAX(version), 0) FROM plans WHERE site_id = $1`, p.SiteID).Scan(&last); err != nil {
				return err
			}
			p.Version, p.CreatedAt = last+1, d.now()
			if _, err := tx.Exec(ctx, `INSERT INTO plans (`+planCols+`) VALUES ($1, $2, $3, $4, $5, $6, $7)`,
				p.ID, p.SiteID, p.Version, spans[i][0], spans[i][1], blob(p.Body), p.CreatedAt.UnixNano()); err != nil {
				return err
			}
			if _, err := tx.Exec(ctx, `SELECT pg_notify($1, $2)`, planChannel, strconv.FormatInt(p.Version, 10)+" "+p.SiteID); err != nil {
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

func (d *pgDB) GetPlan(ctx context.Context, id string) (Plan, error) {
	p, err := scanPlan(d.pool.QueryRow(ctx, `SELECT `+planCols+` FROM plans WHERE id = $1`, id))
	if err != nil {
		return Plan{}, pgMapErr(ctx, fmt.Sprintf("get plan %q", id), err)
	}
	return p, nil
}

func (d *pgDB) PlanByVersion(ctx context.Context, siteID string, v int64) (Plan, error) {
	p, err := scanPlan(d.pool.QueryRow(ctx, `SELECT `+planCols+` FROM plans WHERE site_id = $1 AND version = $2`, siteID, v))
	if err != nil {
		return Plan{}, pgMapErr(ctx, fmt.Sprintf("get plan version %d of site %q", v, siteID), err)
	}
	return p, nil
}

func (d *pgDB) LatestPlan(ctx context.Context, siteID string) (Plan, error) {
	p, err := scanPlan(d.pool.QueryRow(ctx, `SELECT `+planCols+` FROM plans WHERE site_id = $1 ORDER BY version DESC LIMIT 1`, siteID))
	if err != nil {
		return Plan{}, pgMapErr(ctx, fmt.Sprintf("latest plan of site %q", siteID), err)
	}
	return p, nil
}

func (d *pgDB) ListPlans(ctx context.Context, siteID string, p Page) ([]Plan, string, error) {
	op := fmt.Sprintf("list plans of site %q", siteID)
	scope := "plans\x00" + siteID
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+planCols+` FROM plans
		WHERE site_id = $1 AND version > $2 ORDER BY version LIMIT $3`, siteID, c.key, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanPlan, func(p Plan) cursor { return cursor{p.Version, p.ID} })
	return out, next, pgMapErr(ctx, op, err)
}

// ---- tokens ----

func (d *pgDB) CreateToken(ctx context.Context, t Token) (Token, error) {
	op := fmt.Sprintf("create token %q", t.ID)
	if err := checkToken(t); err != nil {
		return Token{}, pgMapErr(ctx, op, err)
	}
	t.Hash = append([]byte(nil), t.Hash...)
	t.CreatedAt, t.RevokedAt = d.now(), nil
	var expires *int64
	if t.ExpiresAt != nil {
		if !t.ExpiresAt.After(t.CreatedAt) {
			return Token{}, pgMapErr(ctx, op, invalidf("token expires at %s, not after its creation", t.ExpiresAt.UTC().Format(time.RFC3339)))
		}
		e := decTime(t.ExpiresAt.UnixNano())
		t.ExpiresAt = &e
		n := e.UnixNano()
		expires = &n
	}
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		_, err := tx.Exec(ctx, `INSERT INTO tokens (`+tokenCols+`) VALUES ($1, $2, $3, $4, $5, NULL, $6, $7)`,
			t.ID, t.Hash, t.Role, t.Label, t.CreatedAt.UnixNano(), expires, t.SiteID)
		return err
	})
	if err != nil {
		return Token{}, err
	}
	return t, nil
}

func (d *pgDB) GetToken(ctx context.Context, id string) (Token, error) {
	t, err := scanToken(d.pool.QueryRow(ctx, `SELECT `+tokenCols+` FROM tokens WHERE id = $1`, id))
	if err != nil {
		return Token{}, pgMapErr(ctx, fmt.Sprintf("get token %q", id), err)
	}
	return t, nil
}

func (d *pgDB) TokenByHash(ctx context.Context, hash []byte) (Token, error) {
	t, err := scanToken(d.pool.QueryRow(ctx, `SELECT `+tokenCols+` FROM tokens
		WHERE hash = $1 AND revoked_at IS NULL AND (expires_at IS NULL OR expires_at > $2)`, hash, d.now().UnixNano()))
	if err != nil {
		return Token{}, pgMapErr(ctx, "token by hash", err)
	}
	return t, nil
}

func (d *pgDB) ListTokens(ctx context.Context, p Page) ([]Token, string, error) {
	const op, scope = "list tokens", "tokens"
	c, size, err := p.start(scope)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	rows, err := d.pool.Query(ctx, `SELECT `+tokenCols+` FROM tokens
		WHERE (created_at, id) > ($1, $2) ORDER BY created_at, id LIMIT $3`, c.key, c.id, size+1)
	if err != nil {
		return nil, "", pgMapErr(ctx, op, err)
	}
	out, next, err := collectPG(rows, size, scope, scanToken, func(t Token) cursor { return cursor{t.CreatedAt.UnixNano(), t.ID} })
	return out, next, pgMapErr(ctx, op, err)
}

// RevokeToken: see the SQLite implementation. The server caches no token, so
// the revoked token's next call fails on every daemon without a notification.
func (d *pgDB) RevokeToken(ctx context.Context, id string) (Token, error) {
	op := fmt.Sprintf("revoke token %q", id)
	var out Token
	err := d.write(ctx, op, func(tx pgx.Tx) error {
		t, err := scanToken(tx.QueryRow(ctx, `SELECT `+tokenCols+` FROM tokens WHERE id = $1 FOR UPDATE`, id))
		if err != nil {
			return err
		}
		if t.RevokedAt == nil {
			now := d.now()
			if _, err := tx.Exec(ctx, `UPDATE tokens SET revoked_at = $1 WHERE id = $2`, now.UnixNano(), id); err != nil {
				return err
			}
			t.RevokedAt = &now
		}
		out = t
		return nil
	})
	if err != nil {
		return Token{}, err
	}
	return out, nil
}

// ---- integrity ----

// IntegrityCheck checks the store's own invariants on one snapshot, as the
// SQLite implementation does: frames done equal to the sum of frames applied
// and never above frames wanted, states matching frames, plan versions 1..n
// per site. PostgreSQL enforces foreign keys itself and has no equivalent of
// PRAGMA integrity_check in core (amcheck is an extension), so those two
// checks are left to the server.
func (d *pgDB) IntegrityCheck(ctx context.Context) error {
	const op = "integrity check"
	var problems []string
	err := d.read(ctx, op, func(tx pgx.Tx) error {
		checks := []struct{ what, query string }{
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
			rows, err := tx.Query(ctx, c.query)
			if err != nil {
				return fmt.Errorf("%s: %w", c.what, err)
			}
			ss, err := pgx.CollectRows(rows, pgx.RowTo[string])
			if err != nil {
				return fmt.Errorf("%s: %w", c.what, err)
			}
			for _, s := range ss {
				problems = append(problems, c.what+": "+s)
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
