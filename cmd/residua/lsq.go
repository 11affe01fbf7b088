package main

import (
	"context"
	"fmt"
	"math"
	"path/filepath"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/monitor"
)

func init() {
	register(&command{
		name:    "lsq",
		summary: "least squares min ‖A·x − b‖ (optionally damped) for a sparse rectangular or square A",
		run:     runLSQ,
	})
}

const lsqAbout = `
Solves the least-squares problem min ‖A·x − b‖² + damp²·‖x‖² for a sparse A
of any shape (more rows than columns, or fewer: then the minimum-norm
solution) with products by A and Aᵀ only, never forming AᵀA: LSQR (Paige and
Saunders 1982) by default, or CGLS (conjugate gradients on the normal
equations, Björck 1996 §7.4).

It stops when the system is consistent, ‖r‖ ≤ btol·‖b‖ + atol·‖A‖·‖x‖, or
when x is a least-squares solution, ‖Aᵀr‖ ≤ atol·‖A‖·‖r‖, with ‖A‖ estimated
as the iteration goes; the summary says which rule was met. --precond
colscale scales the columns to unit norm (auto does so when A has at least
as many rows as columns); a zero column is reported by index.

Right-hand side: -b FILE; else a bundle's own NAME_b.mtx; else b = A·1 (a
consistent system: x = 1 solves it, and is the unique least-squares
solution when A has full column rank).

Display, summary, --json, --history, --plot, -o and --server (with
--detach) behave as for solve; the JSON summary adds residual_norm
(‖b − A·x‖) and normal_residual_norm (‖Aᵀ(b − A·x) − damp²·x‖).`

func runLSQ(ctx context.Context, e *env, args []string) error {
	o := &solveOpts{}
	var damp, atol, btol float64
	var scaling, method string
	f := newFlags("lsq", "residua lsq A.mtx [-b b.mtx] [--damp λ] [--atol A] [--btol B] [--precond auto|none|colscale] [flags]", lsqAbout)
	f.StringVar(&o.b, "b", "", "right-hand side `file` (default: the bundle's NAME_b.mtx, else b = A·1)")
	f.StringVar(&o.x0, "x0", "", "starting guess `file` (default zero)")
	f.Float64Var(&damp, "damp", 0, "damping `λ` ≥ 0: minimise ‖A·x − b‖² + λ²‖x‖²")
	f.Float64Var(&atol, "atol", 1e-8, "relative error allowed in A (both stopping rules)")
	f.Float64Var(&btol, "btol", 1e-8, "relative error allowed in b (the consistent-system rule)")
	f.StringVar(&scaling, "precond", "auto", "column scaling `kind`: auto, none or colscale")
	f.StringVar(&method, "method", "auto", "iteration `method`: auto (LSQR), lsqr or cgls")
	addOutputFlags(f, o)
	so := &serverOpts{}
	addServerFlags(f, so)
	detach := f.Bool("detach", false, "with --server: start the job, print its id and return (the job keeps its solution for 'residua watch JOB -o x.mtx')")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("lsq: want one matrix file, got %d arguments (run 'residua lsq --help')", len(pos))
	}
	for name, v := range map[string]float64{"damp": damp, "atol": atol, "btol": btol} {
		if !(v >= 0) || math.IsInf(v, 0) {
			return usageErrorf("lsq: --%s %v must be zero or positive and finite", name, v)
		}
	}
	if err := checkOutputFlags("lsq", o); err != nil {
		return err
	}
	s := krylov.LSQSettings{Damp: damp, ATol: atol, BTol: btol, MaxIter: o.maxIter, TimeLimit: o.timeLimit}
	switch scaling {
	case "auto":
		s.Scaling = krylov.ScaleAuto
	case "none":
		s.Scaling = krylov.ScaleNone
	case "colscale":
		s.Scaling = krylov.ScaleColumns
	default:
		return usageErrorf("lsq: --precond %q: want auto, none or colscale", scaling)
	}
	switch method {
	case "auto":
		s.Method = krylov.LSQAuto
	case "lsqr":
		s.Method = krylov.LSQR
	case "cgls":
		s.Method = krylov.CGLS
	default:
		return usageErrorf("lsq: --method %q: want auto, lsqr or cgls", method)
	}
	so.resolve()
	if so.addr != "" {
		remoteMethod := method
		if remoteMethod == "auto" {
			remoteMethod = "lsq"
		}
		return remoteSolve(ctx, e, pos[0], o, so, *detach, &lsqRemote{method: remoteMethod, scaling: scaling, damp: damp, atol: atol, btol: btol})
	}
	if *detach {
		return usageErrorf("lsq: --detach needs --server (or $%s)", envServer)
	}
	p, err := loadProblem(pos[0], o.b)
	if err != nil {
		return err
	}
	x0, err := readX0(o.x0, p.a.Cols)
	if err != nil {
		return err
	}
	s.X0 = x0
	return solveLSQ(ctx, e, p, s, o)
}

func solveLSQ(ctx context.Context, e *env, p *problem, s krylov.LSQSettings, o *solveOpts) error {
	rep := &solveReport{
		Matrix: p.name, Rows: p.a.Rows, Cols: p.a.Cols, Nonzeros: p.a.NNZ(), RHS: p.rhs,
		ReadSeconds: seconds(p.read),
	}
	ones, rhs := lsqOnes(p, s.Damp)
	rep.RHS = rhs
	rec, finish, err := recorders(e, o, true, monitor.Options{Matrix: filepath.Base(p.name), Preconditioner: s.Scaling.String()})
	if err != nil {
		return err
	}
	s.Recorder = rec
	x := make([]float64, p.a.Cols)
	res, solveErr := krylov.LSQ(ctx, p.a, p.b, x, s)

	l := res.LSQ
	rep.Method = res.Method
	rep.Preconditioner = l.Scaling
	switch {
	case s.Scaling != krylov.ScaleAuto:
		rep.PreconditionerReason = l.Scaling + ": as requested"
	case l.Scaling == krylov.ScaleColumns.String():
		rep.PreconditionerReason = fmt.Sprintf("colscale: auto: %d rows ≥ %d columns", p.a.Rows, p.a.Cols)
	default:
		rep.PreconditionerReason = fmt.Sprintf("none: auto: %d rows < %d columns, where scaling would change the minimum-norm solution", p.a.Rows, p.a.Cols)
	}
	rep.Converged = res.Status == krylov.Converged
	rep.Status = res.Status.String()
	rep.Iterations = res.Iterations
	rep.RelativeResidual = num(res.RelResidual)
	rep.TrueResidualNorm = num(res.ResidualNorm)
	rep.RHSNorm = num(res.RHSNorm)
	rep.ResidualNorm = numPtr(res.ResidualNorm)
	rep.NormalResidualNorm = numPtr(l.NormalResidualNorm)
	rep.NormEstimate = numPtr(l.ANormEstimate)
	rep.CondEstimate = num(l.CondEstimate)
	rep.StoppedBy = l.StoppedBy
	rep.ZeroColumns = l.ZeroColumns
	rep.SolveSeconds = seconds(res.Solve)
	rep.SecondsPerIteration = seconds(res.PerIteration)
	rep.AbsTol = num(l.Settings.ATol)
	rep.BTol = numPtr(l.Settings.BTol)
	rep.Damp = numPtr(l.Settings.Damp)
	rep.MaxIter, rep.TimeLimitSeconds = l.Settings.MaxIter, seconds(l.Settings.TimeLimit)
	if ones {
		rep.ErrorVsOnes = numPtr(maxErrorVsOnes(x))
	}
	if solveErr != nil {
		rep.Error = solveErr.Error()
	}
	return recorderFailure(ctx, res.Status, finishRun(e, o, p.name, rep, x, finish, solveErr))
}

// lsqOnes says whether x = 1 is the answer lsq should find for p, and
// describes p's right-hand side. With b = A·1 the system is consistent and
// x = 1 solves it; it is the solution sought only when it is the only one
// (full column rank, which needs rows ≥ cols) and there is no damping.
func lsqOnes(p *problem, damp float64) (bool, string) {
	if !p.ones {
		return false, p.rhs
	}
	ones := p.a.Rows >= p.a.Cols && damp == 0
	rhs := "b = A·1 (no -b given): a consistent system that x = 1 solves"
	if ones {
		return true, rhs + "; the unique solution when A has full column rank"
	}
	return false, rhs + "; not the solution sought here (damped, or fewer rows than columns: the minimum-norm one)"
}
