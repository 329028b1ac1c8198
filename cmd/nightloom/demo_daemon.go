package main

// The demo's daemon: the real nightloomd service (internal/server) started
// in this process on a free loopback port, with an admin token made
// directly in its store.

import (
	"context"
	"io"
	"log/slog"
	"sync"
	"time"

	"github.com/nightloom/nightloom/internal/server"
)

type demoDaemon struct {
	addr, token string
	stop        func()
	// clock is the daemon's clock: the real one until the demo moves it
	// into its simulated night (progress reports must lie in the past).
	clock *simClock
}

// simClock is the real clock until Set, then a fixed instant.
type simClock struct {
	mu sync.Mutex
	t  time.Time
}

// Now is the clock's instant.
func (c *simClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.t.IsZero() {
		return time.Now()
	}
	return c.t
}

// Set fixes the clock at t.
func (c *simClock) Set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = t
}

func startDemoDaemon(dbPath string, logw io.Writer) (*demoDaemon, error) {
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	clk := &simClock{}
	srv, err := server.Start(ctx, server.Config{
		Listen: "127.0.0.1:0",
		DBPath: dbPath,
		Logger: slog.New(slog.NewTextHandler(logw, nil)),
		Now:    clk.Now,
	})
	if err != nil {
		return nil, err
	}
	token, _, err := srv.CreateToken(ctx, server.RoleAdmin, "demo")
	if err != nil {
		srv.Shutdown(context.Background())
		return nil, err
	}
	stop := func() {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		srv.Shutdown(ctx)
	}
	return &demoDaemon{addr: srv.Addr().String(), token: token, stop: stop, clock: clk}, nil
}
