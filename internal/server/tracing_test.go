package server

import (
	"context"
	"testing"
	"time"

	"go.opentelemetry.io/otel/attribute"
	sdktrace "go.opentelemetry.io/otel/sdk/trace"
	"go.opentelemetry.io/otel/sdk/trace/tracetest"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestTracingSpans: with a tracer provider (an in-memory recorder), each
// call is one server span named after its method, with the RPC attributes
// and the status code.
func TestTracingSpans(t *testing.T) {
	rec := tracetest.NewSpanRecorder()
	tp := sdktrace.NewTracerProvider(sdktrace.WithSpanProcessor(rec))
	e := newEnv(t, "", func(c *Config) { c.TracerProvider = tp })
	if _, err := e.sites.ListSites(e.admin(), &nightloomv1.ListSitesRequest{}); err != nil {
		t.Fatal(err)
	}
	_, _ = e.sites.GetSite(e.admin(), &nightloomv1.GetSiteRequest{SiteId: "site-nonesuch"})
	// The server ends its span after the status is on the wire, so the
	// client can see the reply first: wait (bounded) for both spans.
	spans := map[string]sdktrace.ReadOnlySpan{}
	for deadline := time.Now().Add(5 * time.Second); ; time.Sleep(10 * time.Millisecond) {
		_ = tp.ForceFlush(context.Background())
		for _, s := range rec.Ended() {
			spans[s.Name()] = s
		}
		if len(spans) >= 2 || time.Now().After(deadline) {
			break
		}
	}
	// Attribute names of otelgrpc v0.72.0 (the RPC semantic conventions it
	// follows: rpc.system.name, rpc.method, rpc.response.status_code).
	for name, code := range map[string]string{"nightloom.v1.SiteService/ListSites": "OK", "nightloom.v1.SiteService/GetSite": "NOT_FOUND"} {
		s, ok := spans[name]
		if !ok {
			t.Errorf("no span %q among %d spans", name, len(rec.Ended()))
			continue
		}
		attrs := map[attribute.Key]attribute.Value{}
		for _, kv := range s.Attributes() {
			attrs[kv.Key] = kv.Value
		}
		if attrs["rpc.system.name"].AsString() != "grpc" || attrs["rpc.method"].AsString() != name || attrs["rpc.response.status_code"].AsString() != code {
			t.Errorf("span %s: attributes %v, want rpc.system.name grpc, rpc.method and status code %s", name, s.Attributes(), code)
		}
	}
}

// TestTracingFromEnv: off unless the OTEL_* variables ask for it.
func TestTracingFromEnv(t *testing.T) {
	for _, c := range []struct {
		name string
		env  map[string]string
		on   bool
		bad  bool
	}{
		{"nothing set", nil, false, false},
		{"console", map[string]string{"OTEL_TRACES_EXPORTER": "console"}, true, false},
		{"otlp by endpoint", map[string]string{"OTEL_EXPORTER_OTLP_ENDPOINT": "http://127.0.0.1:4317"}, true, false},
		{"none", map[string]string{"OTEL_TRACES_EXPORTER": "none", "OTEL_EXPORTER_OTLP_ENDPOINT": "http://127.0.0.1:4317"}, false, false},
		{"disabled", map[string]string{"OTEL_SDK_DISABLED": "true", "OTEL_TRACES_EXPORTER": "console"}, false, false},
		{"unknown exporter", map[string]string{"OTEL_TRACES_EXPORTER": "zipkin"}, false, true},
	} {
		tp, err := tracerFromEnv(context.Background(), func(k string) string { return c.env[k] })
		if (err != nil) != c.bad || (tp != nil) != c.on {
			t.Errorf("%s: provider %v, error %v; want on %v, error %v", c.name, tp != nil, err, c.on, c.bad)
		}
		if tp != nil {
			_ = tp.Shutdown(context.Background())
		}
	}
}
