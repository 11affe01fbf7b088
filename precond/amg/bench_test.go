package amg_test

import (
	"context"
	"fmt"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// The benchmarks of issue 10 §5: time to rtol 1e-8 with set-up, b = A·1,
// AMG against residua's non-AMG preconditioners, each in one run so that
// the ratios compare like with like. Run one problem at a time, e.g.
//
//	go test -run '^$' -bench 'Solve/poisson3d-200' -benchtime 1x ./precond/amg
//
// Each reports iterations, set-up and solve seconds, seconds per
// iteration, and for AMG the operator complexity and the apply's cost in
// fine-level products.

type problem struct {
	name  string
	build func() *sparse.CSR
}

var problems = []problem{
	{"poisson3d-60", func() *sparse.CSR { return stencil.Poisson3D(60) }},
	{"poisson3d-100", func() *sparse.CSR { return stencil.Poisson3D(100) }},
	{"poisson3d-200", func() *sparse.CSR { return stencil.Poisson3D(200) }},
	{"poisson2d-500", func() *sparse.CSR { return stencil.Poisson2D(500) }},
	{"poisson2d-1000", func() *sparse.CSR { return stencil.Poisson2D(1000) }},
	{"poisson2d-2000", func() *sparse.CSR { return stencil.Poisson2D(2000) }},
	{"jump3d-50", func() *sparse.CSR { return stencil.Jump3D(50, 1e4) }},
	{"jump3d-100", func() *sparse.CSR { return stencil.Jump3D(100, 1e4) }},
}

func BenchmarkSolve(b *testing.B) {
	for _, pr := range problems {
		b.Run(pr.name, func(b *testing.B) {
			a := pr.build()
			rhs := make([]float64, a.Rows)
			a.MulVec(rhs, stencil.Ones(a))
			x := make([]float64, a.Rows)
			for _, kind := range []string{"none", "jacobi", "ic0", "amg", "amg-l1"} {
				b.Run(kind, func(b *testing.B) {
					b.ReportAllocs()
					for b.Loop() {
						start := time.Now()
						var m krylov.Preconditioner
						var rep *amg.Report
						switch kind {
						case "amg", "amg-l1":
							opt := amg.Options{}
							if kind == "amg-l1" {
								opt.Smoother = amg.L1Jacobi
							}
							h, err := amg.New(a, opt)
							if err != nil {
								b.Fatal(err)
							}
							r := h.Report()
							m, rep = h, &r
						default:
							k, _ := precond.ParseKind(kind)
							c, err := precond.New(a, k)
							if err != nil {
								b.Fatal(err)
							}
							if c.M != nil {
								m = c.M
							}
						}
						setup := time.Since(start)
						for i := range x {
							x[i] = 0
						}
						res, err := krylov.CG(context.Background(), a, rhs, x, m, krylov.Settings{RelTol: 1e-8})
						if err != nil || res.Status != krylov.Converged {
							b.Fatalf("%v %v", res.Status, err)
						}
						total := time.Since(start)
						b.ReportMetric(float64(res.Iterations), "iters")
						b.ReportMetric(setup.Seconds(), "setup-s")
						b.ReportMetric((total - setup).Seconds(), "solve-s")
						b.ReportMetric(total.Seconds(), "total-s")
						b.ReportMetric((total-setup).Seconds()/float64(max(res.Iterations, 1)), "s/iter")
						if rep != nil {
							b.ReportMetric(rep.OperatorComplexity, "opcx")
							b.ReportMetric(rep.ApplySpMVs, "apply-spmv")
						}
					}
				})
			}
		})
	}
}

// BenchmarkApply times one V-cycle against one product with the finest
// matrix, in the same process (Poisson3D 100³).
func BenchmarkApply(b *testing.B) {
	a := stencil.Poisson3D(100)
	h, err := amg.New(a, amg.Options{})
	if err != nil {
		b.Fatal(err)
	}
	r, z := make([]float64, a.Rows), make([]float64, a.Rows)
	a.MulVec(r, stencil.Ones(a))
	b.Run("spmv", func(b *testing.B) {
		for b.Loop() {
			a.MulVec(z, r)
		}
	})
	b.Run("vcycle", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			h.Precondition(z, r)
		}
	})
	_ = fmt.Sprint
}
