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
	"github.com/residua/residua/precond"
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

// solveOpts are the flags shared by solve, demo and (in part) lsq.
type solveOpts struct {
	b, x0, precond  string
	rtol, atol      float64
	maxIter         int
	timeLimit       time.Duration
	out, hist, plot string
	json, quiet     bool
}

// addRunFlags registers the flags of the conjugate-gradient commands.
func addRunFlags(f *cmdFlags, o *solveOpts) {
	f.Float64Var(&o.rtol, "rtol", 1e-8, "relative tolerance: stop when ‖b − A·x‖ ≤ max(rtol·‖b‖, atol)")
	f.Float64Var(&o.atol, "atol", 0, "absolute tolerance on ‖b − A·x‖")
	addOutputFlags(f, o)
}

// addOutputFlags registers the flags every solving command has.
func addOutputFlags(f *cmdFlags, o *solveOpts) {
	f.IntVar(&o.maxIter, "max-iter", 0, "iteration cap `N` (default 10·n)")
	f.DurationVar(&o.timeLimit, "time-limit", 0, "wall-time budget for the iterations, e.g. 30s or 5m (default none)")
	f.StringVar(&o.out, "o", "", "write the solution x to this Matrix Market `file` (only if converged)")
	f.StringVar(&o.hist, "history", "", "write the convergence history to this `file` (.csv, or .json for JSON lines)")
	f.StringVar(&o.plot, "plot", "", "draw the residual curve to this `file` (.svg or .png)")
	f.BoolVar(&o.json, "json", false, "print the summary as one JSON object")
	f.BoolVar(&o.quiet, "quiet", false, "no live progress on stderr")
}

// checkRunFlags refuses values the solvers would reject.
func checkRunFlags(cmd string, o *solveOpts) error {
	switch {
	case !(o.rtol > 0) || math.IsInf(o.rtol, 0):
		return usageErrorf("%s: --rtol %v must be positive and finite (use a tiny value such as 1e-300 to rely on --atol alone)", cmd, o.rtol)
	case !(o.atol >= 0) || math.IsInf(o.atol, 0):
		return usageErrorf("%s: --atol %v must be zero or positive and finite", cmd, o.atol)
	}
	return checkOutputFlags(cmd, o)
}

// checkOutputFlags checks the flags addOutputFlags registers.
func checkOutputFlags(cmd string, o *solveOpts) error {
	switch {
	case o.maxIter < 0:
		return usageErrorf("%s: --max-iter %d must not be negative", cmd, o.maxIter)
	case o.timeLimit < 0:
		return usageErrorf("%s: --time-limit %v must not be negative", cmd, o.timeLimit)
	}
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
	f := newFlags("solve", "residua solve A.mtx [-b b.mtx] [--x0 x0.mtx] [--precond auto|none|jacobi|ic0] [flags]", solveAbout)
	f.StringVar(&o.b, "b", "", "right-hand side `file` (default: the bundle's NAME_b.mtx, else b = A·1)")
	f.StringVar(&o.x0, "x0", "", "starting guess `file` (default zero)")
	f.StringVar(&o.precond, "precond", "auto", "preconditioner `kind`: auto, none, jacobi or ic0")
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
	if err := checkRunFlags("solve", o); err != nil {
		return err
	}
	kind, err := precond.ParseKind(o.precond)
	if err != nil {
		return usageErrorf("solve: --precond: %v", err)
	}
	so.resolve()
	if so.addr != "" {
		return remoteSolve(ctx, e, pos[0], o, so, *detach, nil)
	}
	if *detach {
		return usageErrorf("solve: --detach needs --server (or $%s)", envServer)
	}
	p, err := loadProblem(pos[0], o.b)
	if err != nil {
		return err
	}
	return solveCG(ctx, e, p, kind, o)
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
	case isBundle(path):
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

func isBundle(path string) bool {
	for _, ext := range []string{".tar.gz", ".tgz", ".tar"} {
		if strings.HasSuffix(path, ext) {
			return true
		}
	}
	return false
}

func onesVec(n int) []float64 {
	v := make([]float64, n)
	for i := range v {
		v[i] = 1
	}
	return v
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

// checkSPDShape refuses what conjugate gradients cannot solve before any
// work: a rectangular matrix (exit 2, use lsq) or a nonsymmetric one (exit
// 4, not SPD).
func checkSPDShape(p *problem) error {
	a := p.a
	if a.Rows != a.Cols {
		return usageErrorf("%s is %d×%d, not square: conjugate gradients solves square SPD systems; for the least-squares solution of min ‖A·x − b‖ run 'residua lsq %s -b b.mtx'",
			p.name, a.Rows, a.Cols, p.name)
	}
	if p.symmetric {
		return nil
	}
	// The file stores every entry: check the values (see defaultSymTol).
	r := sparse.Analyze(a, defaultSymTol)
	if r.Symmetric {
		return nil
	}
	what := "not symmetric"
	if w := r.WorstPair; w != nil {
		what = fmt.Sprintf("not symmetric: a(%d,%d) = %s but a(%d,%d) = %s", w.Row+1, w.Col+1, shortFloat(w.Aij), w.Col+1, w.Row+1, shortFloat(w.Aji))
	}
	return &exitError{code: exitBreakdown, err: fmt.Errorf("%s is %s; conjugate gradients needs a symmetric positive definite matrix, and 'residua lsq %s' solves the normal equations AᵀA·x = Aᵀb instead",
		p.name, what, p.name)}
}

// solveCG runs the local conjugate-gradient solve of p and prints the
// summary; the returned error carries the exit status.
func solveCG(ctx context.Context, e *env, p *problem, kind precond.Kind, o *solveOpts) error {
	if err := checkSPDShape(p); err != nil {
		return err
	}
	x0, err := readX0(o.x0, p.a.Cols)
	if err != nil {
		return err
	}
	choice, err := precond.New(p.a, kind)
	if err != nil {
		return &exitError{code: exitBreakdown, err: fmt.Errorf("preconditioner %s: %w", kind, err)}
	}
	rep := &solveReport{
		Matrix: p.name, Rows: p.a.Rows, Cols: p.a.Cols, Nonzeros: p.a.NNZ(), RHS: p.rhs,
		Preconditioner: string(choice.Kind), PreconditionerReason: choice.Reason,
		Shift: numPtr(choice.Shift), ShiftTries: choice.Tries, PreconditionerBytes: &choice.Bytes,
		ReadSeconds: seconds(p.read), SetupSeconds: seconds(choice.Setup),
	}

	bnorm := norm2(p.b)
	target := o.rtol
	if bnorm > 0 && o.atol/bnorm > target {
		target = o.atol / bnorm
	}
	rec, finish, err := recorders(e, o, false, monitor.Options{Target: target, Matrix: filepath.Base(p.name), Preconditioner: string(choice.Kind)})
	if err != nil {
		return err
	}
	s := krylov.Settings{RelTol: o.rtol, AbsTol: o.atol, MaxIter: o.maxIter, TimeLimit: o.timeLimit, X0: x0, Recorder: rec}
	x := make([]float64, p.a.Cols)
	res, solveErr := krylov.CG(ctx, p.a, p.b, x, choice.M, s)
	res.Preconditioner = string(choice.Kind)
	res.Setup = choice.Setup

	rep.Method = res.Method
	rep.Converged = res.Status == krylov.Converged
	rep.Status = res.Status.String()
	rep.Iterations = res.Iterations
	rep.RelativeResidual = num(res.RelResidual)
	rep.TrueResidualNorm = num(res.TrueResidualNorm)
	rep.RecursiveResidualNorm = numPtr(res.ResidualNorm)
	rep.RHSNorm = num(res.RHSNorm)
	rep.RecursiveRelativeResidual = numPtr(res.ResidualNorm)
	if res.RHSNorm > 0 {
		rep.RecursiveRelativeResidual = numPtr(res.ResidualNorm / res.RHSNorm)
	}
	rep.SolveSeconds = seconds(res.Solve)
	rep.SecondsPerIteration = seconds(res.PerIteration)
	rep.LambdaMin, rep.LambdaMax, rep.CondEstimate = numPtr(res.LambdaMin), numPtr(res.LambdaMax), num(res.Cond)
	rep.RelTol, rep.AbsTol = numPtr(res.Settings.RelTol), num(res.Settings.AbsTol)
	rep.MaxIter, rep.TimeLimitSeconds = res.Settings.MaxIter, seconds(res.Settings.TimeLimit)
	if p.ones {
		rep.ErrorVsOnes = numPtr(maxErrorVsOnes(x))
	}
	if solveErr != nil {
		rep.Error = solveErr.Error()
	}
	return recorderFailure(ctx, res.Status, finishRun(e, o, p.name, rep, x, finish, solveErr))
}

// recorders builds the recorder chain of a solve: the live display (unless
// --quiet), the history file and the in-memory log the plot needs. finish
// closes the history file and draws the plot; it must be called after the
// solve, whatever its outcome.
func recorders(e *env, o *solveOpts, leastSquares bool, mo monitor.Options) (krylov.Recorder, func(rep *solveReport) error, error) {
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
		if f, ok := e.stderr.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
			// On a terminal the summary printed after the solve replaces
			// the panel, so the panel leaves nothing behind.
			mo.Summary = func(io.Writer, *krylov.Result) {}
		}
		mon = monitor.New(e.stderr, mo)
		t = append(t, mon)
	}
	finish := func(rep *solveReport) error {
		if mon != nil {
			mon.Close() // a no-op when the solver already called Finish
		}
		var errs []error
		if hw != nil {
			if err := hw.Close(); err != nil {
				errs = append(errs, fmt.Errorf("writing the history %s: %w", o.hist, err))
			} else {
				rep.HistoryFile = o.hist
			}
		}
		if log != nil {
			opt := chart.Options{Matrix: mo.Matrix, Preconditioner: mo.Preconditioner, Tolerance: mo.Target}
			if err := chart.Write(o.plot, opt, chart.Series{Rows: log.Snapshot().Rows}); err != nil {
				errs = append(errs, fmt.Errorf("drawing %s: %w", o.plot, err))
			} else {
				rep.PlotFile = o.plot
			}
		}
		return errors.Join(errs...)
	}
	return t, finish, nil
}

// finishRun writes the outputs of a finished solve (history, plot, and the
// solution when it converged), prints the summary and returns the error
// that gives the exit status.
func finishRun(e *env, o *solveOpts, name string, rep *solveReport, x []float64, finish func(*solveReport) error, solveErr error) error {
	outErr := finish(rep)
	if o.out != "" {
		if rep.Converged {
			if err := matrixio.WriteVectorFile(o.out, x); err != nil {
				outErr = errors.Join(outErr, fmt.Errorf("writing the solution %s: %w", o.out, err))
			} else {
				rep.SolutionFile = o.out
			}
		} else {
			rep.SolutionNote = "not written to " + o.out + " (the solve did not converge)"
		}
	}
	if o.json {
		if err := rep.writeJSON(e.stdout); err != nil {
			return err
		}
	} else {
		rep.writeText(e.stdout)
	}
	if outErr != nil {
		return outErr
	}
	return statusError(rep.Status, rep.Iterations, solveErr)
}

// recorderFailure turns the exit status of a solve that a recorder stopped
// (the history file could not be written: status cancelled although the
// context is live) from 3 into 1, an I/O failure rather than a stop.
func recorderFailure(ctx context.Context, st krylov.Status, err error) error {
	var ee *exitError
	if st == krylov.Cancelled && ctx.Err() == nil && errors.As(err, &ee) && ee.code == exitNotConverged {
		ee.code = exitFailure
	}
	return err
}

// statusError maps a solve's outcome to the error that carries its exit
// status: nil when converged, 4 for a breakdown, 3 for every other way of
// stopping early.
func statusError(status string, iterations int, solveErr error) error {
	switch status {
	case krylov.Converged.String():
		return nil
	case krylov.Breakdown.String():
		if solveErr == nil {
			solveErr = errors.New("breakdown")
		}
		return &exitError{code: exitBreakdown, err: solveErr}
	case krylov.Cancelled.String():
		if solveErr == nil || errors.Is(solveErr, context.Canceled) {
			solveErr = errors.New("cancelled")
		}
		return &exitError{code: exitNotConverged, err: fmt.Errorf("stopped without converging after %d iterations: %w", iterations, solveErr)}
	}
	return &exitError{code: exitNotConverged, err: fmt.Errorf("stopped without converging after %d iterations: %s", iterations, status)}
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
