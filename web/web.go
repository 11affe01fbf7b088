package web

import (
	"bytes"
	"context"
	"embed"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"net"
	"net/http"
	"strconv"
	"time"

	"github.com/residua/residua/chart"
	"github.com/residua/residua/history"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/metrics"
	"github.com/residua/residua/monitor"
	pb "github.com/residua/residua/proto/residua/v1"
	"gonum.org/v1/plot/vg"
)

//go:embed static
var static embed.FS

// Options control a Server. The zero value works.
type Options struct {
	// Metrics, when set, is served at /metrics, and the page counts the
	// jobs it follows into it: solves started, finished by outcome, their
	// durations and iterations (see package metrics). The service itself
	// only reports the bytes it receives and stores.
	Metrics *metrics.Metrics
	// Poll is how often the job list is read. Default 250 ms.
	Poll time.Duration
	// Push is the shortest time between two updates sent to one page.
	// Default 500 ms.
	Push time.Duration
	// Now returns the current time (for the elapsed time of running jobs).
	// Default time.Now.
	Now func() time.Time
}

// Server is the watch page and its endpoints, an http.Handler. Make one
// with New and Close it when done.
type Server struct {
	opt Options
	t   *tracker
	mux *http.ServeMux
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
	s := &Server{opt: opt, t: newTracker(src, opt.Poll, opt.Metrics), mux: http.NewServeMux()}
	sub, _ := fs.Sub(static, "static")
	files := http.FileServerFS(sub)
	s.mux.Handle("GET /{$}", files)
	s.mux.Handle("GET /static/", http.StripPrefix("/static/", files))
	s.mux.HandleFunc("GET /api/jobs", s.jobs)
	s.mux.HandleFunc("GET /api/jobs/{id}", s.job)
	s.mux.HandleFunc("GET /api/jobs/{id}/history", s.history)
	s.mux.HandleFunc("GET /api/jobs/{id}/chart.svg", s.chart)
	s.mux.HandleFunc("GET /api/events", s.events)
	if opt.Metrics != nil {
		s.mux.Handle("GET /metrics", opt.Metrics.Handler())
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

// Job is how the JSON endpoints describe a job. Numbers that do not exist
// yet (no progress, no estimate) are null.
type Job struct {
	ID    string `json:"id"`
	Label string `json:"label,omitempty"`
	// State is queued, running, finished, failed or cancelled.
	State string `json:"state"`
	// StateText says the state in words a person reads: "queued",
	// "running", "converged", "stopped: iteration-limit", "failed",
	// "cancelled". Outcome is the status of the last finished right-hand
	// side that did not converge, or "converged" (empty while none has
	// finished).
	StateText      string   `json:"state_text"`
	Outcome        string   `json:"outcome,omitempty"`
	Matrix         string   `json:"matrix"`
	MatrixID       string   `json:"matrix_id"`
	Rows           int64    `json:"rows"`
	Nonzeros       int64    `json:"nonzeros"`
	Method         string   `json:"method"`
	Preconditioner string   `json:"preconditioner"`
	RHSCount       int32    `json:"rhs_count"`
	RHSDone        int32    `json:"rhs_done"`
	RHS            int32    `json:"rhs"`
	Iteration      int64    `json:"iteration"`
	RelResidual    *float64 `json:"relative_residual"`
	Tolerance      float64  `json:"tolerance"`
	ElapsedSeconds float64  `json:"elapsed_seconds"`
	// Reduction is the average reduction of the relative residual per
	// iteration over the last 50 iterations (package monitor's Rate);
	// IterationsLeft and SecondsLeft predict the rest of the current
	// right-hand side's solve from it.
	Reduction      *float64 `json:"reduction_per_iteration"`
	IterationsLeft *int64   `json:"iterations_left"`
	SecondsLeft    *float64 `json:"seconds_left"`
	Error          string   `json:"error,omitempty"`
	CreatedUnix    float64  `json:"created_unix"`
	StartedUnix    float64  `json:"started_unix"`
	FinishedUnix   float64  `json:"finished_unix"`
	// HistoryRows counts the rows of the history the page holds (over all
	// right-hand sides); Version changes whenever the curve does.
	HistoryRows int    `json:"history_rows"`
	Version     uint64 `json:"version"`
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

func stateName(st pb.JobState) string {
	switch st {
	case pb.JobState_QUEUED:
		return "queued"
	case pb.JobState_RUNNING:
		return "running"
	case pb.JobState_FINISHED:
		return "finished"
	case pb.JobState_FAILED:
		return "failed"
	case pb.JobState_CANCELLED:
		return "cancelled"
	}
	return "unknown"
}

func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// view describes j, with the estimate from the rows the tracker holds.
func (s *Server) view(j *pb.Job) Job {
	v := Job{
		ID: j.GetId(), Label: j.GetLabel(), State: stateName(j.GetState()),
		Matrix: j.GetMatrixName(), MatrixID: j.GetMatrixId(), Rows: j.GetRows(), Nonzeros: j.GetNonzeros(),
		Method: j.GetMethod(), Preconditioner: j.GetPreconditioner(),
		RHSCount: j.GetRhsCount(), RHSDone: j.GetRhsDone(),
		Tolerance: j.GetRtol(), Error: j.GetError(),
		CreatedUnix: j.GetCreatedUnix(), StartedUnix: j.GetStartedUnix(), FinishedUnix: j.GetFinishedUnix(),
	}
	if v.Preconditioner == "" {
		v.Preconditioner = j.GetPreconditionerRequested()
	}
	if v.Matrix == "" {
		v.Matrix = v.MatrixID
	}
	for _, r := range j.GetResults() {
		if v.Outcome == "" || v.Outcome == "converged" {
			v.Outcome = r.GetStatus()
		}
	}
	v.StateText = v.State
	if j.GetState() == pb.JobState_FINISHED {
		switch v.Outcome {
		case "converged", "":
			v.StateText = "converged"
		default:
			v.StateText = "stopped: " + v.Outcome
		}
	}
	if lp := j.GetLastProgress(); lp != nil {
		v.RHS, v.Iteration, v.RelResidual = lp.GetRhs(), lp.GetIteration(), finite(lp.GetRelativeResidual())
	}
	switch {
	case v.StartedUnix == 0:
	case v.FinishedUnix != 0:
		v.ElapsedSeconds = v.FinishedUnix - v.StartedUnix
	default:
		v.ElapsedSeconds = max(0, float64(s.opt.Now().UnixNano())/1e9-v.StartedUnix)
	}

	s.t.mu.Lock()
	tj := s.t.jobs[j.GetId()]
	var window []krylov.Progress
	if tj != nil {
		v.Version = tj.version
		for i := range tj.series {
			v.HistoryRows += len(tj.series[i].rows)
			if tj.series[i].hasTip {
				v.HistoryRows++
			}
		}
		if rhs := int(v.RHS); rhs < len(tj.series) {
			all := tj.series[rhs].all()
			window = all[max(0, len(all)-monitor.DefaultWindow-1):]
		}
	}
	s.t.mu.Unlock()
	if len(window) > 1 {
		rate := monitor.NewRate(monitor.DefaultWindow)
		for _, p := range window {
			rate.Add(p)
		}
		e := rate.Estimate(v.Tolerance)
		if e.Span > 0 {
			v.Reduction = finite(e.Factor)
		}
		if e.Predicted && j.GetState() == pb.JobState_RUNNING {
			n, sec := int64(e.IterationsLeft), e.TimeLeft.Seconds()
			v.IterationsLeft, v.SecondsLeft = &n, &sec
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

func (s *Server) find(id string) (*pb.Job, bool) {
	s.t.mu.Lock()
	defer s.t.mu.Unlock()
	for _, j := range s.t.list {
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
	writeJSON(w, s.view(j))
}

// Row is one history row in the JSON history: the keys of the history file
// schema (package history). A NaN or infinite value is null.
type Row struct {
	Iteration      int      `json:"iteration"`
	ElapsedSeconds float64  `json:"elapsed_seconds"`
	ResidualNorm   *float64 `json:"residual_norm"`
	RelResidual    *float64 `json:"relative_residual"`
}

// History is the body of GET /api/jobs/{id}/history.
type History struct {
	ID string `json:"id"`
	// Series holds one history per right-hand side, in order.
	Series []Series `json:"series"`
}

// Series is one right-hand side's history.
type Series struct {
	RHS  int   `json:"rhs"`
	Rows []Row `json:"rows"`
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
	all, ok := s.t.rows(id)
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
		http.Error(w, fmt.Sprintf("job %s has no progress for right-hand side %d", id, rhs), http.StatusNotFound)
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
		history.Write(&buf, format, history.History{Rows: all[rhs]})
		w.Header().Set("Content-Type", ctype)
		w.Header().Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", fmt.Sprintf("%s-rhs%d.%s", id, rhs, f)))
		w.Write(buf.Bytes())
		return
	default:
		http.Error(w, fmt.Sprintf("format=%q: want json, csv or jsonl", f), http.StatusBadRequest)
		return
	}
	out := History{ID: id, Series: []Series{}}
	for i, rows := range all {
		if rhs >= 0 && i != rhs {
			continue
		}
		sr := Series{RHS: i, Rows: make([]Row, len(rows))}
		for k, p := range rows {
			sr.Rows[k] = Row{Iteration: p.Iteration, ElapsedSeconds: p.Elapsed.Seconds(), ResidualNorm: finite(p.ResidualNorm), RelResidual: finite(p.RelResidual)}
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
	s.t.mu.Lock()
	tj := s.t.jobs[id]
	var cached []byte
	var version uint64
	if tj != nil {
		version = tj.version
		if tj.svg != nil && tj.svgVersion == version {
			cached = tj.svg
		}
	}
	s.t.mu.Unlock()
	if cached == nil {
		all, _ := s.t.rows(id)
		var ss []chart.Series
		for i, rows := range all {
			if len(rows) == 0 {
				continue
			}
			label := ""
			if len(all) > 1 {
				label = fmt.Sprintf("right-hand side %d", i+1)
			}
			ss = append(ss, chart.Series{Label: label, Rows: rows})
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
		cached = buf.Bytes()
		s.t.mu.Lock()
		if tj != nil && tj.svgVersion <= version {
			tj.svg, tj.svgVersion = cached, version
		}
		s.t.mu.Unlock()
	}
	w.Header().Set("Content-Type", "image/svg+xml")
	w.Header().Set("Cache-Control", "no-store")
	w.Write(cached)
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
