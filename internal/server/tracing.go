package server

// Optional OpenTelemetry tracing of every call (otelgrpc's server stats
// handler), configured only by the standard OTEL_* environment variables
// and off unless they ask for it:
//
//   - OTEL_SDK_DISABLED=true: off whatever else is set;
//   - OTEL_TRACES_EXPORTER=otlp (or unset with OTEL_EXPORTER_OTLP_ENDPOINT
//     or OTEL_EXPORTER_OTLP_TRACES_ENDPOINT set): OTLP over gRPC, the
//     exporter reading its own OTEL_EXPORTER_OTLP_* variables (endpoint,
//     headers, certificates, timeout);
//   - OTEL_TRACES_EXPORTER=console: spans as JSON on stderr;
//   - OTEL_TRACES_EXPORTER=none, or nothing set: off.
//
// OTEL_SERVICE_NAME and OTEL_RESOURCE_ATTRIBUTES name the service (default
// "nightloomd"); OTEL_TRACES_SAMPLER and its argument choose the sampler, as
// the SDK reads them. Incoming W3C trace context (traceparent) is honoured.

import (
	"context"
	"fmt"
	"os"
	"strings"

	"go.opentelemetry.io/contrib/instrumentation/google.golang.org/grpc/otelgrpc"
	"go.opentelemetry.io/otel/exporters/otlp/otlptrace/otlptracegrpc"
	"go.opentelemetry.io/otel/exporters/stdout/stdouttrace"
	"go.opentelemetry.io/otel/propagation"
	"go.opentelemetry.io/otel/sdk/resource"
	sdktrace "go.opentelemetry.io/otel/sdk/trace"
	semconv "go.opentelemetry.io/otel/semconv/v1.37.0"
	"go.opentelemetry.io/otel/trace"
	"google.golang.org/grpc"
)

// tracerFromEnv builds the tracer provider the OTEL_* variables ask for,
// or nil when tracing is off. getenv is os.Getenv outside tests.
func tracerFromEnv(ctx context.Context, getenv func(string) string) (*sdktrace.TracerProvider, error) {
	if strings.EqualFold(strings.TrimSpace(getenv("OTEL_SDK_DISABLED")), "true") {
		return nil, nil
	}
	kind := strings.ToLower(strings.TrimSpace(getenv("OTEL_TRACES_EXPORTER")))
	if kind == "" && (getenv("OTEL_EXPORTER_OTLP_ENDPOINT") != "" || getenv("OTEL_EXPORTER_OTLP_TRACES_ENDPOINT") != "") {
		kind = "otlp"
	}
	var exp sdktrace.SpanExporter
	var err error
	switch kind {
	case "", "none":
		return nil, nil
	case "otlp":
		exp, err = otlptracegrpc.New(ctx)
	case "console":
		exp, err = stdouttrace.New(stdouttrace.WithWriter(os.Stderr))
	default:
		return nil, fmt.Errorf("server: OTEL_TRACES_EXPORTER=%q: want otlp, console or none", kind)
	}
	if err != nil {
		return nil, fmt.Errorf("server: trace exporter: %w", err)
	}
	res, err := resource.Merge(resource.NewSchemaless(semconv.ServiceName("nightloomd")), resource.Default())
	if err != nil {
		res = resource.Default()
	}
	return sdktrace.NewTracerProvider(sdktrace.WithBatcher(exp), sdktrace.WithResource(res)), nil
}

// tracingOption is the gRPC server option that traces every call with tp.
func tracingOption(tp trace.TracerProvider) grpc.ServerOption {
	return grpc.StatsHandler(otelgrpc.NewServerHandler(otelgrpc.WithTracerProvider(tp),
		otelgrpc.WithPropagators(propagation.NewCompositeTextMapPropagator(propagation.TraceContext{}, propagation.Baggage{}))))
}
