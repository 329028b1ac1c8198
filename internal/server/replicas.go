package server

import (
	"context"
	"errors"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Several daemons on one database (issue 18). The service itself keeps no
// state that another daemon could make stale, except two things that this
// file extends across daemons when the storage says it is shared:
//
//   - the per-site lock (Server.siteLocks) that serialises storing plan
//     versions and the check-solve-store sequence of a replan: it also takes
//     the storage's cross-daemon planning lock for the site, which gives up
//     after PlanLockTimeout with store.ErrBusy (ABORTED: the caller retries);
//   - the watchers' hub: with shared storage a daemon does not publish the
//     versions it stores itself; every daemon publishes every version in the
//     order the storage announces them (commit order, which is version
//     order), so that a watcher on any daemon sees each version once and in
//     order whichever daemon stored it.
//
// Tokens need nothing: the authenticator looks every call's token up in the
// storage (no cache), so a revocation on one daemon refuses the token's next
// call on every daemon. A WatchPlans stream already open stays open (as on a
// single daemon).

// SharedStorage is what the server uses of a storage that several daemons
// share; *store.DB implements it and reports SharedByReplicas true for
// PostgreSQL and false for SQLite.
type SharedStorage interface {
	SharedByReplicas() bool
	LockSitePlanning(ctx context.Context, siteID string, timeout time.Duration) (unlock func(), err error)
	WatchPlanVersions(ctx context.Context, fn func(store.PlanVersion)) error
}

// PlanLockTimeout is how long a planning call waits for another daemon's
// planning of the same site before it fails with ABORTED.
const PlanLockTimeout = store.DefaultPlanLockTimeout

// planLockTimeout is PlanLockTimeout; a test shortens it.
var planLockTimeout = PlanLockTimeout

// shared returns the storage as SharedStorage when other daemons share it.
func (s *Server) shared() SharedStorage {
	if sh, ok := s.db.(SharedStorage); ok && sh.SharedByReplicas() {
		return sh
	}
	return nil
}

// lockReplicas takes the cross-daemon planning lock of a site (a no-op
// unless the storage is shared). The caller holds the site's local lock.
func (s *Server) lockReplicas(ctx context.Context, siteID string) (func(), error) {
	sh := s.shared()
	if sh == nil {
		return func() {}, nil
	}
	return sh.LockSitePlanning(ctx, siteID, planLockTimeout)
}

// publishStored hands a version this daemon stored to the watchers, unless
// the storage announces every version to every daemon (then the bridge
// publishes it, in commit order with the other daemons' versions).
func (s *Server) publishStored(p *nightloomv1.Plan) {
	if s.shared() != nil {
		return
	}
	s.hub.publish(proto.Clone(p).(*nightloomv1.Plan))
}

// startPlanBridge starts, with shared storage, the background loop that
// publishes every version announced by the storage to this daemon's
// watchers.
func (s *Server) startPlanBridge() {
	sh := s.shared()
	if sh == nil {
		return
	}
	b := &planBridge{s: s, last: map[string]int64{}}
	s.bg.Add(1)
	go func() {
		defer s.bg.Done()
		err := sh.WatchPlanVersions(s.bgCtx, b.announce)
		if err != nil && !errors.Is(err, context.Canceled) {
			s.log.Error("plan version listener stopped", "err", err.Error())
		}
	}()
}

// planBridge turns the storage's announcements into hub publications. It
// runs on one goroutine; last is the highest version published per site.
type planBridge struct {
	s    *Server
	last map[string]int64
}

func (b *planBridge) announce(pv store.PlanVersion) {
	ctx, cancel := context.WithTimeout(b.s.bgCtx, 30*time.Second)
	defer cancel()
	if pv.SiteID == "" {
		b.resync(ctx)
		return
	}
	last := b.last[pv.SiteID]
	if pv.Version <= last {
		return
	}
	if !b.s.hub.watched(pv.SiteID) {
		b.last[pv.SiteID] = pv.Version
		return
	}
	from := last + 1
	if last == 0 {
		// No announcement for this site since the bridge started: any
		// watcher subscribed after the previous one was published.
		from = pv.Version
	}
	b.publishRange(ctx, pv.SiteID, from, pv.Version)
}

// resync fills what a lost connection may have dropped: for each watched
// site, the versions after the last one published, up to the latest.
func (b *planBridge) resync(ctx context.Context) {
	for _, site := range b.s.hub.watchedSites() {
		rec, err := b.s.db.LatestPlan(ctx, site)
		if err != nil {
			if !errors.Is(err, store.ErrNotFound) {
				b.s.log.Warn("plan resync", "site", site, "err", err.Error())
			}
			continue
		}
		from := b.last[site] + 1
		if b.last[site] == 0 {
			from = rec.Version
		}
		b.publishRange(ctx, site, from, rec.Version)
	}
}

func (b *planBridge) publishRange(ctx context.Context, site string, from, to int64) {
	for v := from; v <= to; v++ {
		rec, err := b.s.db.PlanByVersion(ctx, site, v)
		if err != nil {
			b.s.log.Warn("plan version announced but not readable", "site", site, "version", v, "err", err.Error())
			continue
		}
		p, err := planFromRecord(rec)
		if err != nil {
			b.s.log.Warn("plan version not decodable", "site", site, "version", v, "err", err.Error())
			continue
		}
		b.s.hub.publish(p)
		b.last[site] = v
	}
}

// watched reports whether a site has watchers.
func (h *hub) watched(site string) bool {
	h.mu.Lock()
	defer h.mu.Unlock()
	return len(h.sites[site]) > 0
}

// watchedSites lists the sites that have watchers.
func (h *hub) watchedSites() []string {
	h.mu.Lock()
	defer h.mu.Unlock()
	var out []string
	for site, ws := range h.sites {
		if len(ws) > 0 {
			out = append(out, site)
		}
	}
	return out
}
