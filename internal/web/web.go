// Package web serves nightloom's read-only web pages: the sites, a site's
// night (chart, plan, progress, next run, closures, unplaced blocks, Sun and
// Moon events, version history) and a block's runs and visibility, live over
// Server-Sent Events.
//
// It is built on the standard library only: http.ServeMux patterns with
// methods and wildcards, html/template, templates and assets embedded with
// go:embed, no front-end build step. Nothing here can change the queue or
// the plans: every route is GET, except the sign-in and sign-out forms
// (POST, CSRF-checked), which touch only the in-memory sessions.
//
// Files: web.go (the handler, its dependencies and routes), auth.go
// (sign-in, sessions, CSRF), pages.go (loading and shaping what a page
// shows), live.go (Server-Sent Events and the progress notifier),
// templates/ and static/ (embedded).
package web

import (
	"context"
	"embed"
	"errors"
	"html/template"
	"io/fs"
	"log/slog"
	"net/http"
	"sync"
	"time"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

//go:embed templates/*.html
var templateFS embed.FS

//go:embed static
var staticFS embed.FS

// Store is the read-only part of the daemon's storage the pages use
// (*store.DB and server.Storage satisfy it).
type Store interface {
	GetSite(ctx context.Context, id string) (store.Site, error)
	ListSites(ctx context.Context, p store.Page) ([]store.Site, string, error)
	GetTarget(ctx context.Context, id string) (store.Target, error)
	GetBlock(ctx context.Context, id string) (store.Block, error)
	ListBlocks(ctx context.Context, f store.BlockFilter, p store.Page) ([]store.Block, string, error)
	GetPlan(ctx context.Context, id string) (store.Plan, error)
	PlanByVersion(ctx context.Context, siteID string, v int64) (store.Plan, error)
	LatestPlan(ctx context.Context, siteID string) (store.Plan, error)
	TokenByHash(ctx context.Context, hash []byte) (store.Token, error)
}

// Sky computes a night's events and a block's visibility
// (server.Server.Sky, the SkyService implementation, called in-process).
type Sky interface {
	Night(ctx context.Context, req *nightloomv1.NightRequest) (*nightloomv1.NightResponse, error)
	Visibility(ctx context.Context, req *nightloomv1.VisibilityRequest) (*nightloomv1.VisibilityResponse, error)
}

// PlanFeed follows a site's new plan versions (server.Server.SubscribePlans,
// the hub that feeds WatchPlans).
type PlanFeed interface {
	SubscribePlans(siteID string) (versions <-chan *nightloomv1.Plan, ended <-chan struct{}, cancel func(), err error)
}

// Defaults of Config.
const (
	DefaultSessionTTL   = 12 * time.Hour
	DefaultSessionCheck = 5 * time.Second
	// maxPlanScan bounds the plan versions a page walks through, newest
	// first, looking for the plans of a night.
	maxPlanScan = 500
)

// Config is what the pages need.
type Config struct {
	Store    Store
	Sky      Sky
	Plans    PlanFeed
	Progress *Notifier // may be nil: progress then shows on the next plan version or reload
	// PublicSite is a site whose night pages need no sign-in ("" for none).
	PublicSite string
	// Secure marks the cookies Secure (the listener speaks TLS).
	Secure bool
	// SessionTTL is how long a sign-in lasts. Default DefaultSessionTTL.
	SessionTTL time.Duration
	// SessionCheck is how often an open live page re-checks its session
	// (expiry, revoked token). Default DefaultSessionCheck.
	SessionCheck time.Duration
	// Metrics, when set, is served at /metrics.
	Metrics http.Handler
	// Now is the clock. Default time.Now.
	Now    func() time.Time
	Logger *slog.Logger
}

// Handler serves the pages. Make it with New; Close it before shutting the
// HTTP server down so that live streams end.
type Handler struct {
	cfg      Config
	log      *slog.Logger
	now      func() time.Time
	tmpl     map[string]*template.Template
	mux      *http.ServeMux
	sessions *sessions
	done     chan struct{}
	doneOnce sync.Once
}

// New builds the handler.
func New(cfg Config) (*Handler, error) {
	if cfg.Store == nil || cfg.Sky == nil || cfg.Plans == nil {
		return nil, errors.New("web: Store, Sky and Plans are required")
	}
	if cfg.SessionTTL <= 0 {
		cfg.SessionTTL = DefaultSessionTTL
	}
	if cfg.SessionCheck <= 0 {
		cfg.SessionCheck = DefaultSessionCheck
	}
	if cfg.Now == nil {
		cfg.Now = time.Now
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.DiscardHandler)
	}
	h := &Handler{cfg: cfg, log: cfg.Logger, now: cfg.Now, mux: http.NewServeMux(),
		sessions: newSessions(), done: make(chan struct{})}
	var err error
	if h.tmpl, err = parseTemplates(); err != nil {
		return nil, err
	}
	static, err := fs.Sub(staticFS, "static")
	if err != nil {
		return nil, err
	}
	m := h.mux
	m.HandleFunc("GET /healthz", func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		_, _ = w.Write([]byte("ok\n"))
	})
	if cfg.Metrics != nil {
		m.Handle("GET /metrics", cfg.Metrics)
	}
	m.Handle("GET /static/", http.StripPrefix("/static/", http.FileServerFS(static)))
	m.HandleFunc("GET /signin", h.signInForm)
	m.HandleFunc("POST /signin", h.signIn)
	m.HandleFunc("POST /signout", h.signOut)
	m.HandleFunc("GET /{$}", h.auth(h.sitesPage))
	m.HandleFunc("GET /sites/{site}", h.authSite(h.nightPage))
	m.HandleFunc("GET /sites/{site}/events", h.authSite(h.events))
	m.HandleFunc("GET /blocks/{block}", h.auth(h.blockPage))
	return h, nil
}

// ServeHTTP sets the security headers and routes.
func (h *Handler) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	hd := w.Header()
	// No inline scripts; inline styles only for the chart's SVG attributes.
	hd.Set("Content-Security-Policy", "default-src 'none'; script-src 'self'; style-src 'self' 'unsafe-inline'; "+
		"img-src 'self' data:; connect-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'")
	hd.Set("X-Content-Type-Options", "nosniff")
	// same-origin, not no-referrer: with no-referrer browsers send
	// "Origin: null" on the forms, which the CSRF check refuses.
	hd.Set("Referrer-Policy", "same-origin")
	hd.Set("X-Frame-Options", "DENY")
	if h.cfg.Secure || r.TLS != nil {
		hd.Set("Strict-Transport-Security", "max-age=31536000")
	}
	h.mux.ServeHTTP(w, r)
}

// Close ends the live streams (call before http.Server.Shutdown, which
// does not cancel requests in flight).
func (h *Handler) Close() {
	h.doneOnce.Do(func() { close(h.done) })
}
