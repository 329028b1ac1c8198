package server

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
	sdktrace "go.opentelemetry.io/otel/sdk/trace"
	"go.opentelemetry.io/otel/trace"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/keepalive"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
	"github.com/nightloom/nightloom/scheduler"

	_ "time/tzdata" // IANA zones for sites, whatever the host has installed
)

// AccessLogOff as Config.AccessLogLevel logs no record for calls that
// succeed.
const AccessLogOff = slog.Level(100)

// Defaults of Config.
const (
	DefaultListen          = "127.0.0.1:7878"
	DefaultDBPath          = "nightloom.db"
	DefaultShutdownTimeout = 10 * time.Second
)

// Config is how to run the daemon. The zero value (with defaults filled in)
// is `nightloomd` with no flags: plaintext gRPC on 127.0.0.1:7878, data in
// nightloom.db in the working directory, no metrics listener.
type Config struct {
	// Listen is the gRPC address, host:port. Default DefaultListen.
	Listen string
	// Listener, when set, is used instead of Listen (tests: a bufconn or a
	// port already bound). Its address still counts for the loopback rule.
	Listener net.Listener

	// DBPath is the SQLite file, or a postgres:// URL of a database that
	// several daemons share (store.OpenDSN). Default DefaultDBPath.
	DBPath string
	// Storage, when set, is used instead of opening DBPath; the server does
	// not close it.
	Storage Storage

	// TLSCertFile and TLSKeyFile are a PEM certificate chain and key; with
	// them the daemon speaks TLS only.
	TLSCertFile, TLSKeyFile string
	// ClientCAFile is a PEM bundle of CAs; with it every client must
	// present a certificate they signed (mutual TLS). Needs TLS.
	ClientCAFile string
	// InsecureListen allows plaintext on a non-loopback address.
	InsecureListen bool

	// MetricsAddr is the HTTP address of the Prometheus /metrics endpoint;
	// empty for none.
	MetricsAddr string

	// MaxRecvBytes bounds a request message. Default DefaultMaxRecvBytes.
	MaxRecvBytes int
	// ShutdownTimeout bounds the graceful part of a shutdown; calls still
	// running then are cancelled. Default DefaultShutdownTimeout.
	ShutdownTimeout time.Duration

	// Logger receives the structured logs. Default: text to stderr, info.
	Logger *slog.Logger
	// AccessLogLevel is the level of the access record of each call that
	// succeeds (method, code, duration_ms, peer, token_id); failed calls
	// are logged at INFO, or ERROR for internal errors. The zero value is
	// INFO; AccessLogOff turns the records of successful calls off.
	AccessLogLevel slog.Level

	// DefaultTimeBudget is the solver budget of a request that sets none.
	// Default DefaultTimeBudget (plan.proto).
	DefaultTimeBudget time.Duration
	// DefaultReplanBudget is the solver budget of a Replan that sets none
	// and of automatic replans. Default DefaultReplanBudget.
	DefaultReplanBudget time.Duration
	// ReplanPriority: queuing an open block of at least this priority
	// replans the site's running plan. Default DefaultReplanPriority; a
	// negative value turns it off.
	ReplanPriority int
	// WatchBuffer is the plan versions a watcher may fall behind. Default
	// DefaultWatchBuffer.
	WatchBuffer int
	// MaxWatchersPerSite bounds the WatchPlans streams of a site. Default
	// DefaultMaxWatchersPerSite.
	MaxWatchersPerSite int

	// TracerProvider, when set, traces every call (tests: an in-memory
	// recorder). Unset, the OTEL_* environment decides (tracing.go); by
	// default there is no tracing.
	TracerProvider trace.TracerProvider

	// Now is the server's clock (Replan and NextAssignment without an
	// instant, the queued-block replan, expiry). Default time.Now.
	Now func() time.Time
	// planner replaces the planning glue (tests). Default: the scheduler.
	planner planner
	// maxQueuedPerSite overrides MaxQueuedBlocksPerSite (tests).
	maxQueuedPerSite int
}

func (c Config) withDefaults() Config {
	if c.Listen == "" {
		c.Listen = DefaultListen
	}
	if c.DBPath == "" {
		c.DBPath = DefaultDBPath
	}
	if c.MaxRecvBytes <= 0 {
		c.MaxRecvBytes = DefaultMaxRecvBytes
	}
	if c.ShutdownTimeout <= 0 {
		c.ShutdownTimeout = DefaultShutdownTimeout
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.NewTextHandler(os.Stderr, nil))
	}
	if c.DefaultTimeBudget <= 0 {
		c.DefaultTimeBudget = DefaultTimeBudget
	}
	if c.DefaultTimeBudget > MaxTimeBudget {
		c.DefaultTimeBudget = MaxTimeBudget
	}
	if c.DefaultReplanBudget <= 0 {
		c.DefaultReplanBudget = DefaultReplanBudget
	}
	if c.DefaultReplanBudget > MaxTimeBudget {
		c.DefaultReplanBudget = MaxTimeBudget
	}
	if c.ReplanPriority == 0 {
		c.ReplanPriority = DefaultReplanPriority
	}
	if c.WatchBuffer <= 0 {
		c.WatchBuffer = DefaultWatchBuffer
	}
	if c.MaxWatchersPerSite <= 0 {
		c.MaxWatchersPerSite = DefaultMaxWatchersPerSite
	}
	if c.Now == nil {
		c.Now = time.Now
	}
	if c.maxQueuedPerSite <= 0 {
		c.maxQueuedPerSite = MaxQueuedBlocksPerSite
	}
	return c
}

// ErrInsecureListen refuses plaintext on a non-loopback address.
var ErrInsecureListen = errors.New("server: refusing plaintext gRPC on a non-loopback address; give --tls-cert and --tls-key, or --insecure-listen")

// Server is a running nightloom daemon: the gRPC services over one store.
type Server struct {
	cfg     Config
	log     *slog.Logger
	db      Storage
	closeDB io.Closer // nil when the store came from Config.Storage
	now     func() time.Time
	planner planner

	grpc    *grpc.Server
	health  *health.Server
	hub     *hub
	metrics *metrics
	guard   *tokenGuard
	public  *publicStreams
	// tracer is the provider made from OTEL_* (nil: none, or the caller's);
	// Shutdown flushes and stops it.
	tracer *sdktrace.TracerProvider

	lis        net.Listener
	metricsLis net.Listener
	metricsSrv *http.Server

	// siteLocks serialise, per site (striped), storing a plan version and
	// publishing it, so that watchers see versions in order, and the
	// check-solve-store sequence of a replan.
	siteLocks [64]sync.Mutex
	// targetNames serialises the check and the write of a target's name
	// (targetnames.go).
	targetNames sync.Mutex

	// bg tracks background work (replans after an urgent block); bgCtx is
	// cancelled at shutdown.
	bg       sync.WaitGroup
	bgMu     sync.Mutex
	bgCtx    context.Context
	bgCancel context.CancelFunc

	serveDone chan error
	stopOnce  sync.Once
	stopErr   error
}

// Start opens the store, listens and serves in the background. The context
// only bounds the start; stop the server with Shutdown.
func Start(ctx context.Context, cfg Config) (*Server, error) {
	cfg = cfg.withDefaults()
	creds, err := tlsCredentials(cfg)
	if err != nil {
		return nil, err
	}
	if cfg.Listener == nil {
		if err := CheckListen(cfg.Listen, creds != nil, cfg.InsecureListen); err != nil {
			return nil, err
		}
	} else if err := checkListenerAddr(cfg.Listener.Addr(), creds != nil, cfg.InsecureListen); err != nil {
		return nil, err
	}

	s := &Server{cfg: cfg, log: cfg.Logger, now: cfg.Now, planner: cfg.planner, serveDone: make(chan error, 1)}
	if w := KeyFileWarning(cfg.TLSKeyFile); w != "" {
		s.log.Warn(w)
	}
	if s.planner == nil {
		s.planner = schedulerPlanner{lookahead: &scheduler.LookaheadCache{}}
	}
	s.bgCtx, s.bgCancel = context.WithCancel(context.Background())
	if cfg.Storage != nil {
		s.db = cfg.Storage
	} else {
		db, err := store.OpenDSN(cfg.DBPath, store.Options{})
		if err != nil {
			return nil, err
		}
		s.db, s.closeDB = db, db
	}
	fail := func(err error) (*Server, error) {
		if s.guard != nil {
			s.guard.close()
		}
		if s.lis != nil {
			_ = s.lis.Close()
		}
		if s.metricsLis != nil {
			_ = s.metricsLis.Close()
		}
		if s.closeDB != nil {
			_ = s.closeDB.Close()
		}
		return nil, err
	}

	s.hub = newHub(cfg.WatchBuffer, cfg.MaxWatchersPerSite, MaxWatchersTotal)
	s.metrics = newMetrics(func(ctx context.Context) (int, error) { return s.db.QueueSize(ctx, "") }, s.hub.count)

	obs := &observer{log: s.log, metrics: s.metrics, access: cfg.AccessLogLevel}
	s.guard = newTokenGuard(s.db, s.log, tokenRecheckInterval)
	s.public = newPublicStreams()
	auth := &authenticator{tokens: s.db, guard: s.guard}
	em := &errorMapper{log: s.log}
	opts := []grpc.ServerOption{
		grpc.ChainUnaryInterceptor(s.metrics.grpc.UnaryServerInterceptor(), obs.unary, auth.unary, em.unary, s.scopeUnary),
		grpc.ChainStreamInterceptor(s.metrics.grpc.StreamServerInterceptor(), obs.stream, s.public.stream, auth.stream, em.stream, s.scopeStream),
		grpc.MaxRecvMsgSize(cfg.MaxRecvBytes),
		grpc.MaxSendMsgSize(MaxSendBytes),
		grpc.MaxConcurrentStreams(MaxConcurrentStreams),
		grpc.ConnectionTimeout(20 * time.Second),
		grpc.KeepaliveEnforcementPolicy(keepalive.EnforcementPolicy{MinTime: 10 * time.Second, PermitWithoutStream: true}),
		grpc.KeepaliveParams(keepalive.ServerParameters{Time: 2 * time.Minute, Timeout: 20 * time.Second}),
	}
	if creds != nil {
		opts = append(opts, grpc.Creds(creds))
	}
	tp := cfg.TracerProvider
	if tp == nil {
		if s.tracer, err = tracerFromEnv(ctx, os.Getenv); err != nil {
			return fail(err)
		}
		if s.tracer != nil {
			tp = s.tracer
			s.log.Info("tracing on (OTEL_* environment)")
		}
	}
	if tp != nil {
		opts = append(opts, tracingOption(tp))
	}
	s.grpc = grpc.NewServer(opts...)
	nightloomv1.RegisterSiteServiceServer(s.grpc, &siteService{s: s})
	nightloomv1.RegisterTargetServiceServer(s.grpc, &targetService{s: s})
	nightloomv1.RegisterQueueServiceServer(s.grpc, &queueService{s: s})
	nightloomv1.RegisterPlanServiceServer(s.grpc, &planService{s: s})
	nightloomv1.RegisterSkyServiceServer(s.grpc, &skyService{s: s})
	nightloomv1.RegisterCatalogueServiceServer(s.grpc, &catalogueService{s: s})
	nightloomv1.RegisterApparitionServiceServer(s.grpc, &apparitionService{s: s})
	nightloomv1.RegisterExportServiceServer(s.grpc, &exportService{s: s})
	nightloomv1.RegisterProgramServiceServer(s.grpc, &programService{s: s})
	nightloomv1.RegisterNetworkServiceServer(s.grpc, &networkService{s: s})
	s.health = health.NewServer()
	healthpb.RegisterHealthServer(s.grpc, s.health)
	registerReflection(s.grpc, s.log)
	s.metrics.grpc.InitializeMetrics(s.grpc)
	for name := range s.grpc.GetServiceInfo() {
		s.health.SetServingStatus(name, healthpb.HealthCheckResponse_SERVING)
	}
	s.health.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)

	if cfg.Listener != nil {
		s.lis = cfg.Listener
	} else {
		var lc net.ListenConfig
		if s.lis, err = lc.Listen(ctx, "tcp", cfg.Listen); err != nil {
			return fail(fmt.Errorf("server: listen %s: %w", cfg.Listen, err))
		}
	}
	if cfg.MetricsAddr != "" {
		if h, _, err := net.SplitHostPort(cfg.MetricsAddr); err == nil && !loopbackHost(h) {
			s.log.Warn("metrics are served on a non-loopback address without authentication", "metrics_addr", cfg.MetricsAddr)
		}
		var lc net.ListenConfig
		if s.metricsLis, err = lc.Listen(ctx, "tcp", cfg.MetricsAddr); err != nil {
			return fail(fmt.Errorf("server: metrics listen %s: %w", cfg.MetricsAddr, err))
		}
		mux := http.NewServeMux()
		mux.Handle("/metrics", promhttp.HandlerFor(s.metrics.reg, promhttp.HandlerOpts{}))
		s.metricsSrv = &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second, ReadTimeout: 10 * time.Second,
			WriteTimeout: 30 * time.Second, IdleTimeout: time.Minute}
		go func() {
			if err := s.metricsSrv.Serve(s.metricsLis); err != nil && !errors.Is(err, http.ErrServerClosed) {
				s.log.Error("metrics server stopped", "err", err.Error())
			}
		}()
	}
	s.startPlanBridge()
	go func() { s.serveDone <- s.grpc.Serve(s.lis) }()
	attrs := []any{"addr", s.lis.Addr().String(), "tls", creds != nil, "mutual_tls", cfg.ClientCAFile != ""}
	if s.metricsLis != nil {
		attrs = append(attrs, "metrics_addr", s.metricsLis.Addr().String())
	}
	if cfg.Storage == nil {
		attrs = append(attrs, "db", store.RedactDSN(cfg.DBPath))
	}
	s.log.Info("nightloomd serving", attrs...)
	return s, nil
}

// Run starts the daemon and serves until ctx is done, then shuts down
// gracefully within Config.ShutdownTimeout.
func Run(ctx context.Context, cfg Config) error {
	s, err := Start(ctx, cfg)
	if err != nil {
		return err
	}
	select {
	case <-ctx.Done():
	case err := <-s.serveDone:
		s.serveDone <- err
	}
	return s.Shutdown(context.Background())
}

// Addr is the gRPC listener's address.
func (s *Server) Addr() net.Addr { return s.lis.Addr() }

// MetricsAddr is the metrics listener's address, nil without one.
func (s *Server) MetricsAddr() net.Addr {
	if s.metricsLis == nil {
		return nil
	}
	return s.metricsLis.Addr()
}

// Storage is the server's store (for tools such as the demo that create
// tokens in-process).
func (s *Server) Storage() Storage { return s.db }

// CreateToken makes a bearer token in the server's store (see the package
// function CreateToken).
func (s *Server) CreateToken(ctx context.Context, role Role, label string) (string, store.Token, error) {
	return CreateToken(ctx, s.db, role, label)
}

// Shutdown stops the daemon: health reports NOT_SERVING, health watchers and
// reflection streams end at once (publicstreams.go), watch streams end
// with UNAVAILABLE, new calls are refused, calls in flight may finish within
// Config.ShutdownTimeout (or until ctx ends), then the rest are cancelled
// (GracefulStop falling back to Stop), background replans are awaited and
// the store is closed. It is safe to call more than once.
func (s *Server) Shutdown(ctx context.Context) error {
	s.stopOnce.Do(func() {
		s.log.Info("nightloomd shutting down", "timeout", s.cfg.ShutdownTimeout)
		s.health.Shutdown()
		s.public.endAll() // health watchers and reflection clients first
		s.hub.close()
		ctx, cancel := context.WithTimeout(ctx, s.cfg.ShutdownTimeout)
		defer cancel()
		stopped := make(chan struct{})
		go func() {
			s.grpc.GracefulStop()
			close(stopped)
		}()
		select {
		case <-stopped:
		case <-ctx.Done():
			s.log.Warn("graceful shutdown timed out; cancelling calls in flight")
			s.grpc.Stop()
			<-stopped
		}
		s.bgMu.Lock()
		s.bgCancel()
		s.bgMu.Unlock()
		s.bg.Wait()
		s.guard.close()
		var errs []error
		if s.metricsSrv != nil {
			mctx, mcancel := context.WithTimeout(context.Background(), 2*time.Second)
			errs = append(errs, s.metricsSrv.Shutdown(mctx))
			mcancel()
		}
		if s.tracer != nil {
			tctx, tcancel := context.WithTimeout(context.Background(), 2*time.Second)
			errs = append(errs, s.tracer.Shutdown(tctx))
			tcancel()
		}
		if s.closeDB != nil {
			errs = append(errs, s.closeDB.Close())
		}
		if err := <-s.serveDone; err != nil && !errors.Is(err, grpc.ErrServerStopped) {
			errs = append(errs, err)
		}
		s.stopErr = errors.Join(errs...)
		s.log.Info("nightloomd stopped")
	})
	return s.stopErr
}

// tlsCredentials loads the TLS configuration, or returns nil for plaintext.
func tlsCredentials(cfg Config) (credentials.TransportCredentials, error) {
	if (cfg.TLSCertFile == "") != (cfg.TLSKeyFile == "") {
		return nil, errors.New("server: --tls-cert and --tls-key go together")
	}
	if cfg.TLSCertFile == "" {
		if cfg.ClientCAFile != "" {
			return nil, errors.New("server: --client-ca needs --tls-cert and --tls-key")
		}
		return nil, nil
	}
	cert, err := tls.LoadX509KeyPair(cfg.TLSCertFile, cfg.TLSKeyFile)
	if err != nil {
		return nil, fmt.Errorf("server: load TLS key pair: %w", err)
	}
	tc := &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}
	if cfg.ClientCAFile != "" {
		pem, err := os.ReadFile(cfg.ClientCAFile)
		if err != nil {
			return nil, fmt.Errorf("server: read client CA: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("server: %s holds no PEM certificate", cfg.ClientCAFile)
		}
		tc.ClientCAs = pool
		tc.ClientAuth = tls.RequireAndVerifyClientCert
	}
	return credentials.NewTLS(tc), nil
}

// CheckListen applies the loopback rule to a listen address: plaintext is
// allowed only on a loopback host (127.0.0.0/8, ::1, "localhost") unless
// insecure is set. An empty host (all interfaces) is not loopback.
func CheckListen(addr string, tlsOn, insecure bool) error {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return fmt.Errorf("server: listen address %q: %w", addr, err)
	}
	if tlsOn || insecure || loopbackHost(host) {
		return nil
	}
	return fmt.Errorf("%w (address %s)", ErrInsecureListen, addr)
}

func loopbackHost(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(strings.Trim(host, "[]"))
	return ip != nil && ip.IsLoopback()
}

// checkListenerAddr is CheckListen for a listener given by the caller: TCP
// addresses follow the loopback rule; in-process listeners (bufconn) are
// local by nature.
func checkListenerAddr(a net.Addr, tlsOn, insecure bool) error {
	tcp, ok := a.(*net.TCPAddr)
	if !ok || tlsOn || insecure || tcp.IP.IsLoopback() {
		return nil
	}
	return fmt.Errorf("%w (address %s)", ErrInsecureListen, a)
}
