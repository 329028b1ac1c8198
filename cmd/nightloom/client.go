package main

// The connection to a nightloomd daemon: flags and environment, dialing
// with an optional CA file and a bearer token, and the translation of gRPC
// status errors (with their google.rpc.BadRequest field violations) into
// messages that name the field at fault.

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"flag"
	"fmt"
	"io"
	"net"
	"os"
	"runtime"
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
	tlsCert string
	tlsKey  string
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
	fs.StringVar(&c.tlsCert, "tls-cert", "", "PEM client certificate for mutual TLS (with --tls-key); turns TLS on")
	fs.StringVar(&c.tlsKey, "tls-key", "", "PEM private key of --tls-cert")
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
	// programs keeps the programs of a shared telescope.
	programs pb.ProgramServiceClient
	timeout  time.Duration
	// tlsOn and clientCert: how the connection was made (for messages).
	tlsOn, clientCert bool
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
	tlsOn := c.tlsCA != "" || c.tlsCert != ""
	if tlsOn {
		tc, err := c.tlsConfig(stderr)
		if err != nil {
			return nil, err
		}
		opts = append(opts, grpc.WithTransportCredentials(credentials.NewTLS(tc)))
	} else {
		opts = append(opts, grpc.WithTransportCredentials(insecure.NewCredentials()))
	}
	if c.token != "" {
		if strings.ContainsAny(c.token, " \t\r\n") {
			return nil, flagError("token", "must not contain white space")
		}
		if !tlsOn && !isLoopback(host) {
			fmt.Fprintf(stderr, "nightloom: warning: sending the token to %s without TLS (use --tls-ca)\n", c.server)
		}
		opts = append(opts, grpc.WithPerRPCCredentials(bearer(c.token)))
	}
	cc, err := grpc.NewClient(c.server, opts...)
	if err != nil {
		return nil, flagError("server", "%v", err)
	}
	a := newAPI(cc, c.timeout)
	a.tlsOn, a.clientCert = tlsOn, c.tlsCert != ""
	return a, nil
}

// tlsConfig builds the client's TLS: the daemon's CA (--tls-ca, else the
// system's roots) and, for mutual TLS, a client certificate and key.
func (c *connFlags) tlsConfig(stderr io.Writer) (*tls.Config, error) {
	tc := &tls.Config{MinVersion: tls.VersionTLS12}
	if c.tlsCA != "" {
		pemData, err := os.ReadFile(c.tlsCA)
		if err != nil {
			return nil, flagError("tls-ca", "%v", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pemData) {
			return nil, flagError("tls-ca", "%s holds no PEM certificate", c.tlsCA)
		}
		tc.RootCAs = pool
	}
	if (c.tlsCert == "") != (c.tlsKey == "") {
		return nil, flagError("tls-cert", "--tls-cert and --tls-key go together")
	}
	if c.tlsCert != "" {
		if w := keyFileWarning(c.tlsKey); w != "" {
			fmt.Fprintf(stderr, "nightloom: warning: %s\n", w)
		}
		cert, err := tls.LoadX509KeyPair(c.tlsCert, c.tlsKey)
		if err != nil {
			return nil, flagError("tls-cert", "%v", err)
		}
		tc.Certificates = []tls.Certificate{cert}
	}
	return tc, nil
}

// keyFileWarning returns a warning when a private key file can be read or
// written by others (mode bits 0o077), as internal/server.KeyFileWarning
// does for the daemon; "" otherwise.
func keyFileWarning(path string) string {
	if runtime.GOOS == "windows" {
		return ""
	}
	fi, err := os.Stat(path)
	if err != nil {
		return ""
	}
	if m := fi.Mode().Perm(); m&0o077 != 0 {
		return fmt.Sprintf("private key file %s has mode %04o: others can read it; chmod 600 it", path, m)
	}
	return ""
}

func newAPI(cc *grpc.ClientConn, timeout time.Duration) *api {
	return &api{
		cc:       cc,
		sites:    pb.NewSiteServiceClient(cc),
		targets:  pb.NewTargetServiceClient(cc),
		queue:    pb.NewQueueServiceClient(cc),
		plans:    pb.NewPlanServiceClient(cc),
		sky:      pb.NewSkyServiceClient(cc),
		programs: pb.NewProgramServiceClient(cc),
		timeout:  timeout,
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
	// tlsOn and clientCert: how the client connected (for messages).
	tlsOn, clientCert bool
}

func (e *rpcError) Error() string {
	var b strings.Builder
	switch e.st.Code() {
	case codes.Unavailable:
		if why := transportFailure(e.st.Message(), e.tlsOn, e.clientCert); why != "" {
			fmt.Fprintf(&b, "%s: %s: %s (%s)", e.call, e.server, why, e.st.Message())
			return b.String()
		}
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

// transportFailure says in words what a connection failure means, from the
// texts Go's net and crypto/tls packages and grpc-go put in UNAVAILABLE
// messages; "" when it is none of the known ones.
// tlsOn and clientCert say how the client connected: a connection the
// daemon drops during a TLS handshake without a client certificate is a
// daemon that wants one.
func transportFailure(msg string, tlsOn, clientCert bool) string {
	m := strings.ToLower(msg)
	dropped := strings.Contains(m, "broken pipe") || strings.Contains(m, "connection reset") || strings.Contains(m, "eof") ||
		strings.Contains(m, "error reading server preface")
	switch {
	case dropped && tlsOn && !clientCert:
		return "the daemon dropped the TLS connection: it probably asks for a client certificate (--tls-cert and --tls-key)"
	case strings.Contains(m, "connection refused"):
		return "cannot reach a daemon there: nothing listens; is nightloomd running? set --server or " + envServer
	case strings.Contains(m, "certificate required"), strings.Contains(m, "bad certificate"),
		strings.Contains(m, "unknown certificate authority") && !strings.Contains(m, "x509"):
		return "the daemon refused the TLS handshake: it asks for a client certificate its CA signed (--tls-cert and --tls-key)"
	case strings.Contains(m, "x509: certificate signed by unknown authority"):
		return "the daemon's certificate is not signed by a CA this client trusts (--tls-ca)"
	case strings.Contains(m, "x509: certificate is valid for"), strings.Contains(m, "x509: cannot validate certificate"):
		return "the daemon's certificate does not name this address (check --server)"
	case strings.Contains(m, "x509: certificate has expired"):
		return "the daemon's certificate has expired or is not yet valid"
	case strings.Contains(m, "first record does not look like a tls handshake"):
		return "the daemon speaks plaintext, not TLS: drop --tls-ca, --tls-cert and --tls-key"
	case dropped && !tlsOn:
		return "the daemon closed the connection at once: it probably speaks TLS (give --tls-ca, and --tls-cert/--tls-key if it asks for client certificates)"
	}
	return ""
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
	return &rpcError{call: call, st: st, server: a.cc.Target(), tlsOn: a.tlsOn, clientCert: a.clientCert}
}

// isCode reports whether err is a failed call with the given code.
func isCode(err error, c codes.Code) bool {
	var re *rpcError
	return errors.As(err, &re) && re.st.Code() == c
}
