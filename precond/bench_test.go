package precond_test

import (
	"context"
	"fmt"
	"testing"
	"time"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// benchSides are the 3D Poisson grid sides of the targets: 10⁶ and
// about 4·10⁶ unknowns. The second, with its factor and vectors, is larger
// than the machine's last-level cache.
var benchSides = []int{100, 160}

// spmvTime returns the best of a few timed products y = A·x, measured in the
// same process right before the figure it normalizes.
func spmvTime(a *sparse.CSR, reps int) time.Duration {
	x := stencil.Ones(a)
	y := make([]float64, a.Rows)
	best := time.Duration(1 << 62)
	for r := 0; r < reps; r++ {
		t0 := time.Now()
		a.MulVec(y, x)
		best = min(best, time.Since(t0))
	}
	return best
}

// BenchmarkIC0Setup reports the IC(0) set-up time and its ratio to one
// SpMV (sparse.(*CSR).MulVec on the same matrix, same run).
func BenchmarkIC0Setup(b *testing.B) {
	for _, n := range benchSides {
		b.Run(fmt.Sprintf("poisson3d-%d", n), func(b *testing.B) {
			a := stencil.Poisson3D(n)
			spmv := spmvTime(a, 10)
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				if _, err := precond.NewIC0(a, precond.IC0Options{}); err != nil {
					b.Fatal(err)
				}
			}
			b.StopTimer()
			per := b.Elapsed() / time.Duration(b.N)
			b.ReportMetric(float64(per)/float64(spmv), "spmv/op")
		})
	}
}

// BenchmarkApply reports one application of each preconditioner and its
// ratio to one SpMV of the same matrix in the same run.
func BenchmarkApply(b *testing.B) {
	for _, n := range benchSides {
		a := stencil.Poisson3D(n)
		ic, err := precond.NewIC0(a, precond.IC0Options{})
		if err != nil {
			b.Fatal(err)
		}
		icp, _ := precond.NewIC0(a, precond.IC0Options{Parallel: true})
		if !icp.Parallel() {
			b.Fatal("no parallel schedule")
		}
		jac, _ := precond.NewJacobi(a)
		r := stencil.Ones(a)
		z := make([]float64, a.Rows)
		for _, p := range []struct {
			name string
			m    interface{ Precondition(dst, r []float64) }
		}{{"ic0-sequential", ic}, {"ic0-parallel", icp}, {"jacobi", jac}} {
			b.Run(fmt.Sprintf("%s/poisson3d-%d", p.name, n), func(b *testing.B) {
				spmv := spmvTime(a, 10)
				b.ReportAllocs()
				b.ResetTimer()
				for b.Loop() {
					p.m.Precondition(z, r)
				}
				b.StopTimer()
				per := b.Elapsed() / time.Duration(b.N)
				b.ReportMetric(float64(per)/float64(spmv), "spmv/op")
				b.ReportMetric(float64(spmv.Nanoseconds()), "spmv-ns")
			})
		}
	}
}

// BenchmarkPCG solves A·x = A·1 on 3D Poisson to rtol 1e-8 with CG and each
// preconditioner, set-up included in the time per op, and reports the
// iterations and the set-up time.
func BenchmarkPCG(b *testing.B) {
	for _, n := range benchSides {
		a := stencil.Poisson3D(n)
		rhs := stencil.Ones(a) // A·1
		x := make([]float64, a.Rows)
		for _, v := range []struct {
			name string
			make func() (krylov.Preconditioner, error)
		}{
			{"jacobi", func() (krylov.Preconditioner, error) { return precond.NewJacobi(a) }},
			{"ic0-sequential", func() (krylov.Preconditioner, error) { return precond.NewIC0(a, precond.IC0Options{}) }},
			{"ic0-parallel", func() (krylov.Preconditioner, error) {
				return precond.NewIC0(a, precond.IC0Options{Parallel: true})
			}},
		} {
			b.Run(fmt.Sprintf("%s/poisson3d-%d", v.name, n), func(b *testing.B) {
				b.ReportAllocs()
				var its int
				var setup time.Duration
				for b.Loop() {
					t0 := time.Now()
					m, err := v.make()
					if err != nil {
						b.Fatal(err)
					}
					setup = time.Since(t0)
					res, err := krylov.CG(context.Background(), a, rhs, x, m, krylov.Settings{RelTol: 1e-8})
					if err != nil || res.Status != krylov.Converged {
						b.Fatalf("%v %v", res.Status, err)
					}
					its = res.Iterations
				}
				b.ReportMetric(float64(its), "iterations")
				b.ReportMetric(setup.Seconds(), "setup-s")
			})
		}
	}
}

// BenchmarkSharedSPD solves A·x = A·1 to rtol 1e-8 on every shared SPD
// matrix with each kind, New's set-up included in the time per op: the
// figures behind the automatic rule (doc.go) and its table in BENCHMARKS.md.
// It needs the shared data folder (see internal/shared).
func BenchmarkSharedSPD(b *testing.B) {
	dir := shared.Matrices(b)
	for _, e := range shared.Manifest(b) {
		if e.Kind != "spd" {
			continue
		}
		a, _, err := matrixio.ReadMatrixFile(e.Path(dir), nil)
		if err != nil {
			b.Fatal(err)
		}
		rhs := rhsOnes(a)
		x := make([]float64, a.Rows)
		for _, kind := range []precond.Kind{precond.KindNone, precond.KindJacobi, precond.KindIC0, precond.KindAuto} {
			b.Run(e.Name+"/"+string(kind), func(b *testing.B) {
				var res krylov.Result
				var c *precond.Choice
				for b.Loop() {
					c, err = precond.New(a, kind)
					if err != nil {
						b.Fatal(err)
					}
					res, err = krylov.CG(context.Background(), a, rhs, x, c.M, krylov.Settings{RelTol: 1e-8})
					if err != nil {
						b.Fatal(err)
					}
				}
				b.ReportMetric(float64(res.Iterations), "iterations")
				if res.Status != krylov.Converged {
					b.ReportMetric(1, "not-converged")
				}
				if kind == precond.KindAuto {
					b.Logf("%s: %s", e.Name, c.Reason)
				}
			})
		}
	}
}
