package krylov_test

import (
	"context"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse/stencil"
)

// BenchmarkCGBlock solves 8 right-hand sides on Poisson3D 160³ with Jacobi
// to rtol 1e-8, as one block (krylov.CGBlock) and one after another
// (krylov.CG on each), in one run, alternating, so both see the same
// machine. The right-hand sides are b_c = A·x_c for smooth, different x_c,
// so the columns converge at nearby but different iterations and the block
// narrows as they stop. Metrics:
//
//	block-s          wall time of the block solve
//	sequential-s     wall time of the 8 solves one after another
//	speedup          sequential-s / block-s (target ≥ 2.5)
//	iterations       iterations of the slowest right-hand side
//
// Run once (each op is two complete solves of 8 systems of 4.1 M unknowns):
// go test ./krylov/ -run '^$' -bench CGBlock -benchtime 1x
func BenchmarkCGBlock(b *testing.B) {
	const k = 8
	a := stencil.Poisson3D(160)
	n := a.Rows
	jac, err := precond.NewJacobi(a)
	if err != nil {
		b.Fatal(err)
	}
	bs, xs := make([][]float64, k), make([][]float64, k)
	for c := range bs {
		u := make([]float64, n)
		for i := range u {
			u[i] = 1 + float64(c+1)*float64(i%160)/160
		}
		bs[c], xs[c] = cgMul(a, u), make([]float64, n)
	}
	ss := make([]krylov.Settings, k)
	var blockT, seqT time.Duration
	iters := 0
	b.ResetTimer()
	for range b.N {
		t := time.Now()
		res, err := krylov.CGBlock(context.Background(), a, bs, xs, jac, ss)
		blockT += time.Since(t)
		if err != nil {
			b.Fatal(err)
		}
		for _, r := range res {
			if r.Status != krylov.Converged {
				b.Fatalf("block: %v after %d iterations", r.Status, r.Iterations)
			}
			iters = max(iters, r.Iterations)
		}
		t = time.Now()
		for c := range bs {
			r, err := krylov.CG(context.Background(), a, bs[c], xs[c], jac, ss[c])
			if err != nil || r.Status != krylov.Converged {
				b.Fatalf("sequential: %v, %v", r.Status, err)
			}
		}
		seqT += time.Since(t)
	}
	b.StopTimer()
	b.ReportMetric(blockT.Seconds()/float64(b.N), "block-s")
	b.ReportMetric(seqT.Seconds()/float64(b.N), "sequential-s")
	b.ReportMetric(seqT.Seconds()/blockT.Seconds(), "speedup")
	b.ReportMetric(float64(iters), "iterations")
}
