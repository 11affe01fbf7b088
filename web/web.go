package web

import (
	"bytes"
	"context"
	"embed"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"net"
	"net/http"
	"strconv"
	"time"

	"gonum.org/v1/plot/vg"

	"github.com/residua/residua/chart"
	"github.com/residua/residua/history"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/metrics"
	"github.com/residua/residua/monitor"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

//go:embed static
var static embed.FS

// Options control a Server. The zero value works.
type Options struct {
	// Metrics, when set, is served at /metrics. The service counts into
	// it (api.Config.Observer), whether the page runs or not.
	Metrics *metrics.Metrics
	// Poll is how often the job list is read. Default 250 ms.
	Poll time.Duration
	// Push is the shortest time between two updates sent to one page.
	// Default 500 ms.
	Push time.Duration
	// Now returns the current time (for the elapsed time of running jobs).
	// Default time.Now.
	Now func() time.Time
	// Token, when set, is the bearer token (the gRPC service's) that
	// /api/* and /metrics require, as "Authorization: Bearer <token>" or
	// the session cookie that POST /api/session sets (see auth.go). The
	// page itself, its static files and the sign-in stay open. Default
	// none: everything open.
	Token []byte
}

// Server is the watch page and its endpoints, an http.Handler. Make one
// with New and Close it when done.
type Server struct {
	opt     Options
	t       *tracker
	mux     *http.ServeMux
	session string // the session cookie's value, when opt.Token is set
}

// New returns a Server reading src and starts following its jobs.
func New(src Source, opt Options) *Server {
	if opt.Poll <= 0 {
		opt.Poll = 250 * time.Millisecond
	}
	if opt.Push <= 0 {
		opt.Push = 500 * time.Millisecond
	}
	if opt.Now == nil {
		opt.Now = time.Now
	}
	s := &Server{opt: opt, t: newTracker(src, opt.Poll), mux: http.NewServeMux()}
	sub, _ := fs.Sub(static, "static")
	files := http.FileServerFS(sub)
	s.mux.Handle("GET /{$}", files)
	s.mux.Handle("GET /static/", http.StripPrefix("/static/", files))
	if opt.Token != nil {
		s.session = sessionValue(opt.Token)
	}
	s.mux.HandleFunc("POST /api/session", s.signIn)
	s.mux.Handle("GET /api/jobs", s.guard(http.HandlerFunc(s.jobs)))
	s.mux.Handle("GET /api/jobs/{id}", s.guard(http.HandlerFunc(s.job)))
	s.mux.Handle("GET /api/jobs/{id}/history", s.guard(http.HandlerFunc(s.history)))
	s.mux.Handle("GET /api/jobs/{id}/chart.svg", s.guard(http.HandlerFunc(s.chart)))
	s.mux.Handle("GET /api/events", s.guard(http.HandlerFunc(s.events)))
	if opt.Metrics != nil {
		s.mux.Handle("GET /metrics", s.guard(opt.Metrics.Handler()))
	}
	return s
}

// Close stops following the jobs and ends the open event streams. Calling
// it again does nothing.
func (s *Server) Close() { s.t.close() }

func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("X-Content-Type-Options", "nosniff")
	s.mux.ServeHTTP(w, r)
}

// Serve serves h on lis until ctx is done, then shuts the HTTP server down,
// giving open requests up to grace to end before cutting them. When h is a
// *Server, shutting down closes it, which ends its event streams at once
// instead of after grace.
func Serve(ctx context.Context, lis net.Listener, h http.Handler, grace time.Duration) error {
	srv := &http.Server{Handler: h, ReadHeaderTimeout: 10 * time.Second}
	if ws, ok := h.(*Server); ok {
		srv.RegisterOnShutdown(ws.Close)
	}
	done := make(chan error, 1)
	go func() { done <- srv.Serve(lis) }()
	select {
	case err := <-done:
		return err
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), grace)
	defer cancel()
	if err := srv.Shutdown(sctx); err != nil {
		srv.Close()
	}
	if err := <-done; !errors.Is(err, http.ErrServerClosed) {
		return err
	}
	return nil
}

// Job is how the JSON endpoints describe a job: the keys of wire.Job
// (those of the CLI's jobs --json), and what the page shows besides.
// A number that does not exist yet (no progress, no estimate) is null; a
// NaN or infinite one is the string "NaN", "+Inf" or "-Inf", as in every
// JSON residua writes.
type Job struct {
	wire.Job
	// StateText is what a person reads on the card: the state while the
	// job runs, the outcome once done. Headline is the last result's
	// summary sentence.
	StateText string `json:"state_text"`
	Headline  string `json:"headline,omitempty"`
	// Reduction is the average reduction of the relative residual per
	// iteration over the last 50 iterations (package monitor's Rate);
	// IterationsLeft and SecondsLeft predict the rest of the current
	// right-hand side's solve from it.
	Reduction      *solve.Num `json:"reduction_per_iteration"`
	IterationsLeft *int64     `json:"iterations_left"`
	SecondsLeft    *solve.Num `json:"seconds_left"`
	// HistoryRows counts the rows of the job's histories (over all
	// right-hand sides); Version changes whenever the curve does.
	HistoryRows int    `json:"history_rows"`
	Version     uint64 `json:"version"`
	// Results holds the summary of each finished right-hand side, with
	// the keys of the CLI's --json summary (in the job's own record only:
	// GET /api/jobs/{id}).
	Results []solve.Summary `json:"results,omitempty"`
}

// JobList is the body of GET /api/jobs and of each "jobs" event. Total
// counts every job the registry holds; the event stream carries only the
// PageJobs newest of them, /api/jobs all.
type JobList struct {
	Jobs  []Job `json:"jobs"`
	Total int   `json:"total"`
}

// PageJobs bounds the jobs the page shows (and each event carries): a
// server keeping a thousand finished jobs would otherwise send them all
// twice a second.
const PageJobs = 50

// view describes j, with the estimate from its current history.
func (s *Server) view(j *pb.Job) Job {
	v := Job{Job: wire.JobRecord(j, s.opt.Now())}
	v.StateText = v.State
	if v.Outcome != "" {
		v.StateText = v.Outcome
	}
	if rs := j.GetResults(); len(rs) > 0 {
		v.Headline = rs[len(rs)-1].GetHeadline()
	}
	leastSquares := solve.Method(v.Method).LeastSquares()
	hs, version, ok := s.t.histories(j.GetId())
	if !ok {
		return v
	}
	v.Version = version
	var window []krylov.Progress
	for i, h := range hs {
		v.HistoryRows += len(h.Rows)
		if i == int(v.RHS) {
			window = h.Rows[max(0, len(h.Rows)-monitor.DefaultWindow-1):]
		}
	}
	// The latest row of the history is newer than the last progress
	// event the stream was sent: show it.
	if n := len(window); n > 0 {
		p := window[n-1]
		v.Iteration, v.RelResidual = int64(p.Iteration), solve.NumPtr(p.RelResidual)
		if leastSquares {
			v.NormalResidual = solve.NumPtr(p.NormalResidualNorm)
		}
	}
	if len(window) > 1 && !leastSquares {
		rate := monitor.NewRate(monitor.DefaultWindow)
		for _, p := range window {
			rate.Add(p)
		}
		e := rate.Estimate(v.Tolerance)
		if e.Span > 0 {
			v.Reduction = solve.NumPtr(e.Factor)
		}
		if e.Predicted && j.GetState() == pb.JobState_RUNNING {
			n, sec := int64(e.IterationsLeft), e.TimeLeft.Seconds()
			v.IterationsLeft, v.SecondsLeft = &n, solve.NumPtr(sec)
		}
	}
	return v
}

// list describes the newest limit jobs (all when limit ≤ 0).
func (s *Server) list(limit int) JobList {
	s.t.mu.Lock()
	jobs := s.t.list
	s.t.mu.Unlock()
	out := JobList{Total: len(jobs)}
	if limit > 0 && len(jobs) > limit {
		jobs = jobs[:limit]
	}
	out.Jobs = make([]Job, 0, len(jobs))
	for _, j := range jobs {
		out.Jobs = append(out.Jobs, s.view(j))
	}
	return out
}

// find returns the job with the given id as the source has it now (the
// tracker's list may be a poll interval old).
func (s *Server) find(id string) (*pb.Job, bool) {
	for _, j := range s.t.src.Jobs() {
		if j.GetId() == id {
			return j, true
		}
	}
	return nil, false
}

func writeJSON(w http.ResponseWriter, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	enc := json.NewEncoder(w)
	enc.SetIndent("", " ")
	enc.Encode(v)
}

func notFound(w http.ResponseWriter, id string) {
	http.Error(w, fmt.Sprintf("no job %q (unknown, or forgotten by the server)", id), http.StatusNotFound)
}

func (s *Server) jobs(w http.ResponseWriter, r *http.Request) { writeJSON(w, s.list(0)) }

func (s *Server) job(w http.ResponseWriter, r *http.Request) {
	j, ok := s.find(r.PathValue("id"))
	if !ok {
		notFound(w, r.PathValue("id"))
		return
	}
	v := s.view(j)
	for _, res := range j.GetResults() {
		v.Results = append(v.Results, wire.Summary(res))
	}
	writeJSON(w, v)
}

// Row is one history row in the JSON history: the keys of the history file
// schema (package history). ‖Aᵀr‖ is there for a least-squares job.
type Row struct {
	Iteration      int        `json:"iteration"`
	ElapsedSeconds float64    `json:"elapsed_seconds"`
	ResidualNorm   solve.Num  `json:"residual_norm"`
	RelResidual    solve.Num  `json:"relative_residual"`
	NormalResidual *solve.Num `json:"normal_residual_norm,omitempty"`
}

// History is the body of GET /api/jobs/{id}/history.
type History struct {
	ID string `json:"id"`
	// Series holds one history per right-hand side, in order.
	Series []Series `json:"series"`
}

// Series is one right-hand side's history. Thinned says that rows were
// left out of a long solve (evenly spaced, the first and last exact).
type Series struct {
	RHS     int   `json:"rhs"`
	Thinned bool  `json:"thinned"`
	Rows    []Row `json:"rows"`
}

// rhsParam reads the optional rhs query parameter (-1 when absent).
func rhsParam(r *http.Request) (int, error) {
	q := r.URL.Query().Get("rhs")
	if q == "" {
		return -1, nil
	}
	n, err := strconv.Atoi(q)
	if err != nil || n < 0 {
		return 0, fmt.Errorf("rhs=%q: want a right-hand side index (0 or more)", q)
	}
	return n, nil
}

func (s *Server) history(w http.ResponseWriter, r *http.Request) {
	id := r.PathValue("id")
	all, _, ok := s.t.histories(id)
	if !ok {
		notFound(w, id)
		return
	}
	rhs, err := rhsParam(r)
	if err != nil {
		http.Error(w, err.Error(), http.StatusBadRequest)
		return
	}
	if rhs >= len(all) {
		http.Error(w, fmt.Sprintf("job %s has no right-hand side %d", id, rhs), http.StatusNotFound)
		return
	}
	switch f := r.URL.Query().Get("format"); f {
	case "", "json":
	case "csv", "jsonl":
		// One right-hand side as a history file, the format
		// `residua solve --history` writes and `residua plot` reads.
		if rhs < 0 {
			rhs = 0
		}
		if len(all) == 0 {
			http.Error(w, fmt.Sprintf("job %s has no progress yet", id), http.StatusNotFound)
			return
		}
		format, ctype := history.CSV, "text/csv"
		if f == "jsonl" {
			format, ctype = history.JSONLines, "application/jsonl"
		}
		var buf bytes.Buffer
		history.Write(&buf, format, all[rhs])
		w.Header().Set("Content-Type", ctype)
		w.Header().Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", fmt.Sprintf("%s-rhs%d.%s", id, rhs, f)))
		w.Write(buf.Bytes())
		return
	default:
		http.Error(w, fmt.Sprintf("format=%q: want json, csv or jsonl", f), http.StatusBadRequest)
		return
	}
	out := History{ID: id, Series: []Series{}}
	for i, h := range all {
		if rhs >= 0 && i != rhs {
			continue
		}
		sr := Series{RHS: i, Thinned: h.Thinned, Rows: make([]Row, len(h.Rows))}
		for k, p := range h.Rows {
			sr.Rows[k] = Row{Iteration: p.Iteration, ElapsedSeconds: p.Elapsed.Seconds(), ResidualNorm: solve.Num(p.ResidualNorm), RelResidual: solve.Num(p.RelResidual)}
			if h.LeastSquares {
				sr.Rows[k].NormalResidual = solve.NumPtr(p.NormalResidualNorm)
			}
		}
		out.Series = append(out.Series, sr)
	}
	writeJSON(w, out)
}

// chart serves the job's residual curves as SVG, rendered once per version
// of the history and kept until the next.
func (s *Server) chart(w http.ResponseWriter, r *http.Request) {
	id := r.PathValue("id")
	j, ok := s.find(id)
	if !ok {
		notFound(w, id)
		return
	}
	all, version, ok := s.t.histories(id)
	if !ok {
		notFound(w, id)
		return
	}
	s.t.mu.Lock()
	c, cached := s.t.svg[id]
	s.t.mu.Unlock()
	if !cached || c.version != version {
		var ss []chart.Series
		for i, h := range all {
			if len(h.Rows) == 0 {
				continue
			}
			label := ""
			if len(all) > 1 {
				label = fmt.Sprintf("right-hand side %d", i+1)
			}
			ss = append(ss, chart.Series{Label: label, Rows: h.Rows})
		}
		pre := j.GetPreconditioner()
		if pre == "" {
			pre = j.GetPreconditionerRequested()
		}
		name := j.GetMatrixName()
		if name == "" {
			name = j.GetMatrixId()
		}
		var buf bytes.Buffer
		// No title: the job's card already names the matrix and the
		// preconditioner, and a small picture keeps its text legible when
		// a phone scales it to the screen.
		err := chart.SVG(&buf, chart.Options{Title: "-", Matrix: name, Preconditioner: pre, Tolerance: j.GetRtol(),
			Width: 5.2 * vg.Inch, Height: 2.9 * vg.Inch, MaxPoints: 1200}, ss...)
		if errors.Is(err, chart.ErrNoData) {
			http.Error(w, "no progress yet", http.StatusNotFound)
			return
		}
		if err != nil {
			http.Error(w, err.Error(), http.StatusInternalServerError)
			return
		}
		c = cachedSVG{version: version, body: buf.Bytes()}
		s.t.mu.Lock()
		if _, ok := s.t.versions[id]; ok {
			s.t.svg[id] = c
		}
		s.t.mu.Unlock()
	}
	w.Header().Set("Content-Type", "image/svg+xml")
	w.Header().Set("Cache-Control", "no-store")
	w.Write(c.body)
}

// events streams the job list as Server-Sent Events (the HTML Living
// Standard, §9.2): an event named "jobs" whose data is a JobList, at once
// and after every change, at most one per Options.Push; a comment line
// every 15 s keeps idle connections open through proxies.
func (s *Server) events(w http.ResponseWriter, r *http.Request) {
	fl, ok := w.(http.Flusher)
	if !ok {
		http.Error(w, "streaming unsupported", http.StatusInternalServerError)
		return
	}
	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)
	fmt.Fprint(w, "retry: 2000\n\n")
	keepAlive := time.NewTicker(15 * time.Second)
	defer keepAlive.Stop()
	for {
		changed := s.t.wait()
		body, _ := json.Marshal(s.list(PageJobs))
		if _, err := fmt.Fprintf(w, "event: jobs\ndata: %s\n\n", body); err != nil {
			return
		}
		fl.Flush()
		// At most one update per Push: wait out the interval, then for
		// the next change.
		select {
		case <-time.After(s.opt.Push):
		case <-r.Context().Done():
			return
		case <-s.t.ctx.Done():
			return
		}
	wait:
		for {
			select {
			case <-changed:
				break wait
			case <-keepAlive.C:
				if _, err := fmt.Fprint(w, ": still here\n\n"); err != nil {
					return
				}
				fl.Flush()
			case <-r.Context().Done():
				return
			case <-s.t.ctx.Done():
				return
			}
		}
	}
}
