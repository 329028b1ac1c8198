package main

// The web pages' listener (--http-addr): internal/web over the daemon's own
// store and plan hub, on its own HTTP listener with the gRPC listener's TLS
// rules (TLS with --tls-cert/--tls-key, client certificates with
// --client-ca, plaintext only on loopback unless --insecure-listen).

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"os"
	"strings"
	"time"

	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/store"
	"github.com/nightloom/nightloom/internal/web"
)

// webFlags are the web listener's flags.
type webFlags struct {
	addr       string
	public     string
	metrics    bool
	sessionTTL time.Duration
}

// serveWeb runs the daemon with the web pages until ctx is done.
func serveWeb(ctx context.Context, f *serveFlags) error {
	cfg := f.cfg
	tlsOn := cfg.TLSCertFile != "" && cfg.TLSKeyFile != ""
	if err := server.CheckListen(f.web.addr, tlsOn, cfg.InsecureListen); err != nil {
		if errors.Is(err, server.ErrInsecureListen) {
			return &usageError{fmt.Sprintf("flag --http-addr: refusing plaintext HTTP on a non-loopback address %s; give --tls-cert and --tls-key, or --insecure-listen", f.web.addr)}
		}
		return &usageError{"flag --http-addr: " + strings.TrimPrefix(err.Error(), "server: ")}
	}
	var tc *tls.Config
	if tlsOn {
		cert, err := tls.LoadX509KeyPair(cfg.TLSCertFile, cfg.TLSKeyFile)
		if err != nil {
			return fmt.Errorf("web: load TLS key pair: %w", err)
		}
		tc = &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}
		if cfg.ClientCAFile != "" {
			pem, err := os.ReadFile(cfg.ClientCAFile)
			if err != nil {
				return fmt.Errorf("web: read client CA: %w", err)
			}
			pool := x509.NewCertPool()
			if !pool.AppendCertsFromPEM(pem) {
				return fmt.Errorf("web: %s holds no PEM certificate", cfg.ClientCAFile)
			}
			tc.ClientCAs, tc.ClientAuth = pool, tls.RequireAndVerifyClientCert
		}
	}
	db, err := store.Open(cfg.DBPath, store.Options{})
	if err != nil {
		return err
	}
	defer db.Close()
	if f.web.public != "" {
		if _, err := db.GetSite(ctx, f.web.public); err != nil {
			if errors.Is(err, store.ErrNotFound) {
				return &usageError{fmt.Sprintf("flag --web-public: no site %q", f.web.public)}
			}
			return err
		}
	}
	progress := web.NewNotifier()
	cfg.Storage = web.NotifyProgress(db, progress)
	s, err := server.Start(ctx, cfg)
	if err != nil {
		return err
	}
	wc := web.Config{Store: cfg.Storage, Sky: s.Sky(), Plans: s, Progress: progress, PublicSite: f.web.public,
		Secure: tlsOn, SessionTTL: f.web.sessionTTL, Now: cfg.Now, Logger: cfg.Logger}
	if f.web.metrics {
		wc.Metrics = s.MetricsHandler()
	}
	h, err := web.New(wc)
	if err != nil {
		_ = s.Shutdown(context.Background())
		return err
	}
	var lc net.ListenConfig
	lis, err := lc.Listen(ctx, "tcp", f.web.addr)
	if err != nil {
		_ = s.Shutdown(context.Background())
		return fmt.Errorf("web: listen %s: %w", f.web.addr, err)
	}
	// No WriteTimeout: the live pages' event streams stay open.
	hs := &http.Server{Handler: h, TLSConfig: tc, ReadHeaderTimeout: 5 * time.Second, ReadTimeout: 10 * time.Second,
		IdleTimeout: 2 * time.Minute, MaxHeaderBytes: 64 << 10,
		ErrorLog: slog.NewLogLogger(cfg.Logger.Handler(), slog.LevelWarn)}
	served := make(chan error, 1)
	go func() {
		if tc != nil {
			served <- hs.ServeTLS(lis, "", "")
		} else {
			served <- hs.Serve(lis)
		}
	}()
	cfg.Logger.Info("web pages serving", "http_addr", lis.Addr().String(), "tls", tlsOn, "public_site", f.web.public,
		"metrics", f.web.metrics)
	var serveErr error
	select {
	case <-ctx.Done():
	case serveErr = <-served:
	}
	h.Close() // end the event streams, which Shutdown would wait for
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	webErr := hs.Shutdown(sctx)
	if errors.Is(serveErr, http.ErrServerClosed) {
		serveErr = nil
	}
	return errors.Join(serveErr, webErr, s.Shutdown(context.Background()))
}
