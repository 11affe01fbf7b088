package main

import (
	"context"

	"github.com/residua/residua/solve"
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

Display, summary, --json, --history, --plot, -o, --checkpoint and --resume,
and --server (with --detach) behave as for solve; the JSON summary adds residual_norm
(‖b − A·x‖) and normal_residual_norm (‖Aᵀ(b − A·x) − damp²·x‖).`

func runLSQ(ctx context.Context, e *env, args []string) (err error) {
	o := &solveOpts{}
	var damp, atol, btol float64
	var method string
	f := newFlags("lsq", "residua lsq A.mtx [-b b.mtx] [--damp λ] [--atol A] [--btol B] [--precond auto|none|colscale] [flags]", lsqAbout)
	f.StringVar(&o.b, "b", "", "right-hand side `file` (default: the bundle's NAME_b.mtx, else b = A·1)")
	f.StringVar(&o.x0, "x0", "", "starting guess `file` (default zero)")
	f.Float64Var(&damp, "damp", 0, "damping `λ` ≥ 0: minimise ‖A·x − b‖² + λ²‖x‖²")
	f.Float64Var(&atol, "atol", 0, "relative error allowed in A (both stopping rules; not solve's absolute atol); 0 means the default, 1e-8")
	f.Float64Var(&btol, "btol", 0, "relative error allowed in b (the consistent-system rule); 0 means the default, 1e-8")
	f.StringVar(&o.precond, "precond", "auto", "column scaling `kind`: auto, none or colscale")
	f.StringVar(&method, "method", "auto", "iteration `method`: auto (LSQR), lsqr or cgls")
	addOutputFlags(f, o)
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
		return usageErrorf("lsq: want one matrix file, got %d arguments (run 'residua lsq --help')", len(pos))
	}
	if method == string(solve.CG) {
		return usageErrorf("lsq: --method cg: conjugate gradients solves systems (residua solve); least squares uses auto, lsqr or cgls")
	}
	req, err := checkRequest("lsq", solve.Request{
		LeastSquares: true, Method: solve.Method(method), Preconditioner: o.precond,
		ATol: atol, BTol: btol, Damp: damp, MaxIter: o.maxIter, TimeLimit: o.timeLimit,
	})
	if err != nil {
		return err
	}
	if err := checkOutputFlags("lsq", o); err != nil {
		return err
	}
	so.resolve()
	if err := o.ck.check(f, so.addr != ""); err != nil {
		return err
	}
	if so.addr != "" {
		return remoteSolve(ctx, e, pos[0], req, o, so, *detach)
	}
	if *detach {
		return usageErrorf("lsq: --detach needs --server (or $%s)", envServer)
	}
	p, err := loadProblem(pos[0], o.b, o.mostlyEmpty)
	if err != nil {
		return err
	}
	return solveLocal(ctx, e, p, req, o)
}
