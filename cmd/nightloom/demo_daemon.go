package main

// The demo's daemon: the real nightloomd service (internal/server) started
// in this process on a free loopback port, with an admin token made
// directly in its store.

import (
	"context"
	"io"
	"log/slog"
	"time"

	"github.com/nightloom/nightloom/internal/server"
)

type demoDaemon struct {
	addr, token string
	stop        func()
}

func startDemoDaemon(dbPath string, logw io.Writer) (*demoDaemon, error) {
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	srv, err := server.Start(ctx, server.Config{
		Listen: "127.0.0.1:0",
		DBPath: dbPath,
		Logger: slog.New(slog.NewTextHandler(logw, nil)),
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
	return &demoDaemon{addr: srv.Addr().String(), token: token, stop: stop}, nil
}
