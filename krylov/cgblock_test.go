package krylov_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// cgBlockCase builds right-hand sides of several kinds and one Settings
// each, varied so that the columns stop at different iterations and for
// different reasons: random b of different scales, b = A·1, a zero b, a
// start X0, a low iteration cap, frequent refreshes with a tolerance that
// forces replacements, and a tolerance below what float64 attains.
func cgBlockCase(a *sparse.CSR, k int, seed uint64) ([][]float64, []krylov.Settings) {
	n := a.Rows
	rng := rand.New(rand.NewPCG(seed, 5))
	bs := make([][]float64, k)
	ss := make([]krylov.Settings, k)
	for c := range k {
		b := make([]float64, n)
		switch c % 7 {
		case 0:
			a.MulVec(b, cgOnes(n))
		case 3:
			// zero right-hand side
		default:
			scale := math.Pow(10, float64(c%5)-2)
			for i := range b {
				b[i] = scale * (2*rng.Float64() - 1)
			}
		}
		bs[c] = b
		switch c % 6 {
		case 1:
			ss[c].RelTol = 1e-12
			ss[c].RefreshEvery = 7
		case 2:
			ss[c].MaxIter = 9
		case 4:
			x0 := make([]float64, n)
			for i := range x0 {
				x0[i] = rng.Float64()
			}
			ss[c].X0 = x0
			ss[c].RelTol = 1e-6
		case 5:
			ss[c].RelTol = 1e-19 // stagnates
		}
	}
	return bs, ss
}

// TestCGBlockMatchesCG: CGBlock gives every right-hand side bitwise the
// iterates, the residual history and the Result (apart from the timings)
// of CG run on it alone, with each preconditioner path (none, Jacobi fused
// into the update, IC(0) on the block, a generic preconditioner column by
// column), for group widths below, at and above sparse.MaxWidth. The block
// kernels give each column the one-vector kernel's bits (sparse's
// TestBlockKernels), and CGBlock takes each column through CG's steps, so
// equality is exact, not merely to rounding; the reference is CG itself,
// whose convergence is checked against outside references in cg_test.go.
func TestCGBlockMatchesCG(t *testing.T) {
	a := stencil.Jump3D(16, 1e3) // 4096 unknowns, contrast 10³
	jac, err := precond.NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	ic, err := precond.NewIC0(a, precond.IC0Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, pc := range []struct {
		name string
		m    krylov.Preconditioner
	}{{"none", nil}, {"jacobi", jac}, {"ic0", ic}, {"scale", cgScale(0.1)}} {
		widths := []int{1, 8, 19}
		if cgRace {
			widths = []int{3} // small under the race detector
		}
		for _, k := range widths {
			t.Run(fmt.Sprintf("%s/k=%d", pc.name, k), func(t *testing.T) {
				bs, ss := cgBlockCase(a, k, uint64(k))
				n := a.Rows
				xs := make([][]float64, k)
				hs := make([]*cgHistory, k)
				for c := range k {
					xs[c] = make([]float64, n)
					hs[c] = &cgHistory{}
					ss[c].Recorder = hs[c]
				}
				res, err := krylov.CGBlock(context.Background(), a, bs, xs, pc.m, ss)
				if err != nil {
					t.Fatal(err)
				}
				statuses := map[krylov.Status]int{}
				for c := range k {
					h := &cgHistory{}
					s := ss[c]
					s.Recorder = h
					x := make([]float64, n)
					want, err := krylov.CG(context.Background(), a, bs[c], x, pc.m, s)
					if err != nil {
						t.Fatal(err)
					}
					got := res[c]
					statuses[got.Status]++
					if got.Status != want.Status || got.Iterations != want.Iterations || got.Products != want.Products ||
						got.Stagnation != want.Stagnation || got.Preconditioner != want.Preconditioner {
						t.Fatalf("column %d: %v (%q) after %d iterations, %d products; alone: %v (%q) after %d, %d",
							c, got.Status, got.Stagnation, got.Iterations, got.Products, want.Status, want.Stagnation, want.Iterations, want.Products)
					}
					for _, f := range []struct {
						name      string
						got, want float64
					}{
						{"true residual", got.TrueResidualNorm, want.TrueResidualNorm},
						{"recursive residual", got.ResidualNorm, want.ResidualNorm},
						{"relative residual", got.RelResidual, want.RelResidual},
						{"λmin", got.LambdaMin, want.LambdaMin},
						{"λmax", got.LambdaMax, want.LambdaMax},
					} {
						if math.Float64bits(f.got) != math.Float64bits(f.want) {
							t.Errorf("column %d: %s %v, alone %v", c, f.name, f.got, f.want)
						}
					}
					for i := range x {
						if math.Float64bits(xs[c][i]) != math.Float64bits(x[i]) {
							t.Fatalf("column %d: x[%d] = %v, alone %v", c, i, xs[c][i], x[i])
						}
					}
					if len(hs[c].rows) != len(h.rows) || hs[c].finished != 1 {
						t.Fatalf("column %d: %d history rows (%d Finish calls), alone %d", c, len(hs[c].rows), hs[c].finished, len(h.rows))
					}
					for i, row := range h.rows {
						g := hs[c].rows[i]
						if g.Iteration != row.Iteration || math.Float64bits(g.ResidualNorm) != math.Float64bits(row.ResidualNorm) {
							t.Fatalf("column %d: history row %d: iteration %d ‖r‖ %v, alone %d %v", c, i, g.Iteration, g.ResidualNorm, row.Iteration, row.ResidualNorm)
						}
					}
				}
				t.Logf("statuses %v", statuses)
			})
		}
	}
}

// TestCGBlockCancel: a cancelled context stops every column with status
// Cancelled and the context's error; a Recorder's error stops its own
// column only.
func TestCGBlockCancel(t *testing.T) {
	a := stencil.Poisson2D(40)
	n := a.Rows
	bs, ss := cgBlockCase(a, 4, 9)
	for c := range ss {
		ss[c] = krylov.Settings{}
	}
	xs := make([][]float64, 4)
	for c := range xs {
		xs[c] = make([]float64, n)
	}
	ctx, cancel := context.WithCancel(context.Background())
	ss[2].Recorder = &cgHistory{stopAt: 5, stop: cancel}
	res, err := krylov.CGBlock(ctx, a, bs, xs, nil, ss)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("error %v", err)
	}
	for c, r := range res {
		if c == 3 {
			continue // b = 0: converged at iteration 0
		}
		if r.Status != krylov.Cancelled || r.Iterations != 5 {
			t.Errorf("column %d: %v after %d iterations", c, r.Status, r.Iterations)
		}
	}
	ss[2].Recorder = &cgHistory{stopAt: 5}
	res, err = krylov.CGBlock(context.Background(), a, bs, xs, nil, ss)
	if !errors.Is(err, errStop) || res[2].Status != krylov.Cancelled || res[2].Iterations != 5 {
		t.Fatalf("error %v; column 2: %v after %d iterations", err, res[2].Status, res[2].Iterations)
	}
	for _, c := range []int{0, 1} {
		if res[c].Status != krylov.Converged {
			t.Errorf("column %d: %v", c, res[c].Status)
		}
	}
}

// TestCGBlockAllocations: no allocation per iteration; the workspace and the
// per-column state are allocated once per call.
func TestCGBlockAllocations(t *testing.T) {
	if cgRace {
		t.Skip("the race detector's runtime allocates on its own; allocation counts mean nothing under -race")
	}
	a := stencil.Poisson2D(200)
	n := a.Rows
	jac, err := precond.NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	bs := make([][]float64, 4)
	xs := make([][]float64, 4)
	for c := range bs {
		bs[c] = cgMul(a, cgOnes(n))
		bs[c][c] += 1
		xs[c] = make([]float64, n)
	}
	allocs := func(iters int, m krylov.Preconditioner) float64 {
		ss := make([]krylov.Settings, 4)
		for c := range ss {
			ss[c] = krylov.Settings{MaxIter: iters, RefreshEvery: 7, Recorder: cgNopRecorder{}}
		}
		return testing.AllocsPerRun(3, func() {
			res, _ := krylov.CGBlock(context.Background(), a, bs, xs, m, ss)
			if res[0].Iterations != iters {
				t.Fatalf("%d iterations, want %d", res[0].Iterations, iters)
			}
		})
	}
	for name, m := range map[string]krylov.Preconditioner{"none": nil, "jacobi": jac} {
		if a10, a100 := allocs(10, m), allocs(100, m); a10 != a100 {
			t.Errorf("preconditioner %s: %v allocations for 10 iterations, %v for 100", name, a10, a100)
		}
	}
}
