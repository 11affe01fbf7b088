package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"golang.org/x/term"

	"github.com/residua/residua/chart"
	"github.com/residua/residua/history"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/monitor"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

func init() {
	register(&command{
		name:    "solve",
		summary: "solve A·x = b for a sparse SPD matrix by (preconditioned) conjugate gradients",
		run:     runSolve,
	})
}

const solveAbout = `
Solves A·x = b for a symmetric positive definite A read from a Matrix Market
file (plain, gzip-compressed, or a collection bundle NAME.tar.gz) by
conjugate gradients with no, Jacobi or incomplete Cholesky (IC(0))
preconditioning. A symmetric A that is not positive definite (a
saddle-point or KKT matrix, a shifted operator) is solved by MINRES
instead: --method minres, or the automatic method when a diagonal entry is
≤ 0 or conjugate gradients breaks down (the summary says why). MINRES
takes Jacobi on |diag(A)|, or for a matrix with a zero (2,2) block the
block-diagonal preconditioner (--precond block). The answer is accepted
only when the true residual, recomputed from x, meets
‖b − A·x‖ ≤ max(rtol·‖b‖, atol).

Right-hand side: -b FILE; else a bundle's own NAME_b.mtx; else b = A·1, in
which case the exact solution is all ones and the summary also reports the
error max |x_i − 1|.

While it runs, stderr shows a live panel on a terminal (residual curve,
rate, estimated time left) or a plain line every few seconds otherwise;
--quiet silences it. At the end the summary goes to stdout, as text or, with
--json, as one JSON object (keys listed in the README).

The solution (-o) is written only when the solve converged, atomically; the
history (--history, .csv or .json lines) and the picture (--plot, .svg or
.png) are written whatever the outcome, since they show what happened.

With --checkpoint FILE the solve's full state (the iterate and the
method's recurrence, the settings, the history so far) is written to FILE
every --checkpoint-every (default 30s) and when SIGINT or SIGTERM stops it;
the same command with --resume FILE continues it, giving bitwise the x and
history an uninterrupted run gives on this machine. A checkpoint of another
matrix, right-hand side or setting is refused, naming what differs.

With --server ADDR (or $RESIDUA_SERVER) the solve runs on a residua server
(see 'residua serve'): the matrix is uploaded named after its file, and the
flags, display, summary, outputs and exit statuses are those of a local
solve. The answer is bitwise the one a local solve gives on a machine with
the same number of processors. --detach starts the job, prints its id and
returns; follow it with 'residua watch JOB'.`

// solveOpts are the flags shared by solve, lsq and demo.
type solveOpts struct {
	mostlyEmpty     bool // --allow-mostly-empty
	b, x0, precond  string
	method          string           // solve's --method: auto, cg or minres
	amg             solve.AMGOptions // --amg-* flags of solve
	nearNull        string           // --near-null file
	rtol, atol      float64
	maxIter         int
	timeLimit       time.Duration
	out, hist, plot string
	json, quiet     bool
	alwaysWrite     bool // write -o whatever the outcome

	// printed: the command has written its answer on stdout (a summary,
	// or a detached job's id), so a later error adds nothing there.
	printed bool
	ck      ckptOpts // solve and lsq only (see checkpoint.go)
}

// addRunFlags registers the tolerance flags of the conjugate-gradient
// commands.
func addRunFlags(f *cmdFlags, o *solveOpts) {
	f.Float64Var(&o.rtol, "rtol", 0, "relative tolerance: stop when ‖b − A·x‖ ≤ max(rtol·‖b‖, atol); 0 means the default, 1e-8")
	f.Float64Var(&o.atol, "atol", 0, "absolute tolerance on ‖b − A·x‖ (default 0: none)")
	addOutputFlags(f, o)
}

// addOutputFlags registers the flags every solving command has.
func addOutputFlags(f *cmdFlags, o *solveOpts) {
	f.IntVar(&o.maxIter, "max-iter", 0, "iteration cap `N`; 0 means the default, 10·n")
	f.DurationVar(&o.timeLimit, "time-limit", 0, "wall-time budget for the iterations, e.g. 30s or 5m (default none)")
	f.StringVar(&o.out, "o", "", "write the solution x to this Matrix Market `file` (only if converged, unless --always-write)")
	f.BoolVar(&o.alwaysWrite, "always-write", false, "write -o's file whatever the outcome: the last iterate of a solve that stopped early, for restarting it yourself")
	f.StringVar(&o.hist, "history", "", "write the convergence history to this `file` (.csv, or .json for JSON lines)")
	f.StringVar(&o.plot, "plot", "", "draw the residual curve to this `file` (.svg or .png)")
	f.BoolVar(&o.json, "json", false, "print the summary as one JSON object")
	f.BoolVar(&o.quiet, "quiet", false, "no live progress on stderr")
	f.BoolVar(&o.mostlyEmpty, "allow-mostly-empty", false, "read a matrix even when more than half of its rows or columns must be empty (refused by default: a few bytes of size line can ask for gigabytes of row pointers)")
}

// request turns the flags into the solve layer's request.
func (o *solveOpts) request() solve.Request {
	return solve.Request{Method: solve.Method(o.method), Preconditioner: o.precond, RelTol: o.rtol, AbsTol: o.atol, MaxIter: o.maxIter, TimeLimit: o.timeLimit, AMG: o.amg}
}

// flagOf names the command-line flag of a request setting (the flags are
// the settings' names with dashes, except for the preconditioner).
func flagOf(field string) string {
	switch field {
	case "preconditioner":
		return "precond"
	case "amg":
		return "amg-theta, --amg-smoother, --amg-degree, --block-size or --near-null"
	case "amg_block_size":
		return "block-size"
	}
	return strings.ReplaceAll(field, "_", "-")
}

// checkRequest validates a request built from the flags, naming the flag
// of a setting it refuses.
func checkRequest(cmd string, r solve.Request) (solve.Request, error) {
	r, err := r.Validate()
	var fe *solve.FieldError
	if errors.As(err, &fe) {
		return r, usageErrorf("%s: --%s: %v", cmd, flagOf(fe.Field), fe.Err)
	}
	return r, err
}

// checkOutputFlags checks the output file names.
func checkOutputFlags(cmd string, o *solveOpts) error {
	if o.hist != "" {
		if _, ok := history.FormatOf(o.hist); !ok {
			return usageErrorf("%s: --history %s: the name must end in .csv or .json (JSON lines)", cmd, o.hist)
		}
	}
	if o.plot != "" {
		if ext := strings.ToLower(filepath.Ext(o.plot)); ext != ".svg" && ext != ".png" {
			return usageErrorf("%s: --plot %s: the name must end in .svg or .png", cmd, o.plot)
		}
	}
	return nil
}

func runSolve(ctx context.Context, e *env, args []string) (err error) {
	o := &solveOpts{}
	f := newFlags("solve", "residua solve A.mtx [-b b.mtx] [--x0 x0.mtx] [--method auto|cg|minres] [--precond auto|none|jacobi|ic0|amg|block] [flags]", solveAbout)
	f.StringVar(&o.b, "b", "", "right-hand side `file` (default: the bundle's NAME_b.mtx, else b = A·1)")
	f.StringVar(&o.x0, "x0", "", "starting guess `file` (default zero)")
	f.StringVar(&o.method, "method", "auto", "iteration `method`: auto (CG, or MINRES when A's diagonal or a CG breakdown shows it is not positive definite), cg, or minres (any symmetric A)")
	f.StringVar(&o.precond, "precond", "auto", "preconditioner `kind`: auto, none, jacobi (with minres: on |diag(A)|), ic0, amg (smoothed-aggregation multigrid), or block (minres on a saddle-point matrix with a zero (2,2) block)")
	no := &normalOpts{}
	f.StringVar(&no.weights, "weights", "", "solve the normal equations (B·diag(d)·Bᵀ + δI)·y = r instead: the matrix file is B, this vector `file` holds d (one weight ≥ 0 per column of B), -b holds r (default r = N·1)")
	f.Float64Var(&no.reg, "reg", 0, "with --weights: the regularisation δ ≥ 0 added to the diagonal of B·diag(d)·Bᵀ")
	addAMGFlags(f, o)
	addRunFlags(f, o)
	addCheckpointFlags(f, &o.ck)
	so := &serverOpts{}
	addServerFlags(f, so)
	detach := f.Bool("detach", false, "with --server: start the job, print its id and return (the job keeps its solution for 'residua watch JOB -o x.mtx')")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	defer func() { err = o.answerFailure(e, pos, err) }()
	if len(pos) != 1 {
		return usageErrorf("solve: want one matrix file, got %d arguments (run 'residua solve --help')", len(pos))
	}
	if m := solve.Method(o.method); m.LeastSquares() {
		return usageErrorf("solve: --method %s: solves least squares; use 'residua lsq --method %s'", o.method, o.method)
	}
	if o.nearNull != "" {
		nn, err := readNearNull(o.nearNull)
		if err != nil {
			return err
		}
		o.amg.NearNull = nn
	}
	req, err := checkRequest("solve", o.request())
	if err != nil {
		return err
	}
	if err := checkOutputFlags("solve", o); err != nil {
		return err
	}
	so.resolve()
	if err := o.ck.check(f, so.addr != ""); err != nil {
		return err
	}
	if no.weights != "" && (o.ck.path != "" || o.ck.resume != "") {
		return usageErrorf("solve: --checkpoint and --resume do not apply to --weights (the normal equations) yet")
	}
	if no.weights == "" && no.reg != 0 {
		return usageErrorf("solve: --reg applies with --weights (the normal equations) only")
	}
	if no.weights != "" {
		if so.addr != "" {
			return usageErrorf("solve: --weights runs locally only: the service does not take normal-equations weights yet")
		}
		return solveNormal(ctx, e, pos[0], req, o, no)
	}
	if so.addr != "" && req.AMG.NearNull != nil {
		// SolveRequest.amg carries θ, the smoother, its degree and the
		// block size, not a near-null space: refuse rather than solve
		// with it silently dropped.
		return usageErrorf("solve: --near-null is not sent to a server yet; solve locally, or leave it out with --server (the other --amg-* options are sent)")
	}
	if so.addr != "" {
		return remoteSolve(ctx, e, pos[0], req, o, so, *detach)
	}
	if *detach {
		return usageErrorf("solve: --detach needs --server (or $%s)", envServer)
	}
	p, err := loadProblem(pos[0], o.b, o.mostlyEmpty)
	if err != nil {
		return err
	}
	return solveLocal(ctx, e, p, req, o)
}

// problem is a system to solve, with where it came from.
type problem struct {
	name      string // file name or scenario, for messages and titles
	a         *sparse.CSR
	symmetric bool        // known symmetric from the file's header or construction
	bs        [][]float64 // the right-hand sides: b's columns, one or more
	rhs       string      // where b came from, in words
	ones      bool        // b = A·1: the exact solution is all ones
	read      time.Duration
}

// readOptions are the matrix-reading options of the commands that read
// files: matrices whose dimensions dwarf their entries are refused at the
// size line, before their row pointers are allocated, unless allowed.
func readOptions(allowMostlyEmpty bool) *matrixio.Options {
	return &matrixio.Options{Limits: matrixio.Limits{RefuseMostlyEmpty: !allowMostlyEmpty}}
}

// mostlyEmptyHint adds the flag that accepts a mostly empty matrix to the
// reader's refusal of one.
func mostlyEmptyHint(err error) error {
	if errors.Is(err, matrixio.ErrMostlyEmpty) {
		return fmt.Errorf("%w (pass --allow-mostly-empty to read it anyway)", err)
	}
	return err
}

// loadProblem reads the matrix and the right-hand side. Unreadable or
// malformed files give an error with exit status 2; the matrixio errors
// name the file and line.
func loadProblem(path, bPath string, allowMostlyEmpty bool) (*problem, error) {
	start := time.Now()
	a, info, err := matrixio.ReadMatrixFile(path, readOptions(allowMostlyEmpty))
	if err != nil {
		return nil, inputError(mostlyEmptyHint(err))
	}
	p := &problem{name: path, a: a, symmetric: info.Header.Symmetry == "symmetric", read: time.Since(start)}
	switch {
	case bPath != "":
		bs, _, err := matrixio.ReadColumnsFile(bPath, nil)
		if err != nil {
			return nil, inputError(err)
		}
		p.bs, p.rhs = bs, "from "+bPath
	case matrixio.IsBundle(path):
		bs, _, err := matrixio.ReadColumnsFile(path, nil)
		if err == nil {
			p.bs, p.rhs = bs, "the bundle's own right-hand side"
			break
		}
		if !errors.Is(err, matrixio.ErrNoRHS) {
			return nil, inputError(err)
		}
		fallthrough
	default:
		b := make([]float64, a.Rows)
		a.MulVec(b, onesVec(a.Cols))
		p.bs = [][]float64{b}
		p.rhs = "b = A·1 (no -b given), so the exact solution is all ones"
		p.ones = true
	}
	if len(p.bs) == 0 || len(p.bs[0]) != a.Rows {
		n := 0
		if len(p.bs) > 0 {
			n = len(p.bs[0])
		}
		return nil, inputError(fmt.Errorf("the right-hand side has %d entries but %s has %d rows", n, path, a.Rows))
	}
	return p, nil
}

// rhsOf describes right-hand side j of p in words.
func (p *problem) rhsOf(j int, rhs string) string {
	if len(p.bs) == 1 {
		return rhs
	}
	return fmt.Sprintf("column %d of %d, %s", j+1, len(p.bs), rhs)
}

func onesVec(n int) []float64 {
	v := make([]float64, n)
	for i := range v {
		v[i] = 1
	}
	return v
}

// onesSolution says whether x = 1 is the answer the request should find
// for p, and describes p's right-hand side. With b = A·1 a system's
// solution is all ones; for least squares x = 1 solves the consistent
// system, and is the solution sought only when it is the only one (full
// column rank, which needs rows ≥ cols) and there is no damping.
func (p *problem) onesSolution(req solve.Request) (bool, string) {
	if !p.ones || !req.LeastSquares {
		return p.ones, p.rhs
	}
	ones := p.a.Rows >= p.a.Cols && req.Damp == 0
	rhs := "b = A·1 (no -b given): a consistent system that x = 1 solves"
	if ones {
		return true, rhs + "; the unique solution when A has full column rank"
	}
	return false, rhs + "; not the solution sought here (damped, or fewer rows than columns: the minimum-norm one)"
}

// readX0 reads the starting guesses for k right-hand sides of n unknowns:
// nil without a file; one vector serves every right-hand side, or the
// file has one column per right-hand side.
func readX0(path string, n, k int) ([][]float64, error) {
	if path == "" {
		return make([][]float64, k), nil
	}
	x0, _, err := matrixio.ReadColumnsFile(path, nil)
	if err != nil {
		return nil, inputError(err)
	}
	if len(x0[0]) != n {
		return nil, inputError(fmt.Errorf("--x0 %s has %d entries but the matrix has %d columns", path, len(x0[0]), n))
	}
	switch len(x0) {
	case k:
		return x0, nil
	case 1:
		all := make([][]float64, k)
		for j := range all {
			all[j] = x0[0]
		}
		return all, nil
	}
	return nil, inputError(fmt.Errorf("--x0 %s has %d columns but b has %d: give one starting guess for all, or one per column", path, len(x0), k))
}

// solveLocal runs a solve of p in this process, through the solve layer,
// with the live display and the outputs the flags ask for, and prints the
// summary; the returned error carries the exit status.
func solveLocal(ctx context.Context, e *env, p *problem, req solve.Request, o *solveOpts) error {
	m := solve.Check(p.a, p.name, p.symmetric)
	k := len(p.bs)
	x0, err := readX0(o.x0, p.a.Cols, k)
	if err != nil {
		return err
	}
	ones, rhs := p.onesSolution(req)
	ck, err := openCheckpoint(e, &o.ck, p, req)
	if err != nil {
		return err
	}
	setup, err := solve.Prepare(m, req)
	if err != nil {
		sum := solve.Failure(m, req, err)
		sum.RHS, sum.ReadSeconds = rhs, solve.Seconds(p.read)
		sum.Unstarted(p.a, p.bs[0], x0[0])
		return printOnly(e, o, &sum, err)
	}
	// One set-up (the preconditioner or scaling) serves every column.
	runs := make([]columnRun, k)
	for j, b := range p.bs {
		oj := o.forColumn(j, k)
		mo := monitor.Options{Target: target(req, b), Matrix: filepath.Base(p.name), Preconditioner: setup.Summary().Preconditioner}
		rec, finish, err := recorders(e, oj, req.LeastSquares, mo)
		if err != nil {
			return err
		}
		x := make([]float64, p.a.Cols)
		if rec, err = ck.attach(rec); err != nil { // ck: one column only (openCheckpoint)
			return errors.Join(err, finish(&solve.Summary{}))
		}
		sum, solveErr := setup.SolveDurable(ctx, b, x0[j], x, rec, ck.durable())
		ck.report(&sum)
		sum.RHS, sum.RHSIndex, sum.ReadSeconds = p.rhsOf(j, rhs), j, solve.Seconds(p.read)
		if ones {
			sum.ErrorVsOnes = solve.NumPtr(maxErrorVsOnes(x))
		}
		runs[j] = columnRun{sum: sum, x: x, finish: finish, err: solveErr}
	}
	return finishRuns(e, o, runs, func(r *columnRun, err error) error { return recorderFailure(ctx, r.sum.Status, err) })
}

// target is the relative residual a system's solve aims at, for the live
// display: max(rtol, atol/‖b‖); zero for least squares, which has none.
func target(req solve.Request, b []float64) float64 {
	if req.LeastSquares {
		return 0
	}
	t := req.RelTol
	if t == 0 {
		t = krylov.DefaultRelTol
	}
	if bn := norm2(b); bn > 0 && req.AbsTol/bn > t {
		t = req.AbsTol / bn
	}
	return t
}

// failureAnswer is the JSON object a solving command prints with --json
// when it ends before a summary exists (a file that cannot be read, a
// right-hand side of the wrong length, a server that does not answer):
// the summary's keys that are known, and no figure that is not, with the
// gRPC code of a server's error for scripts.
type failureAnswer struct {
	Matrix    string `json:"matrix,omitempty"`
	Converged bool   `json:"converged"`
	Status    string `json:"status"`
	Headline  string `json:"headline"`
	Error     string `json:"error"`
	Advice    string `json:"advice,omitempty"`
	GRPCCode  string `json:"grpc_code,omitempty"`
}

// answerFailure prints, with --json, the one JSON object every outcome
// owes its caller when err ended the command before anything was printed,
// and returns err with its exit status unchanged (the message still goes
// to stderr). The status is refused for bad input (exit 2), cancelled for
// a stop (3), else failed.
func (o *solveOpts) answerFailure(e *env, pos []string, err error) error {
	if err == nil || !o.json || o.printed {
		return err
	}
	a := failureAnswer{Error: err.Error(), Advice: solve.Advice(err), GRPCCode: grpcCodeOf(err), Status: string(solve.Failed)}
	if len(pos) > 0 {
		a.Matrix = pos[0]
	}
	var ee *exitError
	if errors.As(err, &ee) {
		switch ee.code {
		case exitUsage:
			a.Status = string(solve.Refused)
		case exitNotConverged:
			a.Status = string(solve.Cancelled)
		}
	}
	sum := solve.Summary{Error: a.Error}
	sum.SetOutcome(solve.Outcome(a.Status))
	a.Headline = sum.Headline
	if werr := writeJSON(e.stdout, a); werr != nil {
		return errors.Join(err, werr)
	}
	return err
}

// printOnly prints the summary of a solve that ended before its method ran
// and returns the error with its exit status.
func printOnly(e *env, o *solveOpts, sum *solve.Summary, err error) error {
	o.printed = true
	if o.json {
		if werr := writeJSON(e.stdout, sum); werr != nil {
			return werr
		}
	} else {
		writeSummary(e.stdout, sum)
	}
	return outcomeError(sum, err)
}

// recorders builds the recorder chain of a solve: the live display (unless
// --quiet), the history file and the in-memory log the plot needs. finish
// closes the history file and draws the plot; it must be called after the
// solve, whatever its outcome.
func recorders(e *env, o *solveOpts, leastSquares bool, mo monitor.Options) (krylov.Recorder, func(*solve.Summary) error, error) {
	var t tee
	var hw *history.Writer
	if o.hist != "" {
		var err error
		hw, err = history.Create(o.hist, history.Options{LeastSquares: leastSquares})
		if err != nil {
			return nil, nil, err
		}
		t = append(t, hw)
	}
	var log *history.Log
	if o.plot != "" {
		log = &history.Log{}
		t = append(t, log)
	}
	var mon *monitor.Monitor
	if !o.quiet {
		mon = newMonitor(e, mo)
		t = append(t, mon)
	}
	finish := func(sum *solve.Summary) error {
		if mon != nil {
			mon.Close() // a no-op when the solver already called Finish
		}
		var errs []error
		if hw != nil {
			if err := hw.Close(); err != nil {
				errs = append(errs, fmt.Errorf("writing the history %s: %w", o.hist, err))
			} else {
				sum.HistoryFile = o.hist
			}
		}
		if log != nil {
			if err := drawPlot(o.plot, mo, log.Snapshot()); err != nil {
				errs = append(errs, err)
			} else {
				sum.PlotFile = o.plot
			}
		}
		return errors.Join(errs...)
	}
	return t, finish, nil
}

// newMonitor makes the live display. On a terminal the summary printed
// after the solve replaces the panel's live facts, and the panel leaves
// its final curve above it.
func newMonitor(e *env, mo monitor.Options) *monitor.Monitor {
	if f, ok := e.stderr.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		mo.Summary = func(io.Writer, *krylov.Result) {}
		mo.KeepCurve = true
	}
	return monitor.New(e.stderr, mo)
}

// drawPlot draws a history's residual curve with the run's tolerance,
// matrix and preconditioner.
func drawPlot(path string, mo monitor.Options, h history.History) error {
	opt := chart.Options{Matrix: mo.Matrix, Preconditioner: mo.Preconditioner, Tolerance: mo.Target}
	if err := chart.Write(path, opt, chart.Series{Rows: h.Rows}); err != nil {
		return fmt.Errorf("drawing %s: %w", path, err)
	}
	return nil
}

// recorderFailure turns the exit status of a solve that a recorder stopped
// (the history file could not be written: status cancelled although the
// context is live) from 3 into 1, an I/O failure rather than a stop.
func recorderFailure(ctx context.Context, status string, err error) error {
	var ee *exitError
	if status == string(solve.Cancelled) && ctx.Err() == nil && errors.As(err, &ee) && ee.code == exitNotConverged {
		ee.code = exitFailure
	}
	return err
}

// outcomeError maps a solve's outcome to the error that carries its exit
// status: nil when converged; 4 for a breakdown, a set-up that failed or a
// matrix that is not symmetric; 2 for a request or matrix shape refused;
// 3 for every other way of stopping early; 1 for a failure. The message is
// the outcome's word, then the summary's headline.
func outcomeError(sum *solve.Summary, err error) error {
	if err == nil {
		err = errors.New(sum.Status)
	}
	code := exitFailure
	switch solve.Outcome(sum.Status) {
	case solve.Converged:
		return nil
	case solve.Breakdown, solve.SetupFailed:
		code = exitBreakdown
	case solve.Refused:
		code = exitUsage
		if errors.Is(err, solve.ErrNotSymmetric) {
			code = exitBreakdown
		}
	case solve.IterationLimit, solve.TimeLimit, solve.Stagnated, solve.Cancelled:
		code = exitNotConverged
	}
	return &exitError{code: code, err: fmt.Errorf("%s: %s", sum.Status, sum.Headline)}
}

func norm2(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x * x
	}
	return math.Sqrt(s)
}

// maxErrorVsOnes returns max_i |x_i − 1|.
func maxErrorVsOnes(x []float64) float64 {
	m := 0.0
	for _, v := range x {
		if d := math.Abs(v - 1); d > m || math.IsNaN(d) {
			m = d
		}
	}
	return m
}
