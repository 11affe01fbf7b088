package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/monitor"
	pb "github.com/residua/residua/proto/residua/v1"
)

// Environment variables the client commands read (flags override them).
const (
	envServer    = "RESIDUA_SERVER"     // the server's address, host:port
	envTokenFile = "RESIDUA_TOKEN_FILE" // a file holding the bearer token
)

func init() {
	register(&command{name: "jobs", summary: "list the jobs on a residua server", run: runJobs})
	register(&command{name: "watch", summary: "follow a job on a residua server live, then print its summary", run: runWatch})
	register(&command{name: "cancel", summary: "cancel a job on a residua server", run: runCancel})
}

// serverOpts are the flags of every command that talks to a server.
type serverOpts struct {
	addr, tokenFile, caFile string
	tls                     bool
}

func addServerFlags(f *cmdFlags, s *serverOpts) {
	f.StringVar(&s.addr, "server", "", "residua server `address` host:port (default $"+envServer+")")
	f.StringVar(&s.tokenFile, "token-file", "", "send the bearer token held in this `file` (default $"+envTokenFile+")")
	f.BoolVar(&s.tls, "tls", false, "speak TLS, trusting the system's certificate authorities")
	f.StringVar(&s.caFile, "ca-file", "", "speak TLS, trusting the certificates in this PEM `file`")
}

// resolve fills what the flags left empty from the environment.
func (s *serverOpts) resolve() {
	if s.addr == "" {
		s.addr = os.Getenv(envServer)
	}
	if s.tokenFile == "" {
		s.tokenFile = os.Getenv(envTokenFile)
	}
}

func (s *serverOpts) dial(ctx context.Context, cmd string) (*client.Client, error) {
	if s.addr == "" {
		return nil, usageErrorf("%s: no server: give --server host:port or set $%s", cmd, envServer)
	}
	var opts []client.Option
	if s.tokenFile != "" {
		opts = append(opts, client.WithTokenFile(s.tokenFile))
	}
	switch {
	case s.caFile != "":
		opts = append(opts, client.WithCAFile(s.caFile))
	case s.tls:
		opts = append(opts, client.WithTLS(nil))
	}
	c, err := client.Dial(ctx, s.addr, opts...)
	if err != nil {
		return nil, usageErrorf("%s: %v", cmd, err)
	}
	return c, nil
}

// remoteError gives a gRPC error from the server the exit status of the
// matching local failure: malformed input or an unknown id 2, not positive
// definite or breakdown 4, cancelled or past a deadline 3, anything else
// (unreachable, refused, unauthenticated) 1.
func remoteError(what string, err error) error {
	st, ok := status.FromError(err)
	if !ok {
		return fmt.Errorf("%s: %w", what, err)
	}
	msg := fmt.Errorf("%s: %s (%s)", what, st.Message(), st.Code())
	switch st.Code() {
	case codes.InvalidArgument, codes.NotFound:
		return &exitError{code: exitUsage, err: msg}
	case codes.FailedPrecondition:
		return &exitError{code: exitBreakdown, err: msg}
	case codes.Canceled, codes.DeadlineExceeded:
		return &exitError{code: exitNotConverged, err: msg}
	}
	return msg
}

// plainStatus returns a gRPC error as its message alone, for a summary
// that already names the server and the status.
func plainStatus(err error) error {
	if st, ok := status.FromError(err); ok && err != nil {
		return errors.New(st.Message())
	}
	return err
}

// remoteDisplay turns a job's event stream into the local recorders: the
// live monitor (made when the job is accepted, so that it names the
// preconditioner chosen), the history file and the plot's log.
type remoteDisplay struct {
	e        *env
	o        *solveOpts
	name     string
	rec      tee
	finish   func(*solveReport) error
	mon      *monitor.Monitor
	accepted *pb.Accepted
	target   float64
}

// newRemoteDisplay makes the display of a remote job; target is the
// relative residual aimed at (0 for least squares, which has none), and a
// least-squares job's history keeps the ‖Aᵀr‖ column.
func newRemoteDisplay(e *env, o *solveOpts, name string, target float64, leastSquares bool) (*remoteDisplay, error) {
	quiet := *o
	quiet.quiet = true // the monitor is added on the accepted event
	rec, finish, err := recorders(e, &quiet, leastSquares, monitor.Options{Matrix: name, Target: target})
	if err != nil {
		return nil, err
	}
	return &remoteDisplay{e: e, o: o, name: name, target: target, rec: rec.(tee), finish: finish}, nil
}

func (d *remoteDisplay) event(ev client.Event) {
	switch {
	case ev.Accepted != nil:
		d.accepted = ev.Accepted
		if !d.o.quiet && d.mon == nil {
			d.mon = monitor.New(d.e.stderr, monitor.Options{Target: d.target, Matrix: d.name, Preconditioner: ev.Accepted.GetPreconditioner()})
			d.rec = append(d.rec, d.mon)
		}
	case ev.Progress != nil && ev.Progress.GetRhs() == 0:
		p := ev.Progress
		d.rec.Record(krylov.Progress{
			Iteration: int(p.GetIteration()), Elapsed: time.Duration(p.GetElapsedSeconds() * float64(time.Second)),
			ResidualNorm: p.GetResidualNorm(), RelResidual: p.GetRelativeResidual(),
			NormalResidualNorm: p.GetNormalResidualNorm(),
		})
	case ev.Result != nil && ev.Result.GetRhs() == 0:
		d.stop()
	}
}

// stop ends the live display, before the summary is printed.
func (d *remoteDisplay) stop() {
	if d.mon != nil {
		d.mon.Close()
	}
}

// fillRemote copies a remote result into a summary.
func fillRemote(rep *solveReport, r client.Result, acc *pb.Accepted) {
	rep.Method, rep.Converged, rep.Status, rep.Error = r.Method, r.Converged, r.Status, r.Error
	rep.Iterations = int(r.Iterations)
	rep.RelativeResidual, rep.TrueResidualNorm, rep.RHSNorm = num(r.RelativeResidual), num(r.TrueResidualNorm), num(r.RHSNorm)
	rep.Preconditioner, rep.PreconditionerReason = r.Preconditioner, r.PreconditionerReason
	cached := r.FromCache
	rep.PreconditionerCached = &cached
	rep.SetupSeconds, rep.SolveSeconds, rep.SecondsPerIteration = num(r.SetupSeconds), num(r.SolveSeconds), num(r.PerIterationSeconds)
	rep.CondEstimate = num(r.Cond)
	rep.AbsTol = num(r.Settings.ATol)
	rep.MaxIter, rep.TimeLimitSeconds = int(r.Settings.MaxIter), num(r.Settings.TimeLimitSeconds)
	if r.Method != "cg" {
		// Least squares: the fields lsq reports locally.
		rep.PreconditionerCached = nil
		rep.ResidualNorm, rep.NormalResidualNorm = numPtr(r.ResidualNorm), numPtr(r.NormalResidualNorm)
		rep.NormEstimate, rep.StoppedBy = numPtr(r.NormEstimate), r.StoppedBy
		for _, c := range r.ZeroColumns {
			rep.ZeroColumns = append(rep.ZeroColumns, int(c))
		}
		rep.BTol, rep.Damp = numPtr(r.Settings.BTol), numPtr(r.Settings.Damp)
		return
	}
	rep.RecursiveResidualNorm = numPtr(r.ResidualNorm)
	rep.RecursiveRelativeResidual = numPtr(r.ResidualNorm)
	if r.RHSNorm > 0 {
		rep.RecursiveRelativeResidual = numPtr(r.ResidualNorm / r.RHSNorm)
	}
	rep.Shift = numPtr(r.Shift)
	if acc != nil {
		rep.ShiftTries = int(acc.GetTries())
		bytes := acc.GetPreconditionerBytes()
		rep.PreconditionerBytes = &bytes
	}
	rep.LambdaMin, rep.LambdaMax = numPtr(r.LambdaMin), numPtr(r.LambdaMax)
	rep.RelTol = numPtr(r.Settings.RTol)
}

// lsqRemote holds the least-squares settings of lsq --server.
type lsqRemote struct {
	method, scaling  string
	damp, atol, btol float64
}

// remoteSolve is solve --server (lsq == nil) and lsq --server: upload,
// solve with the live display, and the same summary and outputs as a
// local run.
func remoteSolve(ctx context.Context, e *env, path string, o *solveOpts, so *serverOpts, detach bool, lsq *lsqRemote) error {
	cmd := "solve"
	if lsq != nil {
		cmd = "lsq"
	}
	if detach && (o.out != "" || o.hist != "" || o.plot != "") {
		return usageErrorf("%s: --detach returns at once; fetch the outputs later with 'residua watch JOB -o ... --history ... --plot ...'", cmd)
	}
	c, err := so.dial(ctx, cmd)
	if err != nil {
		return err
	}
	defer c.Close()
	name := filepath.Base(path)
	rep := &solveReport{Matrix: path, Server: so.addr}
	var b []float64
	var ones bool
	var m *pb.Matrix
	if o.b != "" && !isBundle(path) {
		// The server parses the file as it streams in; only b is read here.
		if b, _, err = matrixio.ReadVectorFile(o.b, nil); err != nil {
			return inputError(err)
		}
		rep.RHS = "from " + o.b
		if m, err = c.UploadFile(ctx, path, name); err != nil {
			return remoteError("uploading "+path, err)
		}
	} else {
		// b comes from the matrix (A·1) or from a bundle: read it here and
		// upload the arrays themselves.
		p, err := loadProblem(path, o.b)
		if err != nil {
			return err
		}
		b, ones, rep.RHS, rep.ReadSeconds = p.b, p.ones, p.rhs, seconds(p.read)
		if lsq == nil {
			if err := checkSPDShape(p); err != nil {
				return err
			}
		} else {
			ones, rep.RHS = lsqOnes(p, lsq.damp)
		}
		if m, err = c.UploadCSR(ctx, p.a, name); err != nil {
			return remoteError("uploading "+path, err)
		}
	}
	rep.MatrixID, rep.Rows, rep.Cols, rep.Nonzeros = m.GetId(), int(m.GetRows()), int(m.GetCols()), int(m.GetNonzeros())
	rep.UploadSeconds = numPtr(m.GetUploadSeconds())
	switch {
	case lsq != nil:
	case m.GetRows() != m.GetCols():
		return usageErrorf("%s is %d×%d, not square: conjugate gradients solves square SPD systems; for least squares run 'residua lsq %s -b b.mtx' (locally)",
			path, m.GetRows(), m.GetCols(), path)
	case m.GetSymmetry() != "symmetric":
		return &exitError{code: exitBreakdown, err: fmt.Errorf("%s is not symmetric: conjugate gradients needs a symmetric positive definite matrix; 'residua lsq %s' solves the normal equations instead", path, path)}
	}
	if len(b) != rep.Rows {
		return inputError(fmt.Errorf("the right-hand side has %d entries but %s has %d rows", len(b), path, rep.Rows))
	}
	x0, err := readX0(o.x0, rep.Cols)
	if err != nil {
		return err
	}
	req := client.SolveRequest{
		MatrixID: m.GetId(), B: [][]float64{b}, Precond: o.precond,
		RTol: o.rtol, ATol: o.atol, MaxIter: o.maxIter, TimeLimit: o.timeLimit,
		Detach: detach, KeepSolution: detach, Label: name,
	}
	target := o.rtol
	if lsq != nil {
		req.Method, req.Precond, req.RTol = lsq.method, lsq.scaling, 0
		req.ATol, req.BTol, req.Damp = lsq.atol, lsq.btol, lsq.damp
		target = 0
	}
	if x0 != nil {
		req.X0 = [][]float64{x0}
	}
	if o.hist != "" || o.plot != "" {
		req.ProgressEvery = 1 // the history wants every iteration
	}
	if detach {
		out, err := c.Solve(ctx, req, nil)
		if err != nil {
			return remoteError(cmd, err)
		}
		if o.json {
			return writeJSON(e.stdout, map[string]string{"job_id": out.JobID, "matrix_id": m.GetId(), "server": so.addr})
		}
		fmt.Fprintf(e.stdout, "%s\n", out.JobID)
		fmt.Fprintf(e.stderr, "residua: job %s started on %s; follow it with 'residua watch %s'\n", out.JobID, so.addr, out.JobID)
		return nil
	}
	disp, err := newRemoteDisplay(e, o, name, target, lsq != nil)
	if err != nil {
		return err
	}
	out, solveErr := c.Solve(ctx, req, disp.event)
	disp.stop()
	if out != nil {
		rep.JobID = out.JobID
	}
	if out == nil || len(out.Results) == 0 {
		disp.finish(rep)
		if solveErr == nil {
			solveErr = fmt.Errorf("job ended %s without a result: %s", out.State, out.Error)
		}
		return remoteError(cmd+" on "+so.addr, solveErr)
	}
	fillRemote(rep, out.Results[0], out.Accepted)
	var x []float64
	if len(out.X) > 0 {
		x = out.X[0]
	}
	if ones && x != nil {
		rep.ErrorVsOnes = numPtr(maxErrorVsOnes(x))
	}
	solveErr = plainStatus(solveErr)
	if solveErr != nil && rep.Error == "" {
		rep.Error = solveErr.Error()
	}
	return finishRun(e, o, path, rep, x, disp.finish, solveErr)
}

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(v)
}

// jobJSON is one job in 'residua jobs --json'.
type jobJSON struct {
	ID               string  `json:"id"`
	State            string  `json:"state"`
	MatrixID         string  `json:"matrix_id"`
	MatrixName       string  `json:"matrix_name"`
	Rows             int64   `json:"rows"`
	Nonzeros         int64   `json:"nonzeros"`
	Method           string  `json:"method"`
	Preconditioner   string  `json:"preconditioner"`
	RHSCount         int32   `json:"rhs_count"`
	RHSDone          int32   `json:"rhs_done"`
	Iteration        int64   `json:"iteration"`
	RelativeResidual num     `json:"relative_residual"`
	ElapsedSeconds   num     `json:"elapsed_seconds"`
	Detached         bool    `json:"detached"`
	Label            string  `json:"label,omitempty"`
	Error            string  `json:"error,omitempty"`
	CreatedUnix      float64 `json:"created_unix"`
	SolutionKept     bool    `json:"solution_kept"`
}

// stateName is a job state's word for people and JSON.
func stateName(s pb.JobState) string {
	return strings.ToLower(s.String())
}

func jobView(j *pb.Job) jobJSON {
	pc := j.GetPreconditioner()
	if pc == "" {
		pc = j.GetPreconditionerRequested()
	}
	return jobJSON{
		ID: j.GetId(), State: stateName(j.GetState()), MatrixID: j.GetMatrixId(), MatrixName: j.GetMatrixName(),
		Rows: j.GetRows(), Nonzeros: j.GetNonzeros(), Method: j.GetMethod(), Preconditioner: pc,
		RHSCount: j.GetRhsCount(), RHSDone: j.GetRhsDone(),
		Iteration: j.GetLastProgress().GetIteration(), RelativeResidual: num(j.GetLastProgress().GetRelativeResidual()),
		ElapsedSeconds: num(j.GetLastProgress().GetElapsedSeconds()), Detached: j.GetDetached(), Label: j.GetLabel(),
		Error: j.GetError(), CreatedUnix: j.GetCreatedUnix(), SolutionKept: j.GetSolutionKept(),
	}
}

const jobsAbout = `
Lists the jobs the server knows (queued, running and recently finished),
newest first: id, state, matrix, preconditioner, iteration, relative residual
and elapsed time. With --json, prints {"jobs": [...]} with the keys listed in
the README (at least id and state).`

func runJobs(ctx context.Context, e *env, args []string) error {
	so := &serverOpts{}
	f := newFlags("jobs", "residua jobs [--server ADDR] [--json]", jobsAbout)
	asJSON := f.Bool("json", false, "print the jobs as JSON")
	addServerFlags(f, so)
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 {
		return usageErrorf("jobs: takes no arguments, got %q", pos)
	}
	so.resolve()
	c, err := so.dial(ctx, "jobs")
	if err != nil {
		return err
	}
	defer c.Close()
	jobs, err := c.Jobs(ctx)
	if err != nil {
		return remoteError("jobs", err)
	}
	views := make([]jobJSON, 0, len(jobs))
	for _, j := range jobs {
		views = append(views, jobView(j))
	}
	if *asJSON {
		return writeJSON(e.stdout, map[string]any{"jobs": views})
	}
	if len(views) == 0 {
		fmt.Fprintf(e.stdout, "no jobs on %s\n", so.addr)
		return nil
	}
	tw := tabwriter.NewWriter(e.stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "ID\tSTATE\tMATRIX\tROWS\tPRECONDITIONER\tITERATION\tREL. RESIDUAL\tELAPSED")
	for _, v := range views {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%d\t%s\t%d\t%s\t%s\n", v.ID, v.State, v.MatrixName, v.Rows, v.Preconditioner,
			v.Iteration, sci(float64(v.RelativeResidual)), fmtSec(v.ElapsedSeconds))
	}
	return tw.Flush()
}

const watchAbout = `
Follows a job on the server: replays its progress so far, then shows it
live (the same panel or plain lines as solve; --quiet silences them), and
prints the same summary as solve when the job ends (with --json, one JSON
object per right-hand side). Interrupting watch stops watching only: the job
goes on. -o downloads the solution (for jobs that keep theirs, such as
those started with solve --detach); --history and --plot write what the
server streamed.

Exit statuses as for solve, from the job's outcome.`

func runWatch(ctx context.Context, e *env, args []string) error {
	so := &serverOpts{}
	o := &solveOpts{}
	f := newFlags("watch", "residua watch JOB [--server ADDR] [--json] [-o x.mtx] [--history h.csv] [--plot p.svg]", watchAbout)
	addServerFlags(f, so)
	f.StringVar(&o.out, "o", "", "download the solution to this Matrix Market `file` (only if converged)")
	f.StringVar(&o.hist, "history", "", "write the streamed history to this `file` (.csv or .json)")
	f.StringVar(&o.plot, "plot", "", "draw the residual curve to this `file` (.svg or .png)")
	f.BoolVar(&o.json, "json", false, "print the summary as JSON")
	f.BoolVar(&o.quiet, "quiet", false, "no live progress on stderr")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("watch: want one job id, got %d arguments", len(pos))
	}
	if err := checkOutputFlags("watch", o); err != nil {
		return err
	}
	so.resolve()
	c, err := so.dial(ctx, "watch")
	if err != nil {
		return err
	}
	defer c.Close()
	id := pos[0]
	job, err := c.Job(ctx, id)
	if err != nil {
		return remoteError("watch", err)
	}
	target := job.GetRtol()
	if job.GetMethod() != "cg" {
		target = 0 // least squares has no target relative residual
	}
	o.rtol = target
	disp, err := newRemoteDisplay(e, o, job.GetMatrixName(), target, job.GetMethod() != "cg")
	if err != nil {
		return err
	}
	out, watchErr := c.Watch(ctx, id, disp.event)
	disp.stop()
	if watchErr != nil && ctx.Err() != nil {
		disp.finish(&solveReport{})
		return &exitError{code: exitNotConverged, err: fmt.Errorf("stopped watching job %s; it goes on on %s", id, so.addr)}
	}
	if out == nil || len(out.Results) == 0 {
		disp.finish(&solveReport{})
		if watchErr != nil {
			return remoteError("watch", watchErr)
		}
		code := exitFailure
		if out.State == pb.JobState_CANCELLED.String() {
			code = exitNotConverged
		}
		return &exitError{code: code, err: fmt.Errorf("job %s ended %s without a result: %s", id, strings.ToLower(out.State), out.Error)}
	}
	if job, err = c.Job(ctx, id); err != nil {
		return remoteError("watch", err)
	}
	var first error
	for i, r := range out.Results {
		rep := &solveReport{Matrix: job.GetMatrixName(), Rows: int(job.GetRows()), Cols: int(job.GetRows()),
			Nonzeros: int(job.GetNonzeros()), Server: so.addr, JobID: id, MatrixID: job.GetMatrixId(),
			RHS: fmt.Sprintf("right-hand side %d of %d, given by the job's submitter", i+1, len(out.Results))}
		fillRemote(rep, r, out.Accepted)
		var x []float64
		oi := *o
		finish := func(*solveReport) error { return nil }
		if i == 0 {
			finish = disp.finish
		} else {
			oi.hist, oi.plot, oi.out = "", "", "" // the files are for the first right-hand side
		}
		if oi.out != "" && r.Converged {
			if !job.GetSolutionKept() {
				return usageErrorf("watch: job %s did not keep its solution on the server (only detached jobs do); -o cannot download it", id)
			}
			if x, err = c.DownloadSolution(ctx, id, i); err != nil {
				return remoteError("downloading the solution", err)
			}
		}
		if err := finishRun(e, &oi, rep.Matrix, rep, x, finish, plainStatus(watchErr)); err != nil && first == nil {
			first = err
		}
	}
	return first
}

const cancelAbout = `
Asks the server to cancel a job. A running solve stops within one
iteration and keeps its history; the job's state becomes cancelled.`

func runCancel(ctx context.Context, e *env, args []string) error {
	so := &serverOpts{}
	f := newFlags("cancel", "residua cancel JOB [--server ADDR] [--json]", cancelAbout)
	asJSON := f.Bool("json", false, "print the job as JSON")
	addServerFlags(f, so)
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("cancel: want one job id, got %d arguments", len(pos))
	}
	so.resolve()
	c, err := so.dial(ctx, "cancel")
	if err != nil {
		return err
	}
	defer c.Close()
	j, err := c.Cancel(ctx, pos[0])
	if err != nil {
		return remoteError("cancel", err)
	}
	if *asJSON {
		return writeJSON(e.stdout, jobView(j))
	}
	switch j.GetState() {
	case pb.JobState_QUEUED, pb.JobState_RUNNING:
		fmt.Fprintf(e.stdout, "job %s: cancel requested (it was %s; a running solve stops within one iteration)\n", j.GetId(), stateName(j.GetState()))
	default:
		fmt.Fprintf(e.stdout, "job %s: %s\n", j.GetId(), stateName(j.GetState()))
	}
	return nil
}
