package server

import (
	"context"
	"time"

	grpcprom "github.com/grpc-ecosystem/go-grpc-middleware/providers/prometheus"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"google.golang.org/grpc/codes"
)

// metrics are the daemon's Prometheus metrics, on a registry of its own (so
// that several servers in one process, as in tests and `nightloom demo`, do
// not collide):
//
//   - nightloom_rpc_requests_total{method,code}: calls by full method name
//     and final status code;
//   - nightloom_rpc_duration_seconds{method,code}: the latency of unary
//     calls (streams are timed by grpc_server_handling_seconds, whose
//     grpc_type label keeps them apart);
//   - nightloom_plan_solve_seconds{origin}: wall time of one night's
//     planning (grid, visibility, solver) by what asked for the plan;
//   - nightloom_queue_open_blocks: blocks queued at all sites (read from
//     the store at scrape time);
//   - nightloom_plan_watchers: open WatchPlans streams;
//   - nightloom_plan_versions_total: plan versions stored;
//   - the standard gRPC server metrics of go-grpc-middleware's Prometheus
//     provider: grpc_server_started_total, grpc_server_handled_total,
//     grpc_server_msg_received_total, grpc_server_msg_sent_total and
//     grpc_server_handling_seconds, labelled grpc_type, grpc_service,
//     grpc_method (and grpc_code where the call has ended), so that the
//     usual gRPC dashboards and alerts work unchanged;
//   - the Go runtime and process collectors.
type metrics struct {
	reg      *prometheus.Registry
	grpc     *grpcprom.ServerMetrics
	requests *prometheus.CounterVec
	latency  *prometheus.HistogramVec
	solve    *prometheus.HistogramVec
	versions prometheus.Counter
}

func newMetrics(queueSize func(context.Context) (int, error), watchers func() int) *metrics {
	m := &metrics{reg: prometheus.NewRegistry()}
	m.requests = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "nightloom_rpc_requests_total",
		Help: "gRPC calls handled, by full method name and status code.",
	}, []string{"method", "code"})
	m.latency = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    "nightloom_rpc_duration_seconds",
		Help:    "Latency of unary gRPC calls in seconds, by full method name and status code (streams: see grpc_server_handling_seconds).",
		Buckets: prometheus.ExponentialBuckets(0.0005, 2.5, 14), // 0.5 ms .. ~75 s
	}, []string{"method", "code"})
	m.solve = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name:    "nightloom_plan_solve_seconds",
		Help:    "Wall time of planning one night (grid, visibility and solver), by plan origin.",
		Buckets: prometheus.ExponentialBuckets(0.01, 2, 14), // 10 ms .. ~80 s
	}, []string{"origin"})
	m.versions = prometheus.NewCounter(prometheus.CounterOpts{
		Name: "nightloom_plan_versions_total",
		Help: "Plan versions stored since the daemon started.",
	})
	queue := prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "nightloom_queue_open_blocks",
		Help: "Blocks queued (open or not yet marked expired) at all sites.",
	}, func() float64 {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		n, err := queueSize(ctx)
		if err != nil {
			return -1
		}
		return float64(n)
	})
	watch := prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "nightloom_plan_watchers",
		Help: "Open WatchPlans streams.",
	}, func() float64 { return float64(watchers()) })
	m.grpc = grpcprom.NewServerMetrics(grpcprom.WithServerHandlingTimeHistogram(
		grpcprom.WithHistogramBuckets(prometheus.ExponentialBuckets(0.0005, 2.5, 14))))
	m.reg.MustRegister(m.grpc, m.requests, m.latency, m.solve, m.versions, queue, watch,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}

func (m *metrics) observeCall(method string, code codes.Code, d time.Duration, stream bool) {
	c := code.String()
	m.requests.WithLabelValues(method, c).Inc()
	if !stream {
		m.latency.WithLabelValues(method, c).Observe(d.Seconds())
	}
}

func (m *metrics) observeSolve(origin string, d time.Duration) {
	m.solve.WithLabelValues(origin).Observe(d.Seconds())
}
