package server

// The token guard: streams outlive the check made when they open, so the
// guard re-reads, every tokenRecheckInterval, each distinct token that holds
// an open stream, and ends the streams of a token that was revoked (by
// `nightloomd token revoke`, possibly from another process) or has expired.
// One lookup per distinct token per interval, however many streams it holds.

import (
	"context"
	"errors"
	"log/slog"
	"sync"
	"time"

	"github.com/nightloom/nightloom/internal/store"
)

// tokenRecheckInterval bounds how long a stream outlives its token's
// revocation (issue 14 asks for 5 s).
const tokenRecheckInterval = time.Second

// errTokenGone is the cause given to a stream's context when its token is
// revoked or expires.
var errTokenGone = errors.New("server: token revoked or expired")

type tokenGuard struct {
	tokens   TokenStore
	log      *slog.Logger
	interval time.Duration

	mu      sync.Mutex
	next    int
	streams map[string]map[int]context.CancelCauseFunc // by hash
	ids     map[string]string                          // token id by hash

	stop chan struct{}
	done chan struct{}
}

func newTokenGuard(tokens TokenStore, log *slog.Logger, interval time.Duration) *tokenGuard {
	g := &tokenGuard{tokens: tokens, log: log, interval: interval,
		streams: map[string]map[int]context.CancelCauseFunc{}, ids: map[string]string{}, stop: make(chan struct{}), done: make(chan struct{})}
	go g.run()
	return g
}

// add registers a stream of the token with that hash; the returned function
// unregisters it.
func (g *tokenGuard) add(hash []byte, tokenID string, cancel context.CancelCauseFunc) func() {
	g.mu.Lock()
	defer g.mu.Unlock()
	k := string(hash)
	g.ids[k] = tokenID
	if g.streams[k] == nil {
		g.streams[k] = map[int]context.CancelCauseFunc{}
	}
	id := g.next
	g.next++
	g.streams[k][id] = cancel
	return func() {
		g.mu.Lock()
		defer g.mu.Unlock()
		delete(g.streams[k], id)
		if len(g.streams[k]) == 0 {
			delete(g.streams, k)
			delete(g.ids, k)
		}
	}
}

func (g *tokenGuard) run() {
	defer close(g.done)
	t := time.NewTicker(g.interval)
	defer t.Stop()
	for {
		select {
		case <-g.stop:
			return
		case <-t.C:
			g.check()
		}
	}
}

// check looks each token up once and ends the streams of those gone.
func (g *tokenGuard) check() {
	g.mu.Lock()
	hashes := make([]string, 0, len(g.streams))
	for k := range g.streams {
		hashes = append(hashes, k)
	}
	g.mu.Unlock()
	for _, k := range hashes {
		ctx, cancel := context.WithTimeout(context.Background(), g.interval)
		rec, err := g.tokens.TokenByHash(ctx, []byte(k))
		cancel()
		if err != nil && !errors.Is(err, store.ErrNotFound) {
			continue // busy or slow: try again next time
		}
		if err == nil && rec.RevokedAt == nil {
			continue
		}
		g.mu.Lock()
		n, id := len(g.streams[k]), g.ids[k]
		for _, c := range g.streams[k] {
			c(errTokenGone)
		}
		g.mu.Unlock()
		if n > 0 {
			g.log.Info("token revoked or expired: its streams end", "streams", n, "token_id", id)
		}
	}
}

// open counts the streams the guard holds.
func (g *tokenGuard) open() int {
	g.mu.Lock()
	defer g.mu.Unlock()
	n := 0
	for _, m := range g.streams {
		n += len(m)
	}
	return n
}

// close stops the guard's goroutine.
func (g *tokenGuard) close() {
	select {
	case <-g.stop:
	default:
		close(g.stop)
	}
	<-g.done
}
