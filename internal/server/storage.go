package server

import (
	"context"
	"time"

	"github.com/nightloom/nightloom/internal/store"
)

// Storage is what the service needs from its persistence (STYLE.md: the
// service declares the storage interface it uses). *store.DB implements it;
// the tests run against the real SQLite store.
//
// Errors wrap the store's sentinels (store.ErrNotFound, ErrBusy, ...), which
// the error interceptor maps to status codes (errors.go).
type Storage interface {
	CreateSite(ctx context.Context, s store.Site) (store.Site, error)
	GetSite(ctx context.Context, id string) (store.Site, error)
	ListSites(ctx context.Context, p store.Page) ([]store.Site, string, error)
	UpdateSite(ctx context.Context, s store.Site) (store.Site, error)
	DeleteSite(ctx context.Context, id string) error

	CreateTarget(ctx context.Context, t store.Target) (store.Target, error)
	GetTarget(ctx context.Context, id string) (store.Target, error)
	ListTargets(ctx context.Context, p store.Page) ([]store.Target, string, error)
	UpdateTarget(ctx context.Context, t store.Target) (store.Target, error)
	DeleteTarget(ctx context.Context, id string) error
	ImportTargets(ctx context.Context, requestID string, fingerprint []byte, ts []store.Target) ([]store.Target, bool, error)
	AddMagnitudeObservations(ctx context.Context, obs []store.MagnitudeObservation) (int, error)
	MagnitudeObservations(ctx context.Context, targetID string, limit int) ([]store.MagnitudeObservation, error)
	CreateMagnitudeFit(ctx context.Context, f store.MagnitudeFit, target *store.Target) (store.MagnitudeFit, error)
	MagnitudeFits(ctx context.Context, targetID string) ([]store.MagnitudeFit, error)
	TargetIDsByName(ctx context.Context, name string) ([]string, error)

	CreateBlocks(ctx context.Context, blocks []store.Block) ([]store.Block, error)
	GetBlock(ctx context.Context, id string) (store.Block, error)
	ListBlocks(ctx context.Context, f store.BlockFilter, p store.Page) ([]store.Block, string, error)
	WithdrawBlock(ctx context.Context, id string) (store.Block, error)
	UpdateBlock(ctx context.Context, b store.Block, actor, fields string) (store.Block, error)
	WithdrawMatching(ctx context.Context, siteID, targetID, actor string, keep func(store.Block) bool) ([]store.Block, error)
	QueueSize(ctx context.Context, siteID string) (int, error)
	ReportProgress(ctx context.Context, r store.ProgressReport) (store.Block, bool, error)
	GetProgressReport(ctx context.Context, reportID string) (store.ProgressReport, error)
	ReportsEndingAfter(ctx context.Context, siteID string, t time.Time) ([]store.ProgressReport, error)

	CreatePlan(ctx context.Context, p store.Plan) (store.Plan, error)
	CreatePlans(ctx context.Context, ps []store.Plan) ([]store.Plan, error)
	GetPlan(ctx context.Context, id string) (store.Plan, error)
	PlanByVersion(ctx context.Context, siteID string, v int64) (store.Plan, error)
	LatestPlan(ctx context.Context, siteID string) (store.Plan, error)

	CreateProgram(ctx context.Context, p store.Program) (store.Program, error)
	GetProgram(ctx context.Context, name string) (store.Program, error)
	ListPrograms(ctx context.Context, p store.Page) ([]store.Program, string, error)
	UpdateProgram(ctx context.Context, p store.Program) (store.Program, error)
	DeleteProgram(ctx context.Context, name string) error
	ProgramCharges(ctx context.Context, program string, from, to time.Time) ([]store.Charge, error)
	CreateNetwork(ctx context.Context, n store.Network) (store.Network, error)
	GetNetwork(ctx context.Context, id string) (store.Network, error)
	ListNetworks(ctx context.Context, p store.Page) ([]store.Network, string, error)
	NetworksOfSite(ctx context.Context, siteID string) ([]string, error)
	DeleteNetwork(ctx context.Context, id string) error

	TokenStore
}

// TokenStore is the part of the storage that keeps bearer tokens; the
// daemon's `token` commands use it without the rest of the server.
type TokenStore interface {
	CreateToken(ctx context.Context, t store.Token) (store.Token, error)
	TokenByHash(ctx context.Context, hash []byte) (store.Token, error)
	ListTokens(ctx context.Context, p store.Page) ([]store.Token, string, error)
	RevokeToken(ctx context.Context, id string) (store.Token, error)
}

var _ Storage = (*store.DB)(nil)
