// Command nightloomd is the nightloom daemon: the gRPC scheduling service
// over a SQLite file, or over PostgreSQL when several daemons share one
// database (--db postgres://...).
//
//	nightloomd [flags]                       serve (SIGINT/SIGTERM stop it gracefully)
//	nightloomd --http-addr 127.0.0.1:7880    also serve the read-only web pages
//	nightloomd token create --role ROLE [--label L] [--ttl DURATION] [--site SITE_ID] [--db PATH]
//	nightloomd token list [--db PATH]
//	nightloomd token revoke --id ID [--db PATH]
//	nightloomd copy-db --from DB --to DB     copy a whole database (SQLite <-> PostgreSQL) into an empty one
//
// With no flags it listens on 127.0.0.1:7878 in plaintext and keeps its data
// in nightloom.db in the working directory. Every RPC needs a bearer token
// ("authorization: Bearer <token>" metadata) made with `token create`,
// except the standard health-checking service and server reflection.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"strings"
	"syscall"
	"text/tabwriter"
	"time"

	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/store"
	"github.com/nightloom/nightloom/internal/web"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	os.Exit(run(ctx, os.Args[1:], os.Stdout, os.Stderr))
}

// usageError is a mistake in the command line (exit status 2).
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

// run executes one command line and returns the exit status.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	var err error
	switch {
	case len(args) > 0 && args[0] == "token":
		err = runToken(ctx, args[1:], stdout, stderr)
	case len(args) > 0 && args[0] == "copy-db":
		err = runCopyDB(ctx, args[1:], stdout, stderr)
	default:
		err = serve(ctx, args, stderr)
	}
	switch {
	case err == nil, errors.Is(err, flag.ErrHelp):
		return 0
	}
	fmt.Fprintf(stderr, "nightloomd: %v\n", err)
	var ue *usageError
	if errors.As(err, &ue) {
		return 2
	}
	return 1
}

func newFlagSet(name string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	return fs
}

func parse(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return &usageError{err.Error()}
	}
	if fs.NArg() > 0 {
		return &usageError{fmt.Sprintf("unexpected argument %q", fs.Arg(0))}
	}
	return nil
}

// serveFlags are the daemon's flags; units are in the names or the types.
type serveFlags struct {
	cfg       server.Config
	web       webFlags
	logLevel  string
	logFormat string
	accessLog string
	// clockStart and clockRate: a simulated clock for demos and scripts
	// (scripts/demo-grpcurl.sh): it starts at clockStart and runs clockRate
	// times faster than the real one.
	clockStart string
	clockRate  float64
}

func parseServe(args []string, stderr io.Writer) (*serveFlags, error) {
	f := &serveFlags{}
	fs := newFlagSet("nightloomd", stderr)
	fs.Usage = func() {
		fmt.Fprint(fs.Output(), serveUsage)
		fs.PrintDefaults()
	}
	fs.StringVar(&f.cfg.Listen, "listen", server.DefaultListen, "gRPC listen address host:port")
	fs.StringVar(&f.cfg.DBPath, "db", server.DefaultDBPath, dbFlagHelp)
	fs.StringVar(&f.cfg.TLSCertFile, "tls-cert", "", "PEM certificate chain for TLS (with --tls-key)")
	fs.StringVar(&f.cfg.TLSKeyFile, "tls-key", "", "PEM private key for TLS (with --tls-cert)")
	fs.StringVar(&f.cfg.ClientCAFile, "client-ca", "", "PEM CA bundle: require client certificates it signed (mutual TLS)")
	fs.BoolVar(&f.cfg.InsecureListen, "insecure-listen", false, "allow plaintext gRPC on a non-loopback address")
	fs.StringVar(&f.cfg.MetricsAddr, "metrics-addr", "", "HTTP address for Prometheus /metrics (empty: off), e.g. 127.0.0.1:9478")
	fs.IntVar(&f.cfg.MaxRecvBytes, "max-recv-bytes", server.DefaultMaxRecvBytes, "largest request message in bytes")
	fs.DurationVar(&f.cfg.ShutdownTimeout, "shutdown-timeout", server.DefaultShutdownTimeout, "time calls in flight get to finish on SIGINT/SIGTERM")
	fs.DurationVar(&f.cfg.DefaultTimeBudget, "default-time-budget", server.DefaultTimeBudget, "solver budget of a planning request that sets none (at most 60s)")
	fs.DurationVar(&f.cfg.DefaultReplanBudget, "default-replan-budget", server.DefaultReplanBudget, "solver budget of a replan that sets none, and of automatic replans (at most 60s)")
	fs.IntVar(&f.cfg.ReplanPriority, "replan-priority", server.DefaultReplanPriority, "queuing an open block of at least this priority replans the running plan (-1: never)")
	fs.IntVar(&f.cfg.WatchBuffer, "watch-buffer", server.DefaultWatchBuffer, "plan versions a WatchPlans stream may fall behind before it is cut off")
	fs.StringVar(&f.web.addr, "http-addr", "", "HTTP address of the read-only web pages, host:port (empty: off); same TLS rules as --listen")
	fs.StringVar(&f.web.public, "web-public", "", "site id whose night pages need no sign-in (empty: none)")
	fs.BoolVar(&f.web.metrics, "web-metrics", false, "also serve Prometheus /metrics on --http-addr")
	fs.DurationVar(&f.web.sessionTTL, "web-session-ttl", web.DefaultSessionTTL, "how long a web sign-in lasts")
	fs.StringVar(&f.logLevel, "log-level", "info", "log level: debug, info, warn or error")
	fs.StringVar(&f.logFormat, "log-format", "text", "log format: text or json")
	fs.StringVar(&f.clockStart, "clock-start", "", "for demos and scripts only: the daemon's clock starts at this RFC 3339 instant (empty: the real clock)")
	fs.Float64Var(&f.clockRate, "clock-rate", 1, "with --clock-start: how many times faster than real time the clock runs")
	fs.StringVar(&f.accessLog, "access-log", "info", "level of the access record of each successful call (method, code, duration_ms, peer, token_id): debug, info or off")
	if err := parse(fs, args); err != nil {
		return nil, err
	}
	if f.cfg.MaxRecvBytes <= 0 {
		return nil, &usageError{"flag --max-recv-bytes: must be positive"}
	}
	if f.cfg.ShutdownTimeout <= 0 {
		return nil, &usageError{"flag --shutdown-timeout: must be positive"}
	}
	if f.cfg.DefaultTimeBudget <= 0 || f.cfg.DefaultTimeBudget > server.MaxTimeBudget {
		return nil, &usageError{fmt.Sprintf("flag --default-time-budget: must be within (0, %v]", server.MaxTimeBudget)}
	}
	if f.cfg.DefaultReplanBudget <= 0 || f.cfg.DefaultReplanBudget > server.MaxTimeBudget {
		return nil, &usageError{fmt.Sprintf("flag --default-replan-budget: must be within (0, %v]", server.MaxTimeBudget)}
	}
	if f.web.addr == "" && (f.web.public != "" || f.web.metrics) {
		return nil, &usageError{"flags --web-public and --web-metrics need --http-addr"}
	}
	if f.web.sessionTTL <= 0 {
		return nil, &usageError{"flag --web-session-ttl: must be positive"}
	}
	if f.cfg.WatchBuffer <= 0 {
		return nil, &usageError{"flag --watch-buffer: must be positive"}
	}
	var level slog.Level
	if err := level.UnmarshalText([]byte(f.logLevel)); err != nil {
		return nil, &usageError{fmt.Sprintf("flag --log-level: %v", err)}
	}
	if f.clockStart != "" {
		start, err := time.Parse(time.RFC3339, f.clockStart)
		if err != nil {
			return nil, &usageError{fmt.Sprintf("flag --clock-start: want RFC 3339, got %q", f.clockStart)}
		}
		if !(f.clockRate > 0 && f.clockRate <= 1e6) {
			return nil, &usageError{"flag --clock-rate: must be in (0, 1e6]"}
		}
		t0, rate := time.Now(), f.clockRate
		f.cfg.Now = func() time.Time { return start.Add(time.Duration(float64(time.Since(t0)) * rate)) }
	} else if f.clockRate != 1 {
		return nil, &usageError{"flag --clock-rate needs --clock-start"}
	}
	switch f.accessLog {
	case "info":
		f.cfg.AccessLogLevel = slog.LevelInfo
	case "debug":
		f.cfg.AccessLogLevel = slog.LevelDebug
	case "off":
		f.cfg.AccessLogLevel = server.AccessLogOff
	default:
		return nil, &usageError{fmt.Sprintf("flag --access-log: want debug, info or off, got %q", f.accessLog)}
	}
	opts := &slog.HandlerOptions{Level: level}
	switch f.logFormat {
	case "text":
		f.cfg.Logger = slog.New(slog.NewTextHandler(stderr, opts))
	case "json":
		f.cfg.Logger = slog.New(slog.NewJSONHandler(stderr, opts))
	default:
		return nil, &usageError{fmt.Sprintf("flag --log-format: want text or json, got %q", f.logFormat)}
	}
	return f, nil
}

func serve(ctx context.Context, args []string, stderr io.Writer) error {
	f, err := parseServe(args, stderr)
	if err != nil {
		return err
	}
	if f.web.addr != "" {
		return serveWeb(ctx, f)
	}
	return server.Run(ctx, f.cfg)
}

// runToken handles `nightloomd token create|list|revoke`.
func runToken(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 {
		return &usageError{"token: want a subcommand: create, list or revoke (see nightloomd token --help)"}
	}
	switch args[0] {
	case "-h", "-help", "--help", "help":
		fmt.Fprint(stdout, tokenHelp)
		return nil
	}
	fs := newFlagSet("nightloomd token "+args[0], stderr)
	db := fs.String("db", server.DefaultDBPath, dbFlagHelp)
	switch args[0] {
	case "create":
		role := fs.String("role", "", "role of the token: "+roleNames())
		label := fs.String("label", "", "free label (who or what uses the token)")
		ttl := fs.Duration("ttl", 0, "time to live, e.g. 720h; the token is refused from then on (0: never expires)")
		site := fs.String("site", "", "hold the token to this site id: calls about other sites are refused (empty: every site)")
		if err := parse(fs, args[1:]); err != nil {
			return err
		}
		r, err := server.ParseRole(*role)
		if err != nil {
			return &usageError{"flag --role: " + strings.TrimPrefix(err.Error(), "server: ")}
		}
		if *ttl < 0 {
			return &usageError{"flag --ttl: must not be negative"}
		}
		st, err := store.OpenDSN(*db, store.Options{})
		if err != nil {
			return err
		}
		defer st.Close()
		if *site != "" {
			if _, err := st.GetSite(ctx, *site); err != nil {
				if errors.Is(err, store.ErrNotFound) {
					return &usageError{fmt.Sprintf("flag --site: no site %q in %s", *site, *db)}
				}
				return err
			}
		}
		secret, rec, err := server.CreateTokenSpec(ctx, st, server.TokenSpec{Role: r, Label: *label, TTL: *ttl, SiteID: *site})
		if err != nil {
			return err
		}
		// The secret goes to stdout alone, once; it is not stored.
		fmt.Fprintln(stdout, secret)
		fmt.Fprintf(stderr, "created token %s (role %s%s); the secret above is shown only now\n", rec.ID, rec.Role, tokenLimits(rec))
		return nil
	case "list":
		if err := parse(fs, args[1:]); err != nil {
			return err
		}
		st, err := store.OpenDSN(*db, store.Options{})
		if err != nil {
			return err
		}
		defer st.Close()
		tw := tabwriter.NewWriter(stdout, 2, 8, 2, ' ', 0)
		fmt.Fprintln(tw, "ID\tROLE\tSITE\tCREATED\tEXPIRES\tREVOKED\tLABEL")
		token := ""
		for {
			recs, next, err := st.ListTokens(ctx, store.Page{Size: store.MaxPageSize, Token: token})
			if err != nil {
				return err
			}
			for _, t := range recs {
				revoked := "-"
				if t.RevokedAt != nil {
					revoked = t.RevokedAt.UTC().Format(time.RFC3339)
				}
				site, expires := "all", "never"
				if t.SiteID != "" {
					site = t.SiteID
				}
				if t.ExpiresAt != nil {
					expires = t.ExpiresAt.UTC().Format(time.RFC3339)
				}
				fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\n", t.ID, t.Role, site, t.CreatedAt.UTC().Format(time.RFC3339), expires, revoked, t.Label)
			}
			if next == "" {
				break
			}
			token = next
		}
		return tw.Flush()
	case "revoke":
		id := fs.String("id", "", "id of the token to revoke (from `token list`)")
		if err := parse(fs, args[1:]); err != nil {
			return err
		}
		if *id == "" {
			return &usageError{"flag --id: required"}
		}
		st, err := store.OpenDSN(*db, store.Options{})
		if err != nil {
			return err
		}
		defer st.Close()
		rec, err := st.RevokeToken(ctx, *id)
		if err != nil {
			return err
		}
		fmt.Fprintf(stdout, "revoked token %s (role %s) at %s\n", rec.ID, rec.Role, rec.RevokedAt.UTC().Format(time.RFC3339))
		return nil
	}
	return &usageError{fmt.Sprintf("token: unknown subcommand %q (want create, list or revoke)", args[0])}
}

// tokenLimits describes a token's expiry and site, for the create message.
func tokenLimits(t store.Token) string {
	var b strings.Builder
	if t.ExpiresAt != nil {
		fmt.Fprintf(&b, ", expires %s", t.ExpiresAt.UTC().Format(time.RFC3339))
	}
	if t.SiteID != "" {
		fmt.Fprintf(&b, ", held to site %s", t.SiteID)
	}
	return b.String()
}

// tokenHelp is `nightloomd token --help`.
const tokenHelp = `nightloomd token: bearer tokens for the gRPC API and the web pages.
Only the SHA-256 of a secret is stored; the secret is printed once, on stdout.

  nightloomd token create --role ROLE [--label L] [--ttl DURATION] [--site SITE_ID] [--db PATH]
      make a token; ROLE is viewer, telescope, operator or admin (see the
      README's table of commands by role). --ttl makes it expire (e.g. 720h);
      --site holds it to one site: calls about any other site, creating sites
      and changing targets (shared by every site) are refused.
  nightloomd token list [--db PATH]
      every token: id, role, site, created, expires, revoked, label (never
      the secret).
  nightloomd token revoke --id ID [--db PATH]
      refuse the token from now on; a running daemon ends its open
      WatchPlans streams within seconds, and web sessions made with it.

Each subcommand takes -h for its flags. --db defaults to nightloom.db.
`

// serveUsage heads the daemon's -h output.
const serveUsage = `nightloomd: the nightloom gRPC scheduling daemon.

  nightloomd [flags]                 serve until SIGINT or SIGTERM
  nightloomd token create|list|revoke  manage bearer tokens (nightloomd token --help)

Flags:
`

func roleNames() string {
	var names []string
	for _, r := range server.Roles {
		names = append(names, string(r))
	}
	return strings.Join(names, ", ")
}

const dbFlagHelp = "SQLite database file, or a postgres:// URL for a database that several daemons share"

// runCopyDB handles `nightloomd copy-db --from DB --to DB`.
func runCopyDB(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("nightloomd copy-db", stderr)
	from := fs.String("from", "", "database to copy from (SQLite file or postgres:// URL); stop its daemons first")
	to := fs.String("to", "", "empty database to copy into (SQLite file or postgres:// URL); created and migrated if needed")
	if err := parse(fs, args); err != nil {
		return err
	}
	switch {
	case *from == "":
		return &usageError{"flag --from: required"}
	case *to == "":
		return &usageError{"flag --to: required"}
	case *from == *to:
		return &usageError{"flags --from and --to: name two different databases"}
	}
	if !store.IsPostgresDSN(*from) {
		if _, err := os.Stat(*from); err != nil {
			return &usageError{fmt.Sprintf("flag --from: %v", err)}
		}
	}
	src, err := store.OpenDSN(*from, store.Options{})
	if err != nil {
		return err
	}
	defer src.Close()
	dst, err := store.OpenDSN(*to, store.Options{})
	if err != nil {
		return err
	}
	defer dst.Close()
	st, err := store.Copy(ctx, src, dst)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "copied %v from %s to %s\n", st, src.Dialect(), dst.Dialect())
	return nil
}
