package metrics

import (
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/residua/residua/solve"
)

// outcomes are the values of the outcome label of
// residua_solves_finished_total: the outcome words of package solve, and
// "other" for anything else.
func outcomes() []string {
	out := make([]string, 0, len(solve.Outcomes)+1)
	for _, o := range solve.Outcomes {
		out = append(out, string(o))
	}
	return append(out, "other")
}

// Metrics is the set of the service's metrics. Make one with New.
type Metrics struct {
	reg        *prometheus.Registry
	started    prometheus.Counter
	finished   *prometheus.CounterVec
	iterations prometheus.Counter
	duration   prometheus.Histogram
}

// New returns a Metrics registered in a registry of its own.
func New() *Metrics {
	m := &Metrics{
		reg: prometheus.NewRegistry(),
		started: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "residua_solves_started_total",
			Help: "Solve jobs accepted by the service.",
		}),
		finished: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "residua_solves_finished_total",
			Help: "Solve jobs that ended, by outcome (the outcome words of the README).",
		}, []string{"outcome"}),
		iterations: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "residua_iterations_total",
			Help: "Krylov iterations done by all solves.",
		}),
		// Buckets from 10 ms to about 44 minutes by factors of 4: a small
		// system solves in milliseconds, a large badly conditioned one in
		// tens of minutes.
		duration: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name:    "residua_solve_duration_seconds",
			Help:    "Wall time of a solve job from its submission to its end, queueing included.",
			Buckets: prometheus.ExponentialBuckets(0.01, 4, 10),
		}),
	}
	m.reg.MustRegister(m.started, m.finished, m.iterations, m.duration,
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	// Every outcome appears from the start, at zero, so that rates over
	// them work before the first job of that outcome.
	for _, o := range outcomes() {
		m.finished.WithLabelValues(o)
	}
	return m
}

// Handler serves the metrics in the Prometheus text format (or another
// format the scraper asks for).
func (m *Metrics) Handler() http.Handler {
	return promhttp.HandlerFor(m.reg, promhttp.HandlerOpts{Registry: m.reg})
}

// Gatherer returns the registry, for tests and for serving elsewhere.
func (m *Metrics) Gatherer() prometheus.Gatherer { return m.reg }

// SolveStarted counts a job accepted.
func (m *Metrics) SolveStarted() {
	if m == nil {
		return
	}
	m.started.Inc()
}

// SolveFinished counts a job that ended with the given outcome (a
// solve.Outcome word; anything else counts as "other"), d after it was
// submitted.
func (m *Metrics) SolveFinished(outcome string, d time.Duration) {
	if m == nil {
		return
	}
	if _, err := solve.ParseOutcome(outcome); err != nil {
		outcome = "other"
	}
	m.finished.WithLabelValues(outcome).Inc()
	m.duration.Observe(d.Seconds())
}

// IterationsDone adds n iterations (call it once per finished right-hand
// side with its iteration count, or as progress arrives).
func (m *Metrics) IterationsDone(n int) {
	if m == nil || n <= 0 {
		return
	}
	m.iterations.Add(float64(n))
}

// ObserveQueue makes residua_solves_queued and residua_solves_running read
// f at each scrape (api's Registry.Counts has this signature). Call it
// once.
func (m *Metrics) ObserveQueue(f func() (queued, running int)) {
	if m == nil {
		return
	}
	m.reg.MustRegister(
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "residua_solves_queued", Help: "Solve jobs waiting for a slot."},
			func() float64 { q, _ := f(); return float64(q) }),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "residua_solves_running", Help: "Solve jobs running now."},
			func() float64 { _, r := f(); return float64(r) }),
	)
}

// ObserveUploads makes residua_upload_bytes_total read f at each scrape: f
// returns the bytes received by all uploads since the server started (a
// count that only grows). Call it once.
func (m *Metrics) ObserveUploads(f func() int64) {
	if m == nil {
		return
	}
	m.reg.MustRegister(prometheus.NewCounterFunc(prometheus.CounterOpts{
		Name: "residua_upload_bytes_total",
		Help: "Bytes received by matrix and vector uploads.",
	}, func() float64 { return float64(f()) }))
}

// ObserveStore makes residua_stored_matrix_bytes and
// residua_cached_preconditioner_bytes read f at each scrape. Call it once.
func (m *Metrics) ObserveStore(f func() (matrices, preconditioners int64)) {
	if m == nil {
		return
	}
	m.reg.MustRegister(
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "residua_stored_matrix_bytes",
			Help: "Bytes of the matrices the service stores.",
		}, func() float64 { a, _ := f(); return float64(a) }),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "residua_cached_preconditioner_bytes",
			Help: "Bytes of the preconditioners the service keeps cached.",
		}, func() float64 { _, b := f(); return float64(b) }),
	)
}
