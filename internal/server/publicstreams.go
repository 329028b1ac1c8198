package server

// Streams of the public services (health Watch, server reflection) are
// open-ended: a load balancer's health watcher never hangs up by itself, so
// GracefulStop would wait for the whole shutdown timeout. The daemon ends
// them first when it shuts down: their context is cancelled (health Watch
// returns) and a receive that waits is cut short (reflection, which blocks
// in Recv), both with UNAVAILABLE.

import (
	"context"
	"sync"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

var errShuttingDown = status.Error(codes.Unavailable, "nightloomd is shutting down")

type publicStreams struct {
	mu     sync.Mutex
	closed bool
	ending chan struct{} // closed by endAll
}

func newPublicStreams() *publicStreams { return &publicStreams{ending: make(chan struct{})} }

// endAll ends every public stream, open or opened later.
func (p *publicStreams) endAll() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if !p.closed {
		p.closed = true
		close(p.ending)
	}
}

func (p *publicStreams) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	if !publicMethod(info.FullMethod) {
		return handler(srv, ss)
	}
	ctx, cancel := context.WithCancel(ss.Context())
	defer cancel()
	go func() {
		select {
		case <-p.ending:
			cancel()
		case <-ctx.Done():
		}
	}()
	err := handler(srv, &endingStream{ServerStream: ss, ctx: ctx, ending: p.ending})
	select {
	case <-p.ending:
		return errShuttingDown
	default:
		return err
	}
}

// endingStream is a public stream whose receives give up at shutdown.
type endingStream struct {
	grpc.ServerStream
	ctx    context.Context
	ending chan struct{}
}

func (s *endingStream) Context() context.Context { return s.ctx }

// RecvMsg waits for the next message or the shutdown, whichever comes
// first. A receive cut short leaves its goroutine blocked until the
// transport closes the stream, which the handler's return brings about.
func (s *endingStream) RecvMsg(m any) error {
	select {
	case <-s.ending:
		return errShuttingDown
	default:
	}
	done := make(chan error, 1)
	go func() { done <- s.ServerStream.RecvMsg(m) }()
	select {
	case err := <-done:
		return err
	case <-s.ending:
		return errShuttingDown
	}
}
