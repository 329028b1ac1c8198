package server

import (
	"log/slog"

	"google.golang.org/grpc"
	"google.golang.org/grpc/reflection"
	v1reflectiongrpc "google.golang.org/grpc/reflection/grpc_reflection_v1"
	v1alphareflectiongrpc "google.golang.org/grpc/reflection/grpc_reflection_v1alpha"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// registerReflection serves server reflection from the API's descriptors
// with source info (nightloomv1.SourceResolver), so that a generic client's
// "describe" shows the comments: units, ranges, errors. Without them
// (which a test would catch) it falls back to the plain descriptors.
func registerReflection(s *grpc.Server, log *slog.Logger) {
	res, err := nightloomv1.SourceResolver()
	if err != nil {
		log.Warn("reflection without comments", "err", err.Error())
		reflection.Register(s)
		return
	}
	opts := reflection.ServerOptions{Services: s, DescriptorResolver: res}
	v1reflectiongrpc.RegisterServerReflectionServer(s, reflection.NewServerV1(opts))
	v1alphareflectiongrpc.RegisterServerReflectionServer(s, reflection.NewServer(opts))
}
