package web

import (
	"bufio"
	"context"
	"encoding/json"
	"encoding/xml"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
	"go.uber.org/goleak"

	"github.com/residua/residua/history"
	"github.com/residua/residua/metrics"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

var t0 = time.Date(2026, 12, 2, 3, 0, 0, 0, time.UTC)

func unix(t time.Time) float64 { return float64(t.UnixNano()) / 1e9 }

// fixture: job a converged (older), job b running with 100 rows falling by
// 0.9 per iteration towards 1e-8.
func fixture(t *testing.T, opt Options) (*fakeSource, *httptest.Server) {
	t.Helper()
	src := newFakeSource()
	src.add(&pb.Job{Id: "ja", MatrixName: "made-up truss", Rows: 1000, Nonzeros: 4998, Method: "cg", Preconditioner: "ic0", Rtol: 1e-8, RhsCount: 1})
	src.start("ja", unix(t0))
	src.progress("ja", 0, 0, 40, 0.6)
	src.finish("ja", "converged", unix(t0.Add(2*time.Second)))
	src.add(&pb.Job{Id: "jb", MatrixName: "heat-sink block", Rows: 216000, Nonzeros: 1490400, Method: "cg", PreconditionerRequested: "none", Rtol: 1e-8, RhsCount: 1})
	src.start("jb", unix(t0.Add(3*time.Second)))
	src.progress("jb", 0, 0, 99, 0.9)
	opt.Poll = 5 * time.Millisecond
	opt.Push = 5 * time.Millisecond
	opt.Now = func() time.Time { return t0.Add(10 * time.Second) }
	s := New(src, opt)
	ts := httptest.NewServer(s)
	t.Cleanup(func() { ts.Close(); s.Close() })
	waitUntil(t, func() bool {
		l := s.list(0)
		return len(l.Jobs) == 2 && l.Jobs[0].HistoryRows == 100 && l.Jobs[1].HistoryRows == 41
	})
	return src, ts
}

func waitUntil(t *testing.T, ok func() bool) {
	t.Helper()
	deadline := time.Now().Add(5 * time.Second)
	for !ok() {
		if time.Now().After(deadline) {
			t.Fatal("condition not met within 5 s")
		}
		time.Sleep(2 * time.Millisecond)
	}
}

func get(t *testing.T, url string, wantStatus int) (string, http.Header) {
	t.Helper()
	res, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	body, _ := io.ReadAll(res.Body)
	if res.StatusCode != wantStatus {
		t.Fatalf("GET %s: %s %s, want %d", url, res.Status, body, wantStatus)
	}
	return string(body), res.Header
}

func TestJobsEndpoints(t *testing.T) {
	// Cleanups run last-registered first: this check runs after the
	// fixture's server and page are closed.
	ignore := goleak.IgnoreCurrent()
	t.Cleanup(func() {
		http.DefaultClient.CloseIdleConnections()
		goleak.VerifyNone(t, ignore)
	})
	_, ts := fixture(t, Options{})
	body, hdr := get(t, ts.URL+"/api/jobs", 200)
	if ct := hdr.Get("Content-Type"); ct != "application/json" {
		t.Errorf("content type %q", ct)
	}
	var l JobList
	if err := json.Unmarshal([]byte(body), &l); err != nil {
		t.Fatal(err)
	}
	if len(l.Jobs) != 2 || l.Total != 2 || l.Jobs[0].ID != "jb" || l.Jobs[1].ID != "ja" {
		t.Fatalf("jobs %+v", l.Jobs)
	}
	b, a := l.Jobs[0], l.Jobs[1]
	if b.State != "running" || b.StateText != "running" || b.Matrix != "heat-sink block" || b.Preconditioner != "none" ||
		b.Iteration != 99 || b.Rows != 216000 || b.ElapsedSeconds != 7 {
		t.Errorf("running job %+v", b)
	}
	// The rows fall by exactly 0.9 per iteration: over the window of 50
	// iterations the geometric mean of the ratios is 0.9 (up to rounding
	// in math.Pow, far below 1e-12), and from 0.9^99 the tolerance 1e-8
	// needs ⌈log(1e-8/0.9^99)/log 0.9⌉ = 76 more iterations, 10 ms each.
	if b.Reduction == nil || math.Abs(float64(*b.Reduction)-0.9) > 1e-12 || b.IterationsLeft == nil || *b.IterationsLeft != 76 ||
		math.Abs(float64(*b.SecondsLeft)-0.76) > 1e-9 || math.Abs(float64(*b.RelResidual)-math.Pow(0.9, 99)) > 1e-20 {
		t.Errorf("estimate: reduction %v, left %v it %v s, residual %v", deref(b.Reduction), derefI(b.IterationsLeft), deref(b.SecondsLeft), deref(b.RelResidual))
	}
	if a.State != "done" || a.StateText != "converged" || a.Outcome != "converged" || a.ElapsedSeconds != 2 || a.IterationsLeft != nil ||
		a.NormalResidual != nil || a.Headline == "" {
		t.Errorf("finished job %+v", a)
	}

	body, _ = get(t, ts.URL+"/api/jobs/ja", 200)
	var one Job
	if err := json.Unmarshal([]byte(body), &one); err != nil || one.ID != "ja" || one.StateText != "converged" {
		t.Errorf("GET /api/jobs/ja: %v %+v", err, one)
	}
	get(t, ts.URL+"/api/jobs/nope", 404)
	get(t, ts.URL+"/api/jobs/nope/history", 404)
	get(t, ts.URL+"/api/jobs/nope/chart.svg", 404)
}

func deref(p *solve.Num) any {
	if p == nil {
		return nil
	}
	return *p
}

func derefI(p *int64) any {
	if p == nil {
		return nil
	}
	return *p
}

func TestHistoryEndpoint(t *testing.T) {
	_, ts := fixture(t, Options{})
	body, _ := get(t, ts.URL+"/api/jobs/jb/history", 200)
	var h History
	if err := json.Unmarshal([]byte(body), &h); err != nil {
		t.Fatal(err)
	}
	if h.ID != "jb" || len(h.Series) != 1 || len(h.Series[0].Rows) != 100 {
		t.Fatalf("history %s", body[:min(len(body), 300)])
	}
	r := h.Series[0].Rows[42]
	if r.Iteration != 42 || r.ElapsedSeconds != 0.42 || float64(r.RelResidual) != math.Pow(0.9, 42) || float64(r.ResidualNorm) != 2*math.Pow(0.9, 42) || r.NormalResidual != nil {
		t.Errorf("row 42: %+v", r)
	}
	// As a history file: what `residua plot` reads.
	for _, f := range []string{"csv", "jsonl"} {
		body, _ = get(t, ts.URL+"/api/jobs/jb/history?format="+f, 200)
		hf, err := history.Parse(strings.NewReader(body), f)
		if err != nil {
			t.Fatal(err)
		}
		if len(hf.Rows) != 100 || hf.Rows[99].RelResidual != math.Pow(0.9, 99) || hf.Rows[99].Elapsed != 990*time.Millisecond {
			t.Errorf("%s: %d rows, last %+v", f, len(hf.Rows), hf.Rows[len(hf.Rows)-1])
		}
	}
	get(t, ts.URL+"/api/jobs/jb/history?format=xml", 400)
	get(t, ts.URL+"/api/jobs/jb/history?rhs=-1", 400)
	get(t, ts.URL+"/api/jobs/jb/history?rhs=3", 404)
}

// The chart endpoint serves well-formed SVG (XML 1.0, read by encoding/xml).
func TestChartEndpoint(t *testing.T) {
	_, ts := fixture(t, Options{})
	body, hdr := get(t, ts.URL+"/api/jobs/jb/chart.svg", 200)
	if hdr.Get("Content-Type") != "image/svg+xml" {
		t.Errorf("content type %q", hdr.Get("Content-Type"))
	}
	d := xml.NewDecoder(strings.NewReader(body))
	for {
		if _, err := d.Token(); err == io.EOF {
			break
		} else if err != nil {
			t.Fatalf("not XML: %v", err)
		}
	}
	for _, want := range []string{"tolerance 1e-08", "relative residual"} {
		if !strings.Contains(body, want) {
			t.Errorf("chart lacks %q", want)
		}
	}
}

func TestStaticPage(t *testing.T) {
	_, ts := fixture(t, Options{})
	body, hdr := get(t, ts.URL+"/", 200)
	if !strings.HasPrefix(hdr.Get("Content-Type"), "text/html") || !strings.Contains(body, `<ol id="jobs">`) {
		t.Errorf("page: %s", hdr.Get("Content-Type"))
	}
	body, _ = get(t, ts.URL+"/static/app.js", 200)
	if !strings.Contains(body, "EventSource") {
		t.Error("app.js does not use EventSource")
	}
	get(t, ts.URL+"/static/style.css", 200)
	get(t, ts.URL+"/nothing-here", 404)
	get(t, ts.URL+"/metrics", 404) // no Metrics in the options
}

// The event stream sends the list at once and again after a change, as
// text/event-stream events named "jobs".
func TestEventStream(t *testing.T) {
	src, ts := fixture(t, Options{})
	res, err := http.Get(ts.URL + "/api/events")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	if ct := res.Header.Get("Content-Type"); ct != "text/event-stream" {
		t.Fatalf("content type %q", ct)
	}
	rd := bufio.NewReader(res.Body)
	next := func() JobList {
		t.Helper()
		var name, data string
		for {
			line, err := rd.ReadString('\n')
			if err != nil {
				t.Fatal(err)
			}
			line = strings.TrimRight(line, "\n")
			switch {
			case strings.HasPrefix(line, "event: "):
				name = line[len("event: "):]
			case strings.HasPrefix(line, "data: "):
				data += line[len("data: "):]
			case line == "" && data != "":
				if name != "jobs" {
					t.Fatalf("event %q", name)
				}
				var l JobList
				if err := json.Unmarshal([]byte(data), &l); err != nil {
					t.Fatal(err)
				}
				return l
			}
		}
	}
	first := next()
	if len(first.Jobs) != 2 || first.Jobs[0].Iteration != 99 {
		t.Fatalf("first event %+v", first)
	}
	src.progress("jb", 0, 100, 130, 0.9)
	for {
		l := next()
		if l.Jobs[0].Iteration == 130 && l.Jobs[0].HistoryRows == 131 {
			if l.Jobs[0].Version <= first.Jobs[0].Version {
				t.Errorf("version %d after %d", l.Jobs[0].Version, first.Jobs[0].Version)
			}
			break
		}
	}
	src.finish("jb", "iteration-limit", unix(t0.Add(5*time.Second)))
	for {
		if l := next(); l.Jobs[0].State == "done" {
			if l.Jobs[0].StateText != "iteration-limit" || l.Jobs[0].Outcome != "iteration-limit" {
				t.Errorf("state text %q", l.Jobs[0].StateText)
			}
			break
		}
	}
	src.forget("ja")
	for {
		if l := next(); len(l.Jobs) == 1 {
			break
		}
	}
}

// /metrics parses as the Prometheus text format (with the client library's
// parser) and serves what was counted into the Metrics (the service counts;
// the page only serves them).
func TestMetricsEndpoint(t *testing.T) {
	m := metrics.New()
	m.SolveStarted()
	m.SolveFinished("converged", time.Second)
	m.IterationsDone(40)
	_, ts := fixture(t, Options{Metrics: m})
	body, _ := get(t, ts.URL+"/metrics", 200)
	got := parseMetrics(t, body)
	for k, v := range map[string]float64{
		"residua_solves_started_total":                             1,
		`residua_solves_finished_total{outcome="converged"}`:       1,
		`residua_solves_finished_total{outcome="iteration-limit"}`: 0,
		"residua_iterations_total":                                 40,
		"residua_solve_duration_seconds_count":                     1,
	} {
		if got[k] != v {
			t.Errorf("%s = %v, want %v", k, got[k], v)
		}
	}
}

// parseMetrics reads the Prometheus text format with the client library's
// parser and returns each counter, gauge and histogram count by name and
// outcome label.
func parseMetrics(t *testing.T, body string) map[string]float64 {
	t.Helper()
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(strings.NewReader(body))
	if err != nil {
		t.Fatalf("/metrics is not in the Prometheus text format: %v", err)
	}
	out := map[string]float64{}
	for name, f := range fams {
		for _, mt := range f.GetMetric() {
			key := name
			for _, l := range mt.GetLabel() {
				if l.GetName() == "outcome" {
					key += `{outcome="` + l.GetValue() + `"}`
				}
			}
			switch {
			case mt.GetCounter() != nil:
				out[key] = mt.GetCounter().GetValue()
			case mt.GetGauge() != nil:
				out[key] = mt.GetGauge().GetValue()
			case mt.GetHistogram() != nil:
				out[key+"_count"] = float64(mt.GetHistogram().GetSampleCount())
			}
		}
	}
	return out
}

// A least-squares job's card and history carry ‖Aᵀr‖, and its shape is
// its own (rows × columns), not a square.
func TestLeastSquaresJob(t *testing.T) {
	src, ts := fixture(t, Options{})
	src.add(&pb.Job{Id: "jc", MatrixName: "made-up survey", Rows: 1850, Cols: 712, Nonzeros: 8758, Method: "lsqr", Preconditioner: "colscale", RhsCount: 1})
	src.start("jc", unix(t0.Add(4*time.Second)))
	src.progress("jc", 0, 0, 20, 0.5)
	var c Job
	waitUntil(t, func() bool {
		body, _ := getBody(t, ts.URL+"/api/jobs/jc")
		return json.Unmarshal([]byte(body), &c) == nil && c.Iteration == 20
	})
	if c.Rows != 1850 || c.Cols != 712 || c.NormalResidual == nil || float64(*c.NormalResidual) != math.Pow(0.5, 20)/4 {
		t.Errorf("least-squares card %+v", c)
	}
	body, _ := get(t, ts.URL+"/api/jobs/jc/history", 200)
	var h History
	if err := json.Unmarshal([]byte(body), &h); err != nil || len(h.Series[0].Rows) != 21 || h.Series[0].Rows[3].NormalResidual == nil {
		t.Errorf("least-squares history: %v %s", err, body[:min(len(body), 200)])
	}
}

// The page (the event stream) carries the newest PageJobs jobs and the
// total; /api/jobs lists them all.
func TestPageJobsBound(t *testing.T) {
	src := newFakeSource()
	for i := 0; i < PageJobs+7; i++ {
		src.add(&pb.Job{Id: fmt.Sprintf("j%03d", i), MatrixName: "m"})
	}
	s := New(src, Options{Poll: 5 * time.Millisecond})
	defer s.Close()
	waitUntil(t, func() bool { return s.list(0).Total == PageJobs+7 })
	page := s.list(PageJobs)
	if len(page.Jobs) != PageJobs || page.Total != PageJobs+7 || page.Jobs[0].ID != fmt.Sprintf("j%03d", PageJobs+6) {
		t.Errorf("page: %d jobs of %d, first %s", len(page.Jobs), page.Total, page.Jobs[0].ID)
	}
	if all := s.list(0); len(all.Jobs) != PageJobs+7 {
		t.Errorf("/api/jobs: %d jobs", len(all.Jobs))
	}
}

// Shutting Serve down ends open event streams at once rather than after
// the grace period.
func TestServeShutdown(t *testing.T) {
	src := newFakeSource()
	s := New(src, Options{Poll: 5 * time.Millisecond})
	defer s.Close()
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- Serve(ctx, lis, s, 20*time.Second) }()
	res, err := http.Get("http://" + lis.Addr().String() + "/api/events")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	line, _ := bufio.NewReader(res.Body).ReadString('\n')
	if line != "retry: 2000\n" {
		t.Fatalf("first line %q", line)
	}
	start := time.Now()
	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if d := time.Since(start); d > 5*time.Second {
		t.Errorf("shutdown took %v with an event stream open", d)
	}
}
