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
preconditioning. The answer is accepted only when the true residual,
recomputed from x, meets ‖b − A·x‖ ≤ max(rtol·‖b‖, atol).

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

With --server ADDR (or $RESIDUA_SERVER) the solve runs on a residua server
(see 'residua serve'): the matrix is uploaded named after its file, and the
flags, display, summary, outputs and exit statuses are those of a local
solve. The answer is bitwise the one a local solve gives on a machine with
the same number of processors. --detach starts the job, prints its id and
returns; follow it with 'residua watch JOB'.`

// solveOpts are the flags shared by solve, lsq and demo.
type solveOpts struct {
	b, x0, precond  string
	amg             solve.AMGOptions // --amg-* flags of solve
	nearNull        string           // --near-null file
	rtol, atol      float64
	maxIter         int
	timeLimit       time.Duration
	out, hist, plot string
	json, quiet     bool
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
	f.StringVar(&o.out, "o", "", "write the solution x to this Matrix Market `file` (only if converged)")
	f.StringVar(&o.hist, "history", "", "write the convergence history to this `file` (.csv, or .json for JSON lines)")
	f.StringVar(&o.plot, "plot", "", "draw the residual curve to this `file` (.svg or .png)")
	f.BoolVar(&o.json, "json", false, "print the summary as one JSON object")
	f.BoolVar(&o.quiet, "quiet", false, "no live progress on stderr")
}

// request turns the flags into the solve layer's request.
func (o *solveOpts) request() solve.Request {
	return solve.Request{Preconditioner: o.precond, RelTol: o.rtol, AbsTol: o.atol, MaxIter: o.maxIter, TimeLimit: o.timeLimit, AMG: o.amg}
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

func runSolve(ctx context.Context, e *env, args []string) error {
	o := &solveOpts{}
	f := newFlags("solve", "residua solve A.mtx [-b b.mtx] [--x0 x0.mtx] [--precond auto|none|jacobi|ic0|amg] [flags]", solveAbout)
	f.StringVar(&o.b, "b", "", "right-hand side `file` (default: the bundle's NAME_b.mtx, else b = A·1)")
	f.StringVar(&o.x0, "x0", "", "starting guess `file` (default zero)")
	f.StringVar(&o.precond, "precond", "auto", "preconditioner `kind`: auto, none, jacobi, ic0 or amg")
	addAMGFlags(f, o)
	addRunFlags(f, o)
	so := &serverOpts{}
	addServerFlags(f, so)
	detach := f.Bool("detach", false, "with --server: start the job, print its id and return (the job keeps its solution for 'residua watch JOB -o x.mtx')")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("solve: want one matrix file, got %d arguments (run 'residua solve --help')", len(pos))
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
	if so.addr != "" && req.AMG != (solve.AMGOptions{}) {
		// The service's SolveRequest has no fields for them yet: refuse
		// rather than solve with options silently dropped.
		return usageErrorf("solve: --amg-theta, --amg-smoother, --amg-degree, --block-size and --near-null are not sent to a server yet; solve locally, or use the defaults with --server")
	}
	if so.addr != "" {
		return remoteSolve(ctx, e, pos[0], req, o, so, *detach)
	}
	if *detach {
		return usageErrorf("solve: --detach needs --server (or $%s)", envServer)
	}
	p, err := loadProblem(pos[0], o.b)
	if err != nil {
		return err
	}
	return solveLocal(ctx, e, p, req, o)
}

// problem is a system to solve, with where it came from.
type problem struct {
	name      string // file name or scenario, for messages and titles
	a         *sparse.CSR
	symmetric bool // known symmetric from the file's header or construction
	b         []float64
	rhs       string // where b came from, in words
	ones      bool   // b = A·1: the exact solution is all ones
	read      time.Duration
}

// loadProblem reads the matrix and the right-hand side. Unreadable or
// malformed files give an error with exit status 2; the matrixio errors
// name the file and line.
func loadProblem(path, bPath string) (*problem, error) {
	start := time.Now()
	a, info, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		return nil, inputError(err)
	}
	p := &problem{name: path, a: a, symmetric: info.Header.Symmetry == "symmetric", read: time.Since(start)}
	switch {
	case bPath != "":
		b, _, err := matrixio.ReadVectorFile(bPath, nil)
		if err != nil {
			return nil, inputError(err)
		}
		p.b, p.rhs = b, "from "+bPath
	case matrixio.IsBundle(path):
		b, _, err := matrixio.ReadBundleRHS(path, nil)
		if err == nil {
			p.b, p.rhs = b, "the bundle's own right-hand side"
			break
		}
		if !errors.Is(err, matrixio.ErrNoRHS) {
			return nil, inputError(err)
		}
		fallthrough
	default:
		p.b = make([]float64, a.Rows)
		a.MulVec(p.b, onesVec(a.Cols))
		p.rhs = "b = A·1 (no -b given), so the exact solution is all ones"
		p.ones = true
	}
	if len(p.b) != a.Rows {
		return nil, inputError(fmt.Errorf("the right-hand side has %d entries but %s has %d rows", len(p.b), path, a.Rows))
	}
	return p, nil
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

// readX0 reads a starting guess and checks its length.
func readX0(path string, n int) ([]float64, error) {
	if path == "" {
		return nil, nil
	}
	x0, _, err := matrixio.ReadVectorFile(path, nil)
	if err != nil {
		return nil, inputError(err)
	}
	if len(x0) != n {
		return nil, inputError(fmt.Errorf("--x0 %s has %d entries but the matrix has %d columns", path, len(x0), n))
	}
	return x0, nil
}

// solveLocal runs a solve of p in this process, through the solve layer,
// with the live display and the outputs the flags ask for, and prints the
// summary; the returned error carries the exit status.
func solveLocal(ctx context.Context, e *env, p *problem, req solve.Request, o *solveOpts) error {
	m := solve.Check(p.a, p.name, p.symmetric)
	x0, err := readX0(o.x0, p.a.Cols)
	if err != nil {
		return err
	}
	ones, rhs := p.onesSolution(req)
	setup, err := solve.Prepare(m, req)
	if err != nil {
		sum := solve.Failure(m, req, err)
		sum.RHS, sum.ReadSeconds = rhs, solve.Seconds(p.read)
		return printOnly(e, o, &sum, err)
	}
	mo := monitor.Options{Target: target(req, p.b), Matrix: filepath.Base(p.name), Preconditioner: setup.Summary().Preconditioner}
	rec, finish, err := recorders(e, o, req.LeastSquares, mo)
	if err != nil {
		return err
	}
	x := make([]float64, p.a.Cols)
	sum, solveErr := setup.Solve(ctx, p.b, x0, x, rec)
	sum.RHS, sum.ReadSeconds = rhs, solve.Seconds(p.read)
	if ones {
		sum.ErrorVsOnes = solve.NumPtr(maxErrorVsOnes(x))
	}
	return recorderFailure(ctx, sum.Status, finishRun(e, o, &sum, x, finish, solveErr))
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

// printOnly prints the summary of a solve that ended before its method ran
// and returns the error with its exit status.
func printOnly(e *env, o *solveOpts, sum *solve.Summary, err error) error {
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
// after the solve replaces the panel, so the panel leaves nothing behind.
func newMonitor(e *env, mo monitor.Options) *monitor.Monitor {
	if f, ok := e.stderr.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		mo.Summary = func(io.Writer, *krylov.Result) {}
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

// finishRun writes the outputs of a finished solve (history, plot, and the
// solution when it converged), prints the summary and returns the error
// that gives the exit status.
func finishRun(e *env, o *solveOpts, sum *solve.Summary, x []float64, finish func(*solve.Summary) error, solveErr error) error {
	outErr := finish(sum)
	if o.out != "" {
		if sum.Converged && x != nil {
			if err := matrixio.WriteVectorFile(o.out, x); err != nil {
				outErr = errors.Join(outErr, fmt.Errorf("writing the solution %s: %w", o.out, err))
			} else {
				sum.SolutionFile = o.out
			}
		} else {
			sum.SolutionNote = "not written to " + o.out + " (the solve did not converge)"
		}
	}
	if o.json {
		if err := writeJSON(e.stdout, sum); err != nil {
			return err
		}
	} else {
		writeSummary(e.stdout, sum)
	}
	if outErr != nil {
		return outErr
	}
	return outcomeError(sum, solveErr)
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
