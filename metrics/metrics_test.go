package metrics

import (
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
)

// The handler's output must parse as the Prometheus text exposition format
// (version 0.0.4, read with the client library's own parser) and show the
// hooks' effect.
func TestExposition(t *testing.T) {
	m := New()
	queued, running := 2, 1
	m.ObserveQueue(func() (int, int) { return queued, running })
	m.SolveStarted()
	m.SolveStarted()
	m.SolveFinished("converged", 1500*time.Millisecond)
	m.SolveFinished("no such outcome", time.Second)
	m.IterationsDone(120)
	m.ObserveUploads(func() int64 { return 4096 })
	m.ObserveStore(func() (int64, int64) { return 1 << 20, 1 << 19 })
	var nilM *Metrics
	nilM.SolveStarted() // a server without metrics holds nil

	fams := scrape(t, m)
	for _, c := range []struct {
		name  string
		label string
		want  float64
	}{
		{"residua_solves_started_total", "", 2},
		{"residua_solves_finished_total", "converged", 1},
		{"residua_solves_finished_total", "other", 1},
		{"residua_solves_finished_total", "breakdown", 0},
		{"residua_iterations_total", "", 120},
		{"residua_upload_bytes_total", "", 4096},
		{"residua_stored_matrix_bytes", "", 1 << 20},
		{"residua_cached_preconditioner_bytes", "", 1 << 19},
		{"residua_solves_queued", "", 2},
		{"residua_solves_running", "", 1},
	} {
		if got := value(t, fams, c.name, c.label); got != c.want {
			t.Errorf("%s{%s} = %v, want %v", c.name, c.label, got, c.want)
		}
	}
	h := fams["residua_solve_duration_seconds"].GetMetric()[0].GetHistogram()
	if h.GetSampleCount() != 2 || h.GetSampleSum() != 2.5 {
		t.Errorf("histogram count %d sum %v", h.GetSampleCount(), h.GetSampleSum())
	}
}

func scrape(t *testing.T, m *Metrics) map[string]*dto.MetricFamily {
	t.Helper()
	rec := httptest.NewRecorder()
	m.Handler().ServeHTTP(rec, httptest.NewRequest("GET", "/metrics", nil))
	if ct := rec.Header().Get("Content-Type"); !strings.HasPrefix(ct, "text/plain") {
		t.Errorf("content type %q", ct)
	}
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(rec.Body)
	if err != nil {
		t.Fatal(err)
	}
	return fams
}

func value(t *testing.T, fams map[string]*dto.MetricFamily, name, outcome string) float64 {
	t.Helper()
	f, ok := fams[name]
	if !ok {
		t.Fatalf("no %s", name)
	}
	for _, m := range f.GetMetric() {
		match := outcome == ""
		for _, l := range m.GetLabel() {
			match = match || (l.GetName() == "outcome" && l.GetValue() == outcome)
		}
		if !match {
			continue
		}
		switch {
		case m.GetCounter() != nil:
			return m.GetCounter().GetValue()
		case m.GetGauge() != nil:
			return m.GetGauge().GetValue()
		}
	}
	t.Fatalf("no %s{outcome=%q}", name, outcome)
	return 0
}
