package store

import (
	"context"
	"time"
)

// Store is the store's behaviour, which both implementations share: SQLite
// (Open, the embedded default) and PostgreSQL (OpenPostgres, for several
// daemons on one database). The conformance suite (package storetest) is its
// single definition; every method's contract is documented on the SQLite
// implementation.
type Store interface {
	Close() error
	CreateBlocks(ctx context.Context, blocks []Block) ([]Block, error)
	CreatePlan(ctx context.Context, p Plan) (Plan, error)
	CreatePlans(ctx context.Context, ps []Plan) ([]Plan, error)
	CreateSite(ctx context.Context, s Site) (Site, error)
	CreateTarget(ctx context.Context, t Target) (Target, error)
	CreateToken(ctx context.Context, t Token) (Token, error)
	DeleteSite(ctx context.Context, id string) error
	DeleteTarget(ctx context.Context, id string) error
	GetBlock(ctx context.Context, id string) (Block, error)
	GetPlan(ctx context.Context, id string) (Plan, error)
	GetProgressReport(ctx context.Context, reportID string) (ProgressReport, error)
	GetSite(ctx context.Context, id string) (Site, error)
	GetTarget(ctx context.Context, id string) (Target, error)
	GetToken(ctx context.Context, id string) (Token, error)
	IntegrityCheck(ctx context.Context) error
	LatestPlan(ctx context.Context, siteID string) (Plan, error)
	ListBlocks(ctx context.Context, f BlockFilter, p Page) ([]Block, string, error)
	ListPlans(ctx context.Context, siteID string, p Page) ([]Plan, string, error)
	ListProgressReports(ctx context.Context, blockID string, p Page) ([]ProgressReport, string, error)
	ListSites(ctx context.Context, p Page) ([]Site, string, error)
	ListTargets(ctx context.Context, p Page) ([]Target, string, error)
	ListTokens(ctx context.Context, p Page) ([]Token, string, error)
	PlanByVersion(ctx context.Context, siteID string, v int64) (Plan, error)
	QueueSize(ctx context.Context, siteID string) (int, error)
	ReportProgress(ctx context.Context, r ProgressReport) (Block, bool, error)
	RevokeToken(ctx context.Context, id string) (Token, error)
	SchemaVersion(ctx context.Context) (int, error)
	TokenByHash(ctx context.Context, hash []byte) (Token, error)
	UpdateSite(ctx context.Context, s Site) (Site, error)
	UpdateTarget(ctx context.Context, t Target) (Target, error)
	WithdrawBlock(ctx context.Context, id string) (Block, error)
	ReportsEndingAfter(ctx context.Context, siteID string, t time.Time) ([]ProgressReport, error)
	ImportTargets(ctx context.Context, requestID string, fingerprint []byte, ts []Target) ([]Target, bool, error)
	AddMagnitudeObservations(ctx context.Context, obs []MagnitudeObservation) (int, error)
	MagnitudeObservations(ctx context.Context, targetID string, limit int) ([]MagnitudeObservation, error)
	CreateMagnitudeFit(ctx context.Context, f MagnitudeFit, target *Target) (MagnitudeFit, error)
	MagnitudeFits(ctx context.Context, targetID string) ([]MagnitudeFit, error)
	UpdateBlock(ctx context.Context, b Block, actor, fields string) (Block, error)
	WithdrawMatching(ctx context.Context, siteID, targetID, actor string, keep func(Block) bool) ([]Block, error)
	BlockEdits(ctx context.Context, blockID string) ([]BlockEdit, error)
	TargetIDsByName(ctx context.Context, name string) ([]string, error)
	CreateProgram(ctx context.Context, p Program) (Program, error)
	GetProgram(ctx context.Context, name string) (Program, error)
	ListPrograms(ctx context.Context, p Page) ([]Program, string, error)
	UpdateProgram(ctx context.Context, p Program) (Program, error)
	DeleteProgram(ctx context.Context, name string) error
	ProgramCharges(ctx context.Context, program string, from, to time.Time) ([]Charge, error)
	CreateNetwork(ctx context.Context, n Network) (Network, error)
	GetNetwork(ctx context.Context, id string) (Network, error)
	ListNetworks(ctx context.Context, p Page) ([]Network, string, error)
	NetworksOfSite(ctx context.Context, siteID string) ([]string, error)
	DeleteNetwork(ctx context.Context, id string) error
}

// DB is an open nightloom database, SQLite or PostgreSQL. Its methods are
// safe for concurrent use.
type DB struct {
	// sqliteDB holds the SQLite internals for this package's own tests; it
	// is nil for a PostgreSQL database.
	*sqliteDB
	impl Store
	// pg is the PostgreSQL implementation, nil for SQLite.
	pg *pgDB
}

var (
	_ Store = (*sqliteDB)(nil)
	_ Store = (*pgDB)(nil)
	_ Store = (*DB)(nil)
)

// Dialect names the database behind d: "sqlite" or "postgres".
func (d *DB) Dialect() string {
	if d.pg != nil {
		return "postgres"
	}
	return "sqlite"
}

func (d *DB) Close() error { return d.impl.Close() }

func (d *DB) CreateBlocks(ctx context.Context, blocks []Block) ([]Block, error) {
	return d.impl.CreateBlocks(ctx, blocks)
}

func (d *DB) CreatePlans(ctx context.Context, ps []Plan) ([]Plan, error) {
	return d.impl.CreatePlans(ctx, ps)
}

func (d *DB) CreatePlan(ctx context.Context, p Plan) (Plan, error) { return d.impl.CreatePlan(ctx, p) }

func (d *DB) CreateSite(ctx context.Context, s Site) (Site, error) { return d.impl.CreateSite(ctx, s) }

func (d *DB) CreateTarget(ctx context.Context, t Target) (Target, error) {
	return d.impl.CreateTarget(ctx, t)
}

func (d *DB) CreateToken(ctx context.Context, t Token) (Token, error) {
	return d.impl.CreateToken(ctx, t)
}

func (d *DB) DeleteSite(ctx context.Context, id string) error { return d.impl.DeleteSite(ctx, id) }

func (d *DB) DeleteTarget(ctx context.Context, id string) error { return d.impl.DeleteTarget(ctx, id) }

func (d *DB) GetBlock(ctx context.Context, id string) (Block, error) { return d.impl.GetBlock(ctx, id) }

func (d *DB) GetPlan(ctx context.Context, id string) (Plan, error) { return d.impl.GetPlan(ctx, id) }

func (d *DB) GetProgressReport(ctx context.Context, reportID string) (ProgressReport, error) {
	return d.impl.GetProgressReport(ctx, reportID)
}

func (d *DB) GetSite(ctx context.Context, id string) (Site, error) { return d.impl.GetSite(ctx, id) }

func (d *DB) GetTarget(ctx context.Context, id string) (Target, error) {
	return d.impl.GetTarget(ctx, id)
}

func (d *DB) GetToken(ctx context.Context, id string) (Token, error) { return d.impl.GetToken(ctx, id) }

func (d *DB) IntegrityCheck(ctx context.Context) error { return d.impl.IntegrityCheck(ctx) }

func (d *DB) LatestPlan(ctx context.Context, siteID string) (Plan, error) {
	return d.impl.LatestPlan(ctx, siteID)
}

func (d *DB) ListBlocks(ctx context.Context, f BlockFilter, p Page) ([]Block, string, error) {
	return d.impl.ListBlocks(ctx, f, p)
}

func (d *DB) ListPlans(ctx context.Context, siteID string, p Page) ([]Plan, string, error) {
	return d.impl.ListPlans(ctx, siteID, p)
}

func (d *DB) ListProgressReports(ctx context.Context, blockID string, p Page) ([]ProgressReport, string, error) {
	return d.impl.ListProgressReports(ctx, blockID, p)
}

func (d *DB) ListSites(ctx context.Context, p Page) ([]Site, string, error) {
	return d.impl.ListSites(ctx, p)
}

func (d *DB) ListTargets(ctx context.Context, p Page) ([]Target, string, error) {
	return d.impl.ListTargets(ctx, p)
}

func (d *DB) ListTokens(ctx context.Context, p Page) ([]Token, string, error) {
	return d.impl.ListTokens(ctx, p)
}

func (d *DB) PlanByVersion(ctx context.Context, siteID string, v int64) (Plan, error) {
	return d.impl.PlanByVersion(ctx, siteID, v)
}

func (d *DB) QueueSize(ctx context.Context, siteID string) (int, error) {
	return d.impl.QueueSize(ctx, siteID)
}

func (d *DB) ReportProgress(ctx context.Context, r ProgressReport) (Block, bool, error) {
	return d.impl.ReportProgress(ctx, r)
}

func (d *DB) RevokeToken(ctx context.Context, id string) (Token, error) {
	return d.impl.RevokeToken(ctx, id)
}

func (d *DB) SchemaVersion(ctx context.Context) (int, error) { return d.impl.SchemaVersion(ctx) }

func (d *DB) TokenByHash(ctx context.Context, hash []byte) (Token, error) {
	return d.impl.TokenByHash(ctx, hash)
}

func (d *DB) UpdateSite(ctx context.Context, s Site) (Site, error) { return d.impl.UpdateSite(ctx, s) }

func (d *DB) UpdateTarget(ctx context.Context, t Target) (Target, error) {
	return d.impl.UpdateTarget(ctx, t)
}

func (d *DB) WithdrawBlock(ctx context.Context, id string) (Block, error) {
	return d.impl.WithdrawBlock(ctx, id)
}

func (d *DB) ReportsEndingAfter(ctx context.Context, siteID string, t time.Time) ([]ProgressReport, error) {
	return d.impl.ReportsEndingAfter(ctx, siteID, t)
}

func (d *DB) ImportTargets(ctx context.Context, requestID string, fingerprint []byte, ts []Target) ([]Target, bool, error) {
	return d.impl.ImportTargets(ctx, requestID, fingerprint, ts)
}

func (d *DB) AddMagnitudeObservations(ctx context.Context, obs []MagnitudeObservation) (int, error) {
	return d.impl.AddMagnitudeObservations(ctx, obs)
}

func (d *DB) MagnitudeObservations(ctx context.Context, targetID string, limit int) ([]MagnitudeObservation, error) {
	return d.impl.MagnitudeObservations(ctx, targetID, limit)
}

func (d *DB) CreateMagnitudeFit(ctx context.Context, f MagnitudeFit, target *Target) (MagnitudeFit, error) {
	return d.impl.CreateMagnitudeFit(ctx, f, target)
}

func (d *DB) MagnitudeFits(ctx context.Context, targetID string) ([]MagnitudeFit, error) {
	return d.impl.MagnitudeFits(ctx, targetID)
}

func (d *DB) UpdateBlock(ctx context.Context, b Block, actor, fields string) (Block, error) {
	return d.impl.UpdateBlock(ctx, b, actor, fields)
}

func (d *DB) WithdrawMatching(ctx context.Context, siteID, targetID, actor string, keep func(Block) bool) ([]Block, error) {
	return d.impl.WithdrawMatching(ctx, siteID, targetID, actor, keep)
}

func (d *DB) BlockEdits(ctx context.Context, blockID string) ([]BlockEdit, error) {
	return d.impl.BlockEdits(ctx, blockID)
}

func (d *DB) TargetIDsByName(ctx context.Context, name string) ([]string, error) {
	return d.impl.TargetIDsByName(ctx, name)
}

func (d *DB) CreateProgram(ctx context.Context, p Program) (Program, error) {
	return d.impl.CreateProgram(ctx, p)
}

func (d *DB) GetProgram(ctx context.Context, name string) (Program, error) {
	return d.impl.GetProgram(ctx, name)
}

func (d *DB) ListPrograms(ctx context.Context, p Page) ([]Program, string, error) {
	return d.impl.ListPrograms(ctx, p)
}

func (d *DB) UpdateProgram(ctx context.Context, p Program) (Program, error) {
	return d.impl.UpdateProgram(ctx, p)
}

func (d *DB) DeleteProgram(ctx context.Context, name string) error {
	return d.impl.DeleteProgram(ctx, name)
}

func (d *DB) ProgramCharges(ctx context.Context, program string, from, to time.Time) ([]Charge, error) {
	return d.impl.ProgramCharges(ctx, program, from, to)

}

func (d *DB) CreateNetwork(ctx context.Context, n Network) (Network, error) {
	return d.impl.CreateNetwork(ctx, n)
}

func (d *DB) GetNetwork(ctx context.Context, id string) (Network, error) {
	return d.impl.GetNetwork(ctx, id)
}

func (d *DB) ListNetworks(ctx context.Context, p Page) ([]Network, string, error) {
	return d.impl.ListNetworks(ctx, p)
}

func (d *DB) NetworksOfSite(ctx context.Context, siteID string) ([]string, error) {
	return d.impl.NetworksOfSite(ctx, siteID)
}

func (d *DB) DeleteNetwork(ctx context.Context, id string) error {
	return d.impl.DeleteNetwork(ctx, id)
}
