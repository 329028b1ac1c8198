package server

import (
	"sync"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// hub fans new plan versions out to the WatchPlans streams of their site.
// Each watcher has a bounded buffer; publish never blocks: a watcher whose
// buffer is full (it fell behind by more than the buffer) is cut off with
// RESOURCE_EXHAUSTED and the others keep receiving (plan.proto).
type hub struct {
	mu         sync.Mutex
	sites      map[string]map[*watcher]struct{}
	total      int
	buffer     int
	maxPerSite int
	maxTotal   int
	closed     bool
}

// watcher is one WatchPlans stream.
type watcher struct {
	site string
	ch   chan *nightloomv1.Plan
	// end is closed when the hub ends the watcher; reason says why.
	end    chan struct{}
	reason error
	ended  bool
}

func newHub(buffer, maxPerSite, maxTotal int) *hub {
	return &hub{sites: map[string]map[*watcher]struct{}{}, buffer: buffer, maxPerSite: maxPerSite, maxTotal: maxTotal}
}

// subscribe adds a watcher of a site, or refuses it when the limits are
// reached or the daemon is shutting down.
func (h *hub) subscribe(site string) (*watcher, error) {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.closed {
		return nil, status.Error(codes.Unavailable, "server is shutting down")
	}
	ws := h.sites[site]
	if len(ws) >= h.maxPerSite {
		return nil, status.Errorf(codes.ResourceExhausted, "site %s already has %d watchers (the limit)", site, len(ws))
	}
	if h.total >= h.maxTotal {
		return nil, status.Errorf(codes.ResourceExhausted, "the daemon already has %d watchers (the limit)", h.total)
	}
	if ws == nil {
		ws = map[*watcher]struct{}{}
		h.sites[site] = ws
	}
	w := &watcher{site: site, ch: make(chan *nightloomv1.Plan, h.buffer), end: make(chan struct{})}
	ws[w] = struct{}{}
	h.total++
	return w, nil
}

// unsubscribe removes a watcher (idempotent).
func (h *hub) unsubscribe(w *watcher) {
	h.mu.Lock()
	defer h.mu.Unlock()
	h.remove(w)
}

func (h *hub) remove(w *watcher) {
	if ws := h.sites[w.site]; ws != nil {
		if _, ok := ws[w]; ok {
			delete(ws, w)
			h.total--
			if len(ws) == 0 {
				delete(h.sites, w.site)
			}
		}
	}
}

// endWatcher removes w and tells its stream why (under h.mu).
func (h *hub) endWatcher(w *watcher, reason error) {
	h.remove(w)
	if !w.ended {
		w.ended, w.reason = true, reason
		close(w.end)
	}
}

// publish hands a new plan version to every watcher of its site. The plan
// is shared and must not be changed afterwards.
func (h *hub) publish(p *nightloomv1.Plan) {
	h.mu.Lock()
	defer h.mu.Unlock()
	for w := range h.sites[p.GetSiteId()] {
		select {
		case w.ch <- p:
		default:
			h.endWatcher(w, status.Errorf(codes.ResourceExhausted,
				"watcher fell behind by more than %d plan versions; watch again with send_current", h.buffer))
		}
	}
}

// count returns the number of watchers.
func (h *hub) count() int {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.total
}

// close ends every watcher with UNAVAILABLE and refuses new ones (shutdown:
// streams would otherwise keep GracefulStop waiting for ever).
func (h *hub) close() {
	h.mu.Lock()
	defer h.mu.Unlock()
	h.closed = true
	for _, ws := range h.sites {
		for w := range ws {
			h.endWatcher(w, status.Error(codes.Unavailable, "server is shutting down; watch again later"))
		}
	}
}

// ended returns the reason the hub ended w (call after <-w.end).
func (h *hub) ended(w *watcher) error {
	h.mu.Lock()
	defer h.mu.Unlock()
	return w.reason
}
