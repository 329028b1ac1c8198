// Command nightloomd is the nightloom daemon: the gRPC scheduling service
// over a SQLite file, or over PostgreSQL when several daemons share one
// database (--db postgres://...).
//
//	nightloomd [flags]                       serve (SIGINT/SIGTERM stop it gracefully)
//	nightloomd --http-addr 127.0.0.1:7880    also serve the read-only web pages
//	nightloomd token create --role ROLE [--label L] [--db PATH]
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
}

func parseServe(args []string, stderr io.Writer) (*serveFlags, error) {
	f := &serveFlags{}
	fs := newFlagSet("nightloomd", stderr)
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
	fs.IntVar(&f.cfg.ReplanPriority, "replan-priority", server.DefaultReplanPriority, "queuing an open block of at least this priority replans the running plan (-1: never)")
	fs.IntVar(&f.cfg.WatchBuffer, "watch-buffer", server.DefaultWatchBuffer, "plan versions a WatchPlans stream may fall behind before it is cut off")
	fs.StringVar(&f.web.addr, "http-addr", "", "HTTP address of the read-only web pages, host:port (empty: off); same TLS rules as --listen")
	fs.StringVar(&f.web.public, "web-public", "", "site id whose night pages need no sign-in (empty: none)")
	fs.BoolVar(&f.web.metrics, "web-metrics", false, "also serve Prometheus /metrics on --http-addr")
	fs.DurationVar(&f.web.sessionTTL, "web-session-ttl", web.DefaultSessionTTL, "how long a web sign-in lasts")
	fs.StringVar(&f.logLevel, "log-level", "info", "log level: debug, info, warn or error")
	fs.StringVar(&f.logFormat, "log-format", "text", "log format: text or json")
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
		return &usageError{"token: want a subcommand: create, list or revoke"}
	}
	fs := newFlagSet("nightloomd token "+args[0], stderr)
	db := fs.String("db", server.DefaultDBPath, dbFlagHelp)
	switch args[0] {
	case "create":
		role := fs.String("role", "", "role of the token: "+roleNames())
		label := fs.String("label", "", "free label (who or what uses the token)")
		if err := parse(fs, args[1:]); err != nil {
			return err
		}
		r, err := server.ParseRole(*role)
		if err != nil {
			return &usageError{"flag --role: " + strings.TrimPrefix(err.Error(), "server: ")}
		}
		st, err := store.OpenDSN(*db, store.Options{})
		if err != nil {
			return err
		}
		defer st.Close()
		secret, rec, err := server.CreateToken(ctx, st, r, *label)
		if err != nil {
			return err
		}
		// The secret goes to stdout alone, once; it is not stored.
		fmt.Fprintln(stdout, secret)
		fmt.Fprintf(stderr, "created token %s (role %s); the secret above is shown only now\n", rec.ID, rec.Role)
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
		fmt.Fprintln(tw, "ID\tROLE\tCREATED\tREVOKED\tLABEL")
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
				fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", t.ID, t.Role, t.CreatedAt.UTC().Format(time.RFC3339), revoked, t.Label)
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
