package web

// Live pages: a night page listens to /sites/{site}/events (Server-Sent
// Events, https://html.spec.whatwg.org/multipage/server-sent-events.html)
// and refetches its content when told. Events come from two feeds: the
// daemon's plan hub (the one WatchPlans uses) for new plan versions, and
// the Notifier for progress reports, which a Storage wrapper feeds
// (NotifyProgress) because ReportProgress publishes nothing to the hub.

import (
	"context"
	"fmt"
	"net/http"
	"sync"
	"time"

	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/store"
)

// Notifier fans "something changed at this site" out to the open live
// pages. Notify never blocks: each subscriber has a one-slot buffer and
// repeated notifications coalesce.
type Notifier struct {
	mu   sync.Mutex
	subs map[string]map[chan struct{}]struct{}
}

// NewNotifier returns an empty notifier.
func NewNotifier() *Notifier { return &Notifier{subs: map[string]map[chan struct{}]struct{}{}} }

// Subscribe follows a site; call cancel when done.
func (n *Notifier) Subscribe(siteID string) (<-chan struct{}, func()) {
	ch := make(chan struct{}, 1)
	n.mu.Lock()
	if n.subs[siteID] == nil {
		n.subs[siteID] = map[chan struct{}]struct{}{}
	}
	n.subs[siteID][ch] = struct{}{}
	n.mu.Unlock()
	return ch, func() {
		n.mu.Lock()
		defer n.mu.Unlock()
		delete(n.subs[siteID], ch)
		if len(n.subs[siteID]) == 0 {
			delete(n.subs, siteID)
		}
	}
}

// Notify tells a site's subscribers that something changed.
func (n *Notifier) Notify(siteID string) {
	n.mu.Lock()
	defer n.mu.Unlock()
	for ch := range n.subs[siteID] {
		select {
		case ch <- struct{}{}:
		default:
		}
	}
}

// progressStorage is a server.Storage whose counted progress reports also
// notify the live pages of the block's site.
type progressStorage struct {
	server.Storage
	n *Notifier
}

// NotifyProgress wraps the daemon's storage so that every progress report
// it stores (a retried one, counted once, notifies nothing) notifies n.
// Give the result to server.Config.Storage.
func NotifyProgress(st server.Storage, n *Notifier) server.Storage {
	return progressStorage{Storage: st, n: n}
}

func (s progressStorage) ReportProgress(ctx context.Context, r store.ProgressReport) (store.Block, bool, error) {
	b, dup, err := s.Storage.ReportProgress(ctx, r)
	if err == nil && !dup {
		s.n.Notify(b.SiteID)
	}
	return b, dup, err
}

// heartbeat keeps idle streams open through proxies (an SSE comment).
const heartbeat = 20 * time.Second

// events streams "change" events for a site: one when a new plan version
// is stored, one when progress is reported; "signin" when the session ends
// (expired or its token revoked). The stream ends with the request's
// context (the browser went away), the hub cutting it off, or Close.
func (h *Handler) events(w http.ResponseWriter, r *http.Request) {
	fl, ok := w.(http.Flusher)
	if !ok {
		http.Error(w, "streaming unsupported", http.StatusInternalServerError)
		return
	}
	siteID := r.PathValue("site")
	if _, err := h.cfg.Store.GetSite(r.Context(), siteID); err != nil {
		http.Error(w, "site not found", http.StatusNotFound)
		return
	}
	versions, ended, cancel, err := h.cfg.Plans.SubscribePlans(siteID)
	if err != nil {
		// Too many watchers, or shutting down: the page still works on
		// reload.
		w.Header().Set("Retry-After", "30")
		http.Error(w, "live updates unavailable: "+err.Error(), http.StatusServiceUnavailable)
		return
	}
	defer cancel()
	var progress <-chan struct{}
	if h.cfg.Progress != nil {
		ch, stop := h.cfg.Progress.Subscribe(siteID)
		defer stop()
		progress = ch
	}
	x := sessionFrom(r.Context()) // nil on the public site without sign-in
	hd := w.Header()
	hd.Set("Content-Type", "text/event-stream")
	hd.Set("Cache-Control", "no-store")
	hd.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)
	// The reconnection delay the browser uses after a dropped stream.
	fmt.Fprint(w, "retry: 1000\n: connected\n\n")
	fl.Flush()

	check := time.NewTicker(h.cfg.SessionCheck)
	defer check.Stop()
	beat := time.NewTicker(heartbeat)
	defer beat.Stop()
	send := func(event, data string) bool {
		if _, err := fmt.Fprintf(w, "event: %s\ndata: %s\n\n", event, data); err != nil {
			return false
		}
		fl.Flush()
		return true
	}
	signedOut := func() bool {
		if x == nil {
			return false
		}
		if err := h.check(r.Context(), x); err == errNoSession {
			send("signin", "/signin")
			return true
		}
		return false
	}
	for {
		select {
		case <-r.Context().Done():
			return
		case <-h.done:
			return
		case <-ended:
			return // the browser reconnects and subscribes again
		case p := <-versions:
			if signedOut() || !send("change", fmt.Sprintf("plan version %d", p.GetVersion())) {
				return
			}
		case <-progress:
			if signedOut() || !send("change", "progress") {
				return
			}
		case <-check.C:
			if signedOut() {
				return
			}
		case <-beat.C:
			if _, err := fmt.Fprint(w, ": beat\n\n"); err != nil {
				return
			}
			fl.Flush()
		}
	}
}
