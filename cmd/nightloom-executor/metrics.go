package main

// Self-measurement: for every reported run, planned versus actual start and
// end, and the slew the mount really took against the model's figure; as
// Prometheus metrics and as a night summary.

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"sort"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

type metrics struct {
	reg         *prometheus.Registry
	runs        *prometheus.CounterVec
	frames      prometheus.Counter
	refusals    prometheus.Counter
	replans     prometheus.Counter
	weatherSafe prometheus.Gauge
	startDelay  prometheus.Histogram
	endDelay    prometheus.Histogram
	slewActual  prometheus.Histogram
	slewError   prometheus.Histogram

	mu   sync.Mutex
	done []*runRecord
}

func newMetrics() *metrics {
	delays := []float64{-300, -60, -30, -10, -5, -2, 0, 2, 5, 10, 30, 60, 300}
	m := &metrics{
		reg: prometheus.NewRegistry(),
		runs: prometheus.NewCounterVec(prometheus.CounterOpts{Name: "nightloom_executor_runs_total",
			Help: "Runs reported, by outcome."}, []string{"outcome"}),
		frames: prometheus.NewCounter(prometheus.CounterOpts{Name: "nightloom_executor_frames_total",
			Help: "Frames written."}),
		refusals: prometheus.NewCounter(prometheus.CounterOpts{Name: "nightloom_executor_slew_refusals_total",
			Help: "Slews refused by the executor's own Sun and horizon checks."}),
		replans: prometheus.NewCounter(prometheus.CounterOpts{Name: "nightloom_executor_replans_total",
			Help: "Replans asked for (weather closures and reopenings)."}),
		weatherSafe: prometheus.NewGauge(prometheus.GaugeOpts{Name: "nightloom_executor_weather_safe",
			Help: "1 when the weather device says it is safe to observe."}),
		startDelay: prometheus.NewHistogram(prometheus.HistogramOpts{Name: "nightloom_executor_run_start_delay_seconds",
			Help: "Actual minus planned start of the first exposure of each run.", Buckets: delays}),
		endDelay: prometheus.NewHistogram(prometheus.HistogramOpts{Name: "nightloom_executor_run_end_delay_seconds",
			Help: "Actual minus planned end of each run.", Buckets: delays}),
		slewActual: prometheus.NewHistogram(prometheus.HistogramOpts{Name: "nightloom_executor_slew_seconds",
			Help: "Slew time the mount took (command to slew done).", Buckets: prometheus.ExponentialBuckets(0.5, 2, 10)}),
		slewError: prometheus.NewHistogram(prometheus.HistogramOpts{Name: "nightloom_executor_slew_model_error_seconds",
			Help: "Actual slew time minus the overhead model's.", Buckets: []float64{-60, -30, -10, -5, -2, -1, 0, 1, 2, 5, 10, 30, 60}}),
	}
	m.reg.MustRegister(m.runs, m.frames, m.refusals, m.replans, m.weatherSafe, m.startDelay, m.endDelay, m.slewActual, m.slewError)
	return m
}

// observe records a reported run.
func (m *metrics) observe(r *runRecord) {
	m.runs.WithLabelValues(r.Outcome).Inc()
	if !r.Start.IsZero() {
		m.startDelay.Observe(r.Start.Sub(r.PlannedStart).Seconds())
		m.endDelay.Observe(r.End.Sub(r.PlannedEnd).Seconds())
	}
	if r.SlewActualS > 0 {
		m.slewActual.Observe(r.SlewActualS)
		m.slewError.Observe(r.SlewActualS - r.SlewModelS)
	}
	m.mu.Lock()
	m.done = append(m.done, r)
	m.mu.Unlock()
}

// runFigures is one run's line of the summary (also its JSON form).
type runFigures struct {
	RunID             string    `json:"run_id"`
	BlockID           string    `json:"block_id"`
	Target            string    `json:"target"`
	Outcome           string    `json:"outcome"`
	Frames            int       `json:"frames"`
	PlannedStart      time.Time `json:"planned_start"`
	ActualStart       time.Time `json:"actual_start"`
	PlannedEnd        time.Time `json:"planned_end"`
	ActualEnd         time.Time `json:"actual_end"`
	StartDelayS       float64   `json:"start_delay_s"`
	EndDelayS         float64   `json:"end_delay_s"`
	SlewDeg           float64   `json:"slew_deg"`
	SlewAxisDeg       float64   `json:"slew_axis_deg"`
	SlewActualS       float64   `json:"slew_actual_s"`
	SlewModelS        float64   `json:"slew_model_s"`
	SlewErrorS        float64   `json:"slew_error_s"`
	ReportID          string    `json:"report_id"`
	PlanID            string    `json:"plan_id"`
	FirstFrameNum     int       `json:"first_frame"`
	PointingOffArcsec float64   `json:"pointing_off_arcsec"`
}

func (m *metrics) figures() []runFigures {
	m.mu.Lock()
	defer m.mu.Unlock()
	var out []runFigures
	for _, r := range m.done {
		f := runFigures{RunID: r.RunID, BlockID: r.BlockID, Target: r.Target, Outcome: r.Outcome, Frames: len(r.Files),
			PlannedStart: r.PlannedStart, ActualStart: r.Start, PlannedEnd: r.PlannedEnd, ActualEnd: r.End,
			SlewDeg: r.SlewDegrees, SlewAxisDeg: r.SlewAxisDeg, SlewActualS: r.SlewActualS, SlewModelS: r.SlewModelS, ReportID: r.ReportID, PlanID: r.PlanID,
			FirstFrameNum: r.FirstFrame, PointingOffArcsec: r.PointingOffArcsec}
		if !r.Start.IsZero() {
			f.StartDelayS = r.Start.Sub(r.PlannedStart).Seconds()
			f.EndDelayS = r.End.Sub(r.PlannedEnd).Seconds()
		}
		if r.SlewActualS > 0 {
			f.SlewErrorS = r.SlewActualS - r.SlewModelS
		}
		out = append(out, f)
	}
	sort.Slice(out, func(i, k int) bool { return out[i].PlannedStart.Before(out[k].PlannedStart) })
	return out
}

// summary prints the night's runs and the medians the overhead model is
// calibrated with.
func (m *metrics) summary(w io.Writer) {
	figs := m.figures()
	fmt.Fprintf(w, "night summary: %d runs reported\n", len(figs))
	fmt.Fprintf(w, "%-20s %-11s %6s %20s %10s %10s %8s %8s %8s %8s\n", "target", "outcome", "frames", "planned start (UTC)",
		"start +s", "end +s", "axis deg", "slew s", "model s", "error s")
	var starts, ends, errs, axis, secs []float64
	for _, f := range figs {
		fmt.Fprintf(w, "%-20s %-11s %6d %20s %10.1f %10.1f %8.2f %8.1f %8.1f %8.1f\n", truncate(f.Target, 20), f.Outcome, f.Frames,
			f.PlannedStart.UTC().Format("2006-01-02 15:04:05"), f.StartDelayS, f.EndDelayS, f.SlewAxisDeg, f.SlewActualS, f.SlewModelS, f.SlewErrorS)
		if !f.ActualStart.IsZero() {
			starts = append(starts, f.StartDelayS)
			ends = append(ends, f.EndDelayS)
		}
		if f.SlewActualS > 0 {
			errs = append(errs, f.SlewErrorS)
			if f.SlewAxisDeg > 1 {
				axis, secs = append(axis, f.SlewAxisDeg), append(secs, f.SlewActualS)
			}
		}
	}
	fmt.Fprintf(w, "median start delay %.1f s, median end delay %.1f s, median slew error %.1f s (actual - model)\n",
		median(starts), median(ends), median(errs))
	switch rate, acc, ok := fitSlews(axis, secs); {
	case ok && acc > 0:
		fmt.Fprintf(w, "slew fit over %d slews > 1 deg: axis rate %.2f deg/s, acceleration %.2f deg/s^2 (t = d/rate + rate/acceleration)\n",
			len(axis), rate, acc)
	case ok:
		fmt.Fprintf(w, "slew fit over %d slews > 1 deg: axis rate %.2f deg/s, no measurable acceleration time (t = d/rate; enter a high acceleration)\n",
			len(axis), rate)
	default:
		fmt.Fprintf(w, "slew fit: too few slews > 1 deg of different lengths (%d)\n", len(axis))
	}
}

// fitSlews fits the trapezoidal slew profile t = d/v + v/a (a move long
// enough to reach the rate v: accelerate for v/a, cruise, decelerate for
// v/a) to slews of d degrees on the slower axis taking t seconds, by
// ordinary least squares on t = t0 + d/v; then a = v/t0. When the fitted
// t0 is not positive the acceleration time is too short to measure: the
// rate is then fitted through the origin (t = d/v) and acc is 0. ok is
// false with fewer than two distinct lengths.
func fitSlews(d, t []float64) (rate, acc float64, ok bool) {
	n := float64(len(d))
	if len(d) < 2 {
		return 0, 0, false
	}
	var sx, sy, sxx, sxy float64
	for i := range d {
		sx, sy, sxx, sxy = sx+d[i], sy+t[i], sxx+d[i]*d[i], sxy+d[i]*t[i]
	}
	den := n*sxx - sx*sx
	if den <= 1e-9*n*sxx {
		return 0, 0, false
	}
	slope := (n*sxy - sx*sy) / den
	t0 := (sy - slope*sx) / n
	if slope > 0 && t0 > 1e-6*sy/n { // an intercept below a millionth of the mean time is none
		return 1 / slope, 1 / slope / t0, true
	}
	if sxy <= 0 {
		return 0, 0, false
	}
	return sxx / sxy, 0, true
}

// writeJSON writes the figures as a JSON array.
func (m *metrics) writeJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(m.figures())
}

func median(xs []float64) float64 {
	if len(xs) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	if n := len(s); n%2 == 1 {
		return s[n/2]
	} else {
		return (s[n/2-1] + s[n/2]) / 2
	}
}
