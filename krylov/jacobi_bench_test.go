package krylov_test

import (
	"context"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// BenchmarkCGJacobiIteration measures the cost of a Jacobi-preconditioned CG
// iteration against a plain CG iteration on the same matrix, in one run,
// solves interleaved so that both see the same machine: the fused path
// (precond.Jacobi, which CG applies inside the residual update) and the
// unfused one it replaced (the same Jacobi behind Precondition only, then
// a separate Dot). Each iteration is timed on its own (cgTimingRecorder);
// the ratios are formed from the best times (least disturbed by the other
// processes of a shared machine; common practice) and from the medians.
// Metrics:
//
//	cg-ms               best plain CG iteration
//	jacobi-ms           best fused Jacobi-PCG iteration
//	jacobi/cg           their ratio (target ≤ 1.2)
//	jacobi/cg-median    the same from the medians
//	unfused/cg          the unfused Jacobi-PCG iteration over plain CG
//
// Run once (the matrices are large): go test ./krylov/ -run '^$' -bench CGJacobiIteration -benchtime 2x
func BenchmarkCGJacobiIteration(b *testing.B) {
	for _, c := range []struct {
		name  string
		a     func() *sparse.CSR
		iters int
	}{
		{"poisson3d-200^3", func() *sparse.CSR { return stencil.Poisson3D(200) }, 20},
		{"poisson3d-100^3", func() *sparse.CSR { return stencil.Poisson3D(100) }, 40},
		{"jump3d-100^3", func() *sparse.CSR { return stencil.Jump3D(100, 1e4) }, 40},
	} {
		b.Run(c.name, func(b *testing.B) {
			a := c.a()
			n := a.Rows
			rhs := cgMul(a, cgOnes(n))
			x := make([]float64, n)
			jac, err := precond.NewJacobi(a)
			if err != nil {
				b.Fatal(err)
			}
			paths := []krylov.Preconditioner{nil, jac, cgPlainJacobi{jac}}
			recs := make([]*cgTimingRecorder, len(paths))
			for i := range recs {
				recs[i] = &cgTimingRecorder{times: make([]time.Duration, 0, b.N*c.iters)}
			}
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				for i, m := range paths {
					res, err := krylov.CG(context.Background(), a, rhs, x, m, krylov.Settings{MaxIter: c.iters, Recorder: recs[i]})
					if err != nil || res.Iterations != c.iters {
						b.Fatalf("%v after %d iterations: %v", res.Status, res.Iterations, err)
					}
				}
			}
			b.StopTimer()
			cgBest, cgMed := cgMinMedian(recs[0].times)
			jBest, jMed := cgMinMedian(recs[1].times)
			uBest, _ := cgMinMedian(recs[2].times)
			b.ReportMetric(cgBest.Seconds()*1e3, "cg-ms")
			b.ReportMetric(jBest.Seconds()*1e3, "jacobi-ms")
			b.ReportMetric(jBest.Seconds()/cgBest.Seconds(), "jacobi/cg")
			b.ReportMetric(jMed.Seconds()/cgMed.Seconds(), "jacobi/cg-median")
			b.ReportMetric(uBest.Seconds()/cgBest.Seconds(), "unfused/cg")
		})
	}
}
