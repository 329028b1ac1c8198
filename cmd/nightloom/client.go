package main

// The connection to a nightloomd daemon: flags and environment, dialing
// with an optional CA file and a bearer token, and the translation of gRPC
// status errors (with their google.rpc.BadRequest field violations) into
// messages that name the field at fault.

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"net"
	"os"
	"strings"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Environment variables that stand in for --server and --token.
const (
	envServer = "NIGHTLOOM_SERVER"
	envToken  = "NIGHTLOOM_TOKEN"
)

// defaultServer is where the client looks for a daemon when neither
// --server nor NIGHTLOOM_SERVER says otherwise.
const defaultServer = "127.0.0.1:7878"

// connFlags are the flags every command that talks to a daemon takes.
type connFlags struct {
	server  string
	token   string
	tlsCA   string
	timeout time.Duration
	json    bool
}

// addConnFlags registers the connection flags (and --json) on fs. Their
// defaults come from the environment.
func addConnFlags(fs *flag.FlagSet) *connFlags {
	c := &connFlags{}
	srv := os.Getenv(envServer)
	if srv == "" {
		srv = defaultServer
	}
	fs.StringVar(&c.server, "server", srv, "daemon address host:port (env "+envServer+")")
	// The token's default is read at dial time, not shown as the flag's
	// default, so that -h never prints a secret.
	fs.StringVar(&c.token, "token", "", "bearer token sent in the authorization metadata (default: env "+envToken+")")
	fs.StringVar(&c.tlsCA, "tls-ca", "", "PEM file of the CA that signed the daemon's certificate; turns TLS on")
	fs.DurationVar(&c.timeout, "timeout", 5*time.Minute, "deadline of each call")
	fs.BoolVar(&c.json, "json", false, "print the response message as protobuf JSON (canonical mapping)")
	return c
}

// api bundles the service clients over one connection.
type api struct {
	cc      *grpc.ClientConn
	sites   pb.SiteServiceClient
	targets pb.TargetServiceClient
	queue   pb.QueueServiceClient
	plans   pb.PlanServiceClient
	sky     pb.SkyServiceClient
	timeout time.Duration
}

// bearer sends "authorization: Bearer TOKEN" with every call. It does not
// require transport security so that a daemon on loopback can be used
// without TLS; dial warns when a token would cross the network in clear.
type bearer string

func (b bearer) GetRequestMetadata(context.Context, ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + string(b)}, nil
}

func (bearer) RequireTransportSecurity() bool { return false }

// dial checks the connection flags and opens a client connection
// (grpc.NewClient connects lazily, on the first call).
func (c *connFlags) dial(stderr io.Writer) (*api, error) {
	host, port, err := net.SplitHostPort(c.server)
	if err != nil || host == "" || port == "" {
		return nil, flagError("server", "want host:port, got %q", c.server)
	}
	if c.token == "" {
		c.token = os.Getenv(envToken)
	}
	var opts []grpc.DialOption
	if c.tlsCA != "" {
		creds, err := credentials.NewClientTLSFromFile(c.tlsCA, "")
		if err != nil {
			return nil, flagError("tls-ca", "%v", err)
		}
		opts = append(opts, grpc.WithTransportCredentials(creds))
	} else {
		opts = append(opts, grpc.WithTransportCredentials(insecure.NewCredentials()))
	}
	if c.token != "" {
		if strings.ContainsAny(c.token, " \t\r\n") {
			return nil, flagError("token", "must not contain white space")
		}
		if c.tlsCA == "" && !isLoopback(host) {
			fmt.Fprintf(stderr, "nightloom: warning: sending the token to %s without TLS (use --tls-ca)\n", c.server)
		}
		opts = append(opts, grpc.WithPerRPCCredentials(bearer(c.token)))
	}
	cc, err := grpc.NewClient(c.server, opts...)
	if err != nil {
		return nil, flagError("server", "%v", err)
	}
	return newAPI(cc, c.timeout), nil
}

func newAPI(cc *grpc.ClientConn, timeout time.Duration) *api {
	return &api{
		cc:      cc,
		sites:   pb.NewSiteServiceClient(cc),
		targets: pb.NewTargetServiceClient(cc),
		queue:   pb.NewQueueServiceClient(cc),
		plans:   pb.NewPlanServiceClient(cc),
		sky:     pb.NewSkyServiceClient(cc),
		timeout: timeout,
	}
}

// ctx returns a context with the call deadline.
func (a *api) ctx() (context.Context, context.CancelFunc) {
	if a.timeout <= 0 {
		return context.WithCancel(context.Background())
	}
	return context.WithTimeout(context.Background(), a.timeout)
}

func (a *api) Close() error { return a.cc.Close() }

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// rpcError is a failed call, kept whole so that callers can look at the
// code; its message lists the field violations.
type rpcError struct {
	call   string
	st     *status.Status
	server string
}

func (e *rpcError) Error() string {
	var b strings.Builder
	switch e.st.Code() {
	case codes.Unavailable:
		fmt.Fprintf(&b, "%s: cannot reach a daemon at %s (%s); is nightloomd running? set --server or %s",
			e.call, e.server, e.st.Message(), envServer)
		return b.String()
	case codes.Unauthenticated, codes.PermissionDenied:
		fmt.Fprintf(&b, "%s: %s: %s (set --token or %s)", e.call, codeName(e.st.Code()), e.st.Message(), envToken)
		return b.String()
	}
	// With field violations the server's message only repeats them: show
	// the code and one line per field instead.
	var fields []*errdetails.BadRequest_FieldViolation
	for _, d := range e.st.Details() {
		if br, ok := d.(*errdetails.BadRequest); ok {
			fields = append(fields, br.GetFieldViolations()...)
		}
	}
	if len(fields) > 0 {
		fmt.Fprintf(&b, "%s: %s, %d field(s) at fault:", e.call, codeName(e.st.Code()), len(fields))
	} else {
		fmt.Fprintf(&b, "%s: %s: %s", e.call, codeName(e.st.Code()), e.st.Message())
	}
	for _, d := range e.st.Details() {
		switch d := d.(type) {
		case *errdetails.BadRequest:
			for _, v := range d.GetFieldViolations() {
				fmt.Fprintf(&b, "\n  field %s: %s", v.GetField(), v.GetDescription())
			}
		case *errdetails.PreconditionFailure:
			for _, v := range d.GetViolations() {
				fmt.Fprintf(&b, "\n  %s %s: %s", v.GetType(), v.GetSubject(), v.GetDescription())
			}
		case *errdetails.ResourceInfo:
			fmt.Fprintf(&b, "\n  %s %s", d.GetResourceType(), d.GetResourceName())
		case *errdetails.RetryInfo:
			fmt.Fprintf(&b, "\n  retry after %v", d.GetRetryDelay().AsDuration())
		}
	}
	return b.String()
}

// codeName spells a status code the way the gRPC specification does
// (INVALID_ARGUMENT), which is what operators find in the daemon's logs.
func codeName(c codes.Code) string {
	names := map[codes.Code]string{
		codes.OK: "OK", codes.Canceled: "CANCELLED", codes.Unknown: "UNKNOWN",
		codes.InvalidArgument: "INVALID_ARGUMENT", codes.DeadlineExceeded: "DEADLINE_EXCEEDED",
		codes.NotFound: "NOT_FOUND", codes.AlreadyExists: "ALREADY_EXISTS",
		codes.PermissionDenied: "PERMISSION_DENIED", codes.ResourceExhausted: "RESOURCE_EXHAUSTED",
		codes.FailedPrecondition: "FAILED_PRECONDITION", codes.Aborted: "ABORTED",
		codes.OutOfRange: "OUT_OF_RANGE", codes.Unimplemented: "UNIMPLEMENTED",
		codes.Internal: "INTERNAL", codes.Unavailable: "UNAVAILABLE", codes.DataLoss: "DATA_LOSS",
		codes.Unauthenticated: "UNAUTHENTICATED",
	}
	if n, ok := names[c]; ok {
		return n
	}
	return c.String()
}

// callErr wraps the error of one RPC; nil stays nil.
// allPages calls a List RPC page after page, from an empty page token until
// the server returns none, and gathers the items; call names the RPC in
// errors.
func allPages[T any](a *api, call string, page func(ctx context.Context, token string) ([]T, string, error)) ([]T, error) {
	var out []T
	token := ""
	for {
		ctx, cancel := a.ctx()
		items, next, err := page(ctx, token)
		cancel()
		if err != nil {
			return nil, a.callErr(call, err)
		}
		out = append(out, items...)
		if token = next; token == "" {
			return out, nil
		}
	}
}

func (a *api) callErr(call string, err error) error {
	if err == nil {
		return nil
	}
	st, ok := status.FromError(err)
	if !ok {
		return fmt.Errorf("%s: %w", call, err)
	}
	return &rpcError{call: call, st: st, server: a.cc.Target()}
}

// isCode reports whether err is a failed call with the given code.
func isCode(err error, c codes.Code) bool {
	var re *rpcError
	return errors.As(err, &re) && re.st.Code() == c
}
