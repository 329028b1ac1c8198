package server

import (
	"context"
	"fmt"
	"log/slog"
	"runtime/debug"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/peer"
	"google.golang.org/grpc/status"
)

// The interceptor chain, outermost first:
//
//  1. observe: counts and times every call by method and final code
//     (Prometheus) and logs it (log/slog: method, code, duration, peer,
//     token id; never the token itself or request contents);
//  2. authenticator (auth.go): bearer token and role;
//  3. errorMapper: turns storage and context errors into status codes
//     (errors.go) and a panic into INTERNAL, so that one bad request cannot
//     take the daemon down.

type observer struct {
	log     *slog.Logger
	metrics *metrics
	// access is the level of the record of a call that succeeded
	// (Config.AccessLogLevel); failed calls keep theirs.
	access slog.Level
}

func (o *observer) done(ctx context.Context, method string, start time.Time, err error, stream bool) {
	code := status.Code(err)
	d := time.Since(start)
	o.metrics.observeCall(method, code, d, stream)
	attrs := []any{"method", method, "code", code.String(), "duration_ms", float64(d.Microseconds()) / 1000}
	if p, ok := peer.FromContext(ctx); ok && p.Addr != nil {
		attrs = append(attrs, "peer", p.Addr.String())
	}
	if p, ok := principalFrom(ctx); ok {
		attrs = append(attrs, "token_id", p.tokenID, "role", string(p.role))
	}
	level := slog.LevelInfo
	switch code {
	case codes.OK:
		if o.access >= AccessLogOff {
			return
		}
		level = o.access
	case codes.Internal, codes.Unknown, codes.DataLoss:
		level = slog.LevelError
		attrs = append(attrs, "err", status.Convert(err).Message())
	default:
		attrs = append(attrs, "err", status.Convert(err).Message())
	}
	o.log.Log(ctx, level, "rpc", attrs...)
}

func (o *observer) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
	start := time.Now()
	var pctx context.Context = ctx
	resp, err := handler(withPrincipalSlot(ctx, &pctx), req)
	o.done(pctx, info.FullMethod, start, err, false)
	return resp, err
}

func (o *observer) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	start := time.Now()
	var pctx = ss.Context()
	err := handler(srv, &ctxStream{ServerStream: ss, ctx: withPrincipalSlot(ss.Context(), &pctx)})
	o.done(pctx, info.FullMethod, start, err, true)
	return err
}

// The observer runs outside the authenticator, so it cannot see the context
// the authenticator makes; a slot in the context lets the inner chain hand
// the authenticated context back for the log line.
type slotKey struct{}

func withPrincipalSlot(ctx context.Context, slot *context.Context) context.Context {
	return context.WithValue(ctx, slotKey{}, slot)
}

// reportPrincipal stores ctx (which carries the principal) in the slot.
func reportPrincipal(ctx context.Context) {
	if slot, ok := ctx.Value(slotKey{}).(*context.Context); ok {
		*slot = ctx
	}
}

type errorMapper struct {
	log *slog.Logger
}

func (m *errorMapper) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (resp any, err error) {
	reportPrincipal(ctx)
	defer func() {
		if r := recover(); r != nil {
			m.log.Error("panic in handler", "method", info.FullMethod, "panic", fmt.Sprint(r), "stack", string(debug.Stack()))
			resp, err = nil, status.Error(codes.Internal, "internal error")
		}
	}()
	resp, err = handler(ctx, req)
	return resp, toStatus(m.log, info.FullMethod, err)
}

func (m *errorMapper) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) (err error) {
	reportPrincipal(ss.Context())
	defer func() {
		if r := recover(); r != nil {
			m.log.Error("panic in handler", "method", info.FullMethod, "panic", fmt.Sprint(r), "stack", string(debug.Stack()))
			err = status.Error(codes.Internal, "internal error")
		}
	}()
	return toStatus(m.log, info.FullMethod, handler(srv, ss))
}
