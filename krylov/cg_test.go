package krylov_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// Helpers of this file carry a "cg" prefix: the package krylov_test is
// shared with the least-squares tests.

// cgOp adapts a *sparse.CSR to krylov.Operator with a plain sequential
// product, the reference loop of CSR storage.
type cgOp struct{ a *sparse.CSR }

func (o cgOp) Dims() (int, int) { return o.a.Rows, o.a.Cols }
func (o cgOp) MulVec(dst, x []float64) {
	a := o.a
	for i := 0; i < a.Rows; i++ {
		var s float64
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			s += a.Val[k] * x[a.ColIdx[k]]
		}
		dst[i] = s
	}
}

// cgDenseOp adapts a gonum matrix to krylov.Operator.
type cgDenseOp struct{ a mat.Matrix }

func (o cgDenseOp) Dims() (int, int) { return o.a.Dims() }
func (o cgDenseOp) MulVec(dst, x []float64) {
	n, _ := o.a.Dims()
	mat.NewVecDense(n, dst).MulVec(o.a, mat.NewVecDense(len(x), x))
}

// cgDiagOp is the diagonal matrix diag(d).
type cgDiagOp []float64

func (d cgDiagOp) Dims() (int, int) { return len(d), len(d) }
func (d cgDiagOp) MulVec(dst, x []float64) {
	for i, v := range d {
		dst[i] = v * x[i]
	}
}

// cgScale is the preconditioner dst = c·r (SPD for c > 0).
type cgScale float64

func (c cgScale) Precondition(dst, r []float64) {
	for i, v := range r {
		dst[i] = float64(c) * v
	}
}

// cgHistory records every progress row and the final result.
type cgHistory struct {
	rows     []krylov.Progress
	finished int
	final    krylov.Result
	// stopAt, when positive, makes Record call stop (or return errStop
	// when stop is nil) at that iteration.
	stopAt int
	stop   func()
}

var errStop = errors.New("recorder asked to stop")

func (h *cgHistory) Record(p krylov.Progress) error {
	h.rows = append(h.rows, p)
	if h.stopAt > 0 && p.Iteration == h.stopAt {
		if h.stop == nil {
			return errStop
		}
		h.stop()
	}
	return nil
}

func (h *cgHistory) Finish(r *krylov.Result) { h.finished++; h.final = *r }

// cgMul returns A·x.
func cgMul(a krylov.Operator, x []float64) []float64 {
	n, _ := a.Dims()
	y := make([]float64, n)
	a.MulVec(y, x)
	return y
}

func cgOnes(n int) []float64 {
	v := make([]float64, n)
	for i := range v {
		v[i] = 1
	}
	return v
}

func cgNorm(v []float64) float64 {
	var s float64
	for _, e := range v {
		s += e * e
	}
	return math.Sqrt(s)
}

// cgTrueRel returns ‖b − A·x‖/‖b‖ computed afresh.
func cgTrueRel(a krylov.Operator, b, x []float64) float64 {
	ax := cgMul(a, x)
	for i := range ax {
		ax[i] = b[i] - ax[i]
	}
	return cgNorm(ax) / cgNorm(b)
}

// TestCGPoissonBasics solves 2D Poisson with b = A·1 and checks the result
// against what the contract promises: convergence on the true residual,
// the recorder's calls, the echoed defaults.
func TestCGPoissonBasics(t *testing.T) {
	a := stencil.Poisson2D(30)
	n := 900
	b := cgMul(a, cgOnes(n))
	x := make([]float64, n)
	h := &cgHistory{}
	res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{Recorder: h})
	if err != nil {
		t.Fatal(err)
	}
	if res.Status != krylov.Converged {
		t.Fatalf("status %v", res.Status)
	}
	if got := cgTrueRel(a, b, x); got > 1e-8 || math.Abs(got-res.RelResidual) > 1e-12 {
		t.Errorf("true relative residual %g, Result says %g, tolerance 1e-8", got, res.RelResidual)
	}
	if res.Method != "cg" || res.Preconditioner != "none" {
		t.Errorf("Method %q Preconditioner %q", res.Method, res.Preconditioner)
	}
	s := res.Settings
	if s.RelTol != 1e-8 || s.AbsTol != 0 || s.MaxIter != 10*n || s.RefreshEvery != 50 || s.TimeLimit != 0 {
		t.Errorf("echoed settings %+v do not show the documented defaults", s)
	}
	if len(h.rows) != res.Iterations+1 || h.finished != 1 {
		t.Fatalf("%d progress rows and %d Finish calls for %d iterations", len(h.rows), h.finished, res.Iterations)
	}
	for i, p := range h.rows {
		if p.Iteration != i {
			t.Fatalf("row %d has iteration %d", i, p.Iteration)
		}
	}
	if r0 := h.rows[0]; r0.RelResidual != 1 || r0.ResidualNorm != res.RHSNorm {
		t.Errorf("iteration 0 row %+v: with x0 = 0 the residual is b", r0)
	}
	if last := h.rows[len(h.rows)-1]; last.ResidualNorm != res.TrueResidualNorm {
		t.Errorf("last row %g is not the true residual %g", last.ResidualNorm, res.TrueResidualNorm)
	}
	// Products: every iteration, one true-residual check per 50 iterations
	// (RefreshEvery) and at least one convergence check; no start product.
	if min := res.Iterations + res.Iterations/50; res.Products < min || res.Products > min+4 {
		t.Errorf("%d products for %d iterations", res.Products, res.Iterations)
	}
	if res.PerIteration <= 0 || res.Solve < res.PerIteration {
		t.Errorf("timings Solve %v PerIteration %v", res.Solve, res.PerIteration)
	}
}

// TestCGDistinctEigenvalues: in exact arithmetic CG terminates in at most k
// iterations on a matrix with k distinct eigenvalues (Saad §6.11.3, the
// minimal polynomial argument). With well separated eigenvalues and a
// moderate condition number rounding does not delay it: we allow none.
func TestCGDistinctEigenvalues(t *testing.T) {
	const n = 120
	eig := []float64{1, 2.5, 4, 7, 10, 19, 30}
	k := len(eig)
	d := make([]float64, n)
	for i := range d {
		d[i] = eig[i%k]
	}
	rng := rand.New(rand.NewPCG(1, 2))
	b := make([]float64, n)
	for i := range b {
		b[i] = rng.NormFloat64()
	}

	// A random orthogonal Q from the QR factorization of a Gaussian matrix
	// makes Q·D·Qᵀ, which has the same eigenvalues but no structure.
	g := mat.NewDense(n, n, nil)
	for i := range n {
		for j := range n {
			g.Set(i, j, rng.NormFloat64())
		}
	}
	var qr mat.QR
	qr.Factorize(g)
	var q, qd, full mat.Dense
	qr.QTo(&q)
	qd.Mul(&q, mat.NewDiagDense(n, d))
	full.Mul(&qd, q.T())
	sym := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			sym.SetSym(i, j, (full.At(i, j)+full.At(j, i))/2)
		}
	}

	for _, c := range []struct {
		name  string
		a     krylov.Operator
		m     krylov.Preconditioner
		scale float64 // M⁻¹ = scale·I multiplies the eigenvalues
	}{
		{"diagonal", cgDiagOp(d), nil, 1},
		{"orthogonally similar", cgDenseOp{sym}, nil, 1},
		{"preconditioned", cgDenseOp{sym}, cgScale(0.25), 0.25},
	} {
		t.Run(c.name, func(t *testing.T) {
			x := make([]float64, n)
			res, err := krylov.CG(context.Background(), c.a, b, x, c.m, krylov.Settings{RelTol: 1e-10})
			if err != nil {
				t.Fatal(err)
			}
			if res.Status != krylov.Converged || res.Iterations > k {
				t.Errorf("status %v after %d iterations, want convergence in at most %d", res.Status, res.Iterations, k)
			}
			// After k steps the Ritz values are the k eigenvalues of M⁻¹A
			// themselves (the Krylov space is invariant), so the Lanczos
			// estimates are its extremes, scale·1 and scale·30.
			lo, hi := c.scale*1, c.scale*30
			if math.Abs(res.LambdaMin-lo) > 1e-6*hi || math.Abs(res.LambdaMax-hi) > 1e-6*hi {
				t.Errorf("Lanczos extremes (%g, %g), want (%g, %g)", res.LambdaMin, res.LambdaMax, lo, hi)
			}
		})
	}
}

// poisson2DExtremes returns the analytic extreme eigenvalues of the unscaled
// 5-point Laplacian on an n×n interior grid, λ = 4 sin²(pπh/2) + 4 sin²(qπh/2)
// with h = 1/(n+1) and 1 ≤ p, q ≤ n (LeVeque, Finite Difference Methods for
// Ordinary and Partial Differential Equations, 2007, §3.4).
func poisson2DExtremes(n int) (lo, hi float64) {
	h := 1 / float64(n+1)
	s := math.Sin(math.Pi * h / 2)
	c := math.Cos(math.Pi * h / 2)
	return 8 * s * s, 8 * c * c
}

// TestCGPoissonScaling: CG's iteration count for a fixed tolerance grows like
// √κ (Saad §6.11.3, the Chebyshev bound), and κ of the 2D Laplacian is
// cot²(πh/2) ≈ (2(n+1)/π)², so doubling the grid side about doubles the
// count. The Lanczos estimates approach the analytic extreme eigenvalues.
func TestCGPoissonScaling(t *testing.T) {
	sides := []int{15, 31, 63, 127}
	iters := make([]int, len(sides))
	for i, side := range sides {
		a := stencil.Poisson2D(side)
		n := side * side
		rng := rand.New(rand.NewPCG(uint64(side), 7))
		b := make([]float64, n)
		for j := range b {
			b[j] = rng.NormFloat64() // excites every eigenvector
		}
		x := make([]float64, n)
		res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{})
		if err != nil || res.Status != krylov.Converged {
			t.Fatalf("side %d: %v %v", side, res.Status, err)
		}
		iters[i] = res.Iterations
		lo, hi := poisson2DExtremes(side)
		// Extreme Ritz values converge first (Saad §6.7.3 and Golub and Van
		// Loan §10.1.5, Kaniel–Paige theory); by the time the residual has
		// fallen by 1e-8 they agree to a few parts in 10⁴ (from our runs,
		// not a theorem: we test 1e-3).
		if math.Abs(res.LambdaMax-hi)/hi > 1e-3 || math.Abs(res.LambdaMin-lo)/lo > 1e-3 {
			t.Errorf("side %d: Lanczos (%g, %g), analytic (%g, %g)", side, res.LambdaMin, res.LambdaMax, lo, hi)
		}
		if res.LambdaMin < lo*(1-1e-9) || res.LambdaMax > hi*(1+1e-9) {
			t.Errorf("side %d: Ritz values (%g, %g) outside the spectrum [%g, %g]", side, res.LambdaMin, res.LambdaMax, lo, hi)
		}
		if kappa := hi / lo; math.Abs(res.Cond-kappa)/kappa > 2e-3 {
			t.Errorf("side %d: condition estimate %g, analytic %g", side, res.Cond, kappa)
		}
	}
	for i := 1; i < len(sides); i++ {
		// h halves from one side to the next, so √κ doubles.
		ratio := float64(iters[i]) / float64(iters[i-1])
		if ratio < 1.6 || ratio > 2.4 {
			t.Errorf("iterations %v: ratio %.2f from side %d to %d, want about 2 (√κ ∝ 1/h)", iters, ratio, sides[i-1], sides[i])
		}
	}
}

// TestCGWarmStart: x0 equal to the exact solution (b = A·1 computed with the
// same product, so b − A·x0 is exactly zero) converges at iteration 0
// without touching X0.
func TestCGWarmStart(t *testing.T) {
	a := stencil.Poisson2D(20)
	x0 := cgOnes(400)
	b := cgMul(a, x0)
	x := make([]float64, 400)
	res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{X0: x0})
	if err != nil || res.Status != krylov.Converged || res.Iterations != 0 || res.TrueResidualNorm != 0 {
		t.Fatalf("status %v, %d iterations, true residual %g, err %v", res.Status, res.Iterations, res.TrueResidualNorm, err)
	}
	if res.Products != 1 {
		t.Errorf("%d products, want 1 (the initial residual)", res.Products)
	}
	for i := range x {
		if x[i] != 1 || x0[i] != 1 {
			t.Fatalf("x[%d] = %g, x0[%d] = %g", i, x[i], i, x0[i])
		}
	}
	// A near start also works: perturb and solve again.
	x0[0] = 1.5
	res, err = krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{X0: x0})
	if err != nil || res.Status != krylov.Converged || cgTrueRel(a, b, x) > 1e-8 || x0[0] != 1.5 {
		t.Fatalf("perturbed start: %v %v, x0 changed: %v", res.Status, err, x0[0] != 1.5)
	}
}

// TestCGZeroRHS: b = 0 has the solution 0.
func TestCGZeroRHS(t *testing.T) {
	a := stencil.Poisson2D(5)
	x := cgOnes(25)
	res, err := krylov.CG(context.Background(), a, make([]float64, 25), x, nil, krylov.Settings{X0: cgOnes(25)})
	if err != nil || res.Status != krylov.Converged || res.Iterations != 0 || cgNorm(x) != 0 {
		t.Fatalf("status %v, err %v, ‖x‖ = %g", res.Status, err, cgNorm(x))
	}
}

// TestCGDeterministic: the same solve twice gives bitwise identical x,
// history and counts, both on a small problem (sparse's kernels inline) and
// on one above sparse's inline threshold of 2¹⁵ elements, where the
// products and sweeps run on its worker pool (and under -race, this is the
// test that exercises the pool from CG).
func TestCGDeterministic(t *testing.T) {
	for _, c := range []struct {
		side int
		rtol float64
	}{{40, 0}, {190, 1e-4}} {
		t.Run(fmt.Sprintf("side %d", c.side), func(t *testing.T) {
			a := stencil.Poisson2D(c.side)
			n := a.Rows
			b := cgMul(a, cgOnes(n))
			b[7] += 1
			run := func() ([]float64, *cgHistory, krylov.Result) {
				x := make([]float64, n)
				h := &cgHistory{}
				res, err := krylov.CG(context.Background(), a, b, x, cgScale(0.25), krylov.Settings{Recorder: h, RefreshEvery: 7, RelTol: c.rtol})
				if err != nil || res.Status != krylov.Converged {
					t.Fatal(res.Status, err)
				}
				return x, h, res
			}
			x1, h1, r1 := run()
			x2, h2, r2 := run()
			for i := range x1 {
				if math.Float64bits(x1[i]) != math.Float64bits(x2[i]) {
					t.Fatalf("x[%d] differs: %x vs %x", i, math.Float64bits(x1[i]), math.Float64bits(x2[i]))
				}
			}
			if len(h1.rows) != len(h2.rows) {
				t.Fatalf("history lengths %d and %d", len(h1.rows), len(h2.rows))
			}
			for i := range h1.rows {
				if math.Float64bits(h1.rows[i].ResidualNorm) != math.Float64bits(h2.rows[i].ResidualNorm) {
					t.Fatalf("history row %d differs", i)
				}
			}
			if r1.Iterations != r2.Iterations || r1.TrueResidualNorm != r2.TrueResidualNorm || r1.Cond != r2.Cond {
				t.Errorf("results differ: %+v vs %+v", r1, r2)
			}
		})
	}
}

// TestCGCancel: a context cancelled during the solve stops it before the
// next iteration; the Result is complete and the error is ctx.Err().
func TestCGCancel(t *testing.T) {
	a := stencil.Poisson2D(60)
	b := cgMul(a, cgOnes(3600))
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	h := &cgHistory{stopAt: 5, stop: cancel}
	x := make([]float64, 3600)
	res, err := krylov.CG(ctx, a, b, x, nil, krylov.Settings{Recorder: h})
	if !errors.Is(err, context.Canceled) || res.Status != krylov.Cancelled {
		t.Fatalf("status %v, err %v", res.Status, err)
	}
	// Cancelled while recording iteration 5: the loop checks the context
	// before starting iteration 6, so none more runs.
	if res.Iterations != 5 || len(h.rows) != 6 || h.finished != 1 {
		t.Errorf("%d iterations and %d rows after cancelling at iteration 5", res.Iterations, len(h.rows))
	}
	if got := cgTrueRel(a, b, x); math.Abs(got-res.RelResidual) > 1e-12 {
		t.Errorf("x does not hold the reported iterate: residual %g vs %g", got, res.RelResidual)
	}

	// Already cancelled: iteration 0 is recorded, nothing else.
	h = &cgHistory{}
	res, err = krylov.CG(ctx, a, b, x, nil, krylov.Settings{Recorder: h})
	if !errors.Is(err, context.Canceled) || res.Iterations != 0 || len(h.rows) != 1 {
		t.Errorf("pre-cancelled: %v, %v, %d iterations", res.Status, err, res.Iterations)
	}
}

// TestCGRecorderStops: an error from Record stops the solve at once with
// status Cancelled and that error.
func TestCGRecorderStops(t *testing.T) {
	a := stencil.Poisson2D(30)
	b := cgMul(a, cgOnes(900))
	x := make([]float64, 900)
	h := &cgHistory{stopAt: 7}
	res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{Recorder: h})
	if !errors.Is(err, errStop) || res.Status != krylov.Cancelled || res.Iterations != 7 || h.finished != 1 {
		t.Fatalf("status %v, err %v, %d iterations, %d Finish", res.Status, err, res.Iterations, h.finished)
	}
	if h.final.Status != krylov.Cancelled {
		t.Errorf("Finish saw status %v", h.final.Status)
	}
	if got := cgTrueRel(a, b, x); math.Abs(got-res.RelResidual) > 1e-12 {
		t.Errorf("x does not hold iteration 7's iterate: residual %g vs %g", got, res.RelResidual)
	}
}

// TestCGTimeLimit: a budget far shorter than the solve ends it with status
// TimeLimit and no error. (No timing assertion: the machine is shared.)
func TestCGTimeLimit(t *testing.T) {
	a := stencil.Poisson2D(200)
	b := cgMul(a, cgOnes(40000))
	x := make([]float64, 40000)
	res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{TimeLimit: time.Millisecond, RelTol: 1e-14})
	if err != nil || res.Status != krylov.TimeLimit {
		t.Fatalf("status %v, err %v after %d iterations", res.Status, err, res.Iterations)
	}
	if res.Iterations >= 40000*10 {
		t.Errorf("ran to the cap: %d", res.Iterations)
	}
}

// TestCGIterationLimit: the cap is a status, not an error.
func TestCGIterationLimit(t *testing.T) {
	a := stencil.Poisson2D(30)
	b := cgMul(a, cgOnes(900))
	x := make([]float64, 900)
	res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{MaxIter: 13})
	if err != nil || res.Status != krylov.IterationLimit || res.Iterations != 13 {
		t.Fatalf("status %v, err %v, %d iterations", res.Status, err, res.Iterations)
	}
	if math.Abs(cgTrueRel(a, b, x)-res.RelResidual) > 1e-12 || res.RelResidual >= 1 {
		t.Errorf("relative residual %g does not describe x", res.RelResidual)
	}
}

// TestCGStagnation: a tolerance below what double precision can attain on
// the true residual (about ε·κ relative to ‖b‖ for this κ ≈ 2·10³:
// Greenbaum 1997, §7.3) must end in Stagnated, never in a false Converged.
func TestCGStagnation(t *testing.T) {
	a := stencil.Poisson2D(30)
	b := cgMul(a, cgOnes(900))
	x := make([]float64, 900)
	res, err := krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{RelTol: 1e-19})
	if err != nil || res.Status != krylov.Stagnated {
		t.Fatalf("status %v, err %v after %d iterations, relative residual %g", res.Status, err, res.Iterations, res.RelResidual)
	}
	if res.RelResidual <= 1e-19 || res.RelResidual > 1e-12 {
		t.Errorf("stagnated at relative residual %g", res.RelResidual)
	}
	if res.Iterations > 900 {
		t.Errorf("took %d iterations to notice", res.Iterations)
	}
}

// TestCGStagnationAtRoundoff: a tolerance of 1e-300 on a 5×5 SPD system
// with an unbounded iteration cap (issue 15, finding 1: this ran 44.6 M
// iterations in 30 s at relative residual 1e-16). The true residual reaches
// the rounding level of b − A·x, u·‖(w_i+1)·(|A|·|x| + |b|)_i‖ ≈ 4·10⁻¹⁵
// here (Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed.,
// §3.1), within a few iterations of the fifth (exact arithmetic ends in n = 5:
// Saad, 2nd ed., §6.11.3), and stays there; the round-off rule must stop the
// solve one window later, with or without periodic refreshes, whether or
// not the operator can bound its own residual.
func TestCGStagnationAtRoundoff(t *testing.T) {
	var ii, jj []int32
	var vv []float64
	for i := 0; i < 5; i++ {
		for j := max(0, i-1); j <= min(4, i+1); j++ {
			ii, jj = append(ii, int32(i)), append(jj, int32(j))
			v := -1.0
			if i == j {
				v = 4
			}
			vv = append(vv, v)
		}
	}
	five, _, err := sparse.FromTriplets(5, 5, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	b := []float64{1, 2, 3, 4, 5}
	for _, c := range []struct {
		name    string
		op      krylov.Operator
		refresh int
	}{
		{"csr", five, 0},
		{"csr-no-refresh", five, -1},
		{"generic", cgOp{five}, 0},
		{"generic-no-refresh", cgOp{five}, -1},
	} {
		t.Run(c.name, func(t *testing.T) {
			x := make([]float64, 5)
			res, err := krylov.CG(context.Background(), c.op, b, x, nil,
				krylov.Settings{RelTol: 1e-300, MaxIter: 1 << 62, RefreshEvery: c.refresh, TimeLimit: 10 * time.Second})
			if err != nil || res.Status != krylov.Stagnated || res.Stagnation != krylov.StagnationRoundoff {
				t.Fatalf("status %v (%q), err %v after %d iterations, relative residual %g",
					res.Status, res.Stagnation, err, res.Iterations, res.RelResidual)
			}
			// 5 iterations to the exact-arithmetic end, then at most two
			// refresh periods to notice and one window to confirm.
			if res.Iterations > 150 {
				t.Errorf("took %d iterations to notice", res.Iterations)
			}
			// A few units of roundoff relative to ‖b‖: κ(A) < 3 here, its
			// eigenvalues being 4 − 2·cos(kπ/6), k = 1..5, those of a
			// tridiagonal Toeplitz matrix (a standard result, from memory).
			if res.RelResidual > 1e-14 {
				t.Errorf("stagnated at relative residual %g", res.RelResidual)
			}
		})
	}
}

// TestCGBreakdowns checks the named errors and their messages.
func TestCGBreakdowns(t *testing.T) {
	nan := math.NaN()
	cases := []struct {
		name   string
		a      krylov.Operator
		m      krylov.Preconditioner
		b      []float64
		x0     []float64
		target error
		msg    string
	}{
		// r₀ = p₀ = b = (1, 1), pᵀA·p = 1 − 3 = −2 at the first product.
		{"indefinite", cgDiagOp{1, -3}, nil, []float64{1, 1}, nil, krylov.ErrNotPositiveDefinite,
			"matrix is not positive definite (pᵀAp = -2 at iteration 1)"},
		// M = −I gives rᵀz = −‖r‖² = −2 before the first iteration.
		{"preconditioner", cgDiagOp{1, 2}, cgScale(-1), []float64{1, 1}, nil, krylov.ErrPreconditionerNotSPD,
			"preconditioner is not positive definite (rᵀz = -2 at iteration 0)"},
		{"NaN in b", cgDiagOp{1, 2}, nil, []float64{1, nan}, nil, krylov.ErrNotFinite,
			"NaN or Inf appeared (right-hand side b, entry 1 = NaN at iteration 0)"},
		{"NaN in X0", cgDiagOp{1, 2}, nil, []float64{1, 1}, []float64{nan, 0}, krylov.ErrNotFinite,
			"NaN or Inf appeared (start X0, entry 0 = NaN at iteration 0)"},
		{"NaN from preconditioner", cgDiagOp{1, 2}, cgNaNPrecond{}, []float64{1, 1}, nil, krylov.ErrNotFinite,
			"NaN or Inf appeared (preconditioned residual z = M⁻¹·r, entry 1 = NaN at iteration 0)"},
		{"NaN in operator", cgNaNAfter{cgDiagOp{1, 2, 3, 4}, 3, new(int)}, nil, []float64{1, 1, 1, 1}, nil, krylov.ErrNotFinite,
			"NaN or Inf appeared (product A·p, entry 2 = NaN at iteration 3)"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			x := make([]float64, len(c.b))
			h := &cgHistory{}
			res, err := krylov.CG(context.Background(), c.a, c.b, x, c.m, krylov.Settings{X0: c.x0, Recorder: h})
			var be *krylov.BreakdownError
			if !errors.Is(err, c.target) || !errors.As(err, &be) || res.Status != krylov.Breakdown {
				t.Fatalf("status %v, err %v, want a breakdown wrapping %v", res.Status, err, c.target)
			}
			if err.Error() != c.msg {
				t.Errorf("message %q, want %q", err.Error(), c.msg)
			}
			if h.finished != 1 {
				t.Errorf("Finish called %d times", h.finished)
			}
		})
	}
}

// cgNaNPrecond puts a NaN in entry 1 of z.
type cgNaNPrecond struct{}

func (cgNaNPrecond) Precondition(dst, r []float64) {
	copy(dst, r)
	dst[1] = math.NaN()
}

// cgNaNAfter returns NaN in entry 2 of its product from the given call on.
type cgNaNAfter struct {
	cgDiagOp
	from  int
	calls *int
}

func (o cgNaNAfter) MulVec(dst, x []float64) {
	o.cgDiagOp.MulVec(dst, x)
	*o.calls++
	if *o.calls >= o.from {
		dst[2] = math.NaN()
	}
}

// TestCGMulti: each right-hand side gets the same answer as its own CG
// solve, bit for bit, since the solves share nothing but read-only data and
// the workspace, which every solve overwrites before reading.
func TestCGMulti(t *testing.T) {
	a := stencil.Poisson2D(25)
	n := 625
	rng := rand.New(rand.NewPCG(9, 9))
	bs := make([][]float64, 3)
	xs := make([][]float64, 3)
	for i := range bs {
		bs[i] = make([]float64, n)
		for j := range bs[i] {
			bs[i][j] = rng.NormFloat64()
		}
		xs[i] = make([]float64, n)
	}
	results, err := krylov.CGMulti(context.Background(), a, bs, xs, cgScale(0.3), krylov.Settings{})
	if err != nil || len(results) != 3 {
		t.Fatalf("%d results, err %v", len(results), err)
	}
	for i := range bs {
		x := make([]float64, n)
		res, err := krylov.CG(context.Background(), a, bs[i], x, cgScale(0.3), krylov.Settings{})
		if err != nil || res.Status != krylov.Converged {
			t.Fatal(res.Status, err)
		}
		if res.Iterations != results[i].Iterations || res.TrueResidualNorm != results[i].TrueResidualNorm {
			t.Errorf("rhs %d: CGMulti %d iterations, CG %d", i, results[i].Iterations, res.Iterations)
		}
		for j := range x {
			if x[j] != xs[i][j] {
				t.Fatalf("rhs %d: x[%d] differs", i, j)
			}
		}
	}

	// An error stops the sequence and names the right-hand side.
	bs[1][0] = math.Inf(1)
	results, err = krylov.CGMulti(context.Background(), a, bs, xs, nil, krylov.Settings{})
	if !errors.Is(err, krylov.ErrNotFinite) || len(results) != 2 || !strings.Contains(err.Error(), "right-hand side 1") {
		t.Errorf("%d results, err %v", len(results), err)
	}
}

// TestCGPanics: programmer mistakes panic with the package prefix.
func TestCGPanics(t *testing.T) {
	a := cgDiagOp{1, 2, 3}
	ok := []float64{1, 1, 1}
	cases := []struct {
		name string
		f    func()
	}{
		{"short b", func() { krylov.CG(context.Background(), a, []float64{1}, make([]float64, 3), nil, krylov.Settings{}) }},
		{"short x", func() { krylov.CG(context.Background(), a, ok, make([]float64, 2), nil, krylov.Settings{}) }},
		{"short X0", func() {
			krylov.CG(context.Background(), a, ok, make([]float64, 3), nil, krylov.Settings{X0: []float64{1}})
		}},
		{"x is b", func() { krylov.CG(context.Background(), a, ok, ok, nil, krylov.Settings{}) }},
		{"negative RelTol", func() {
			krylov.CG(context.Background(), a, ok, make([]float64, 3), nil, krylov.Settings{RelTol: -1})
		}},
		{"NaN AbsTol", func() {
			krylov.CG(context.Background(), a, ok, make([]float64, 3), nil, krylov.Settings{AbsTol: math.NaN()})
		}},
		{"not square", func() {
			krylov.CG(context.Background(), cgDenseOp{mat.NewDense(3, 2, nil)}, ok, make([]float64, 3), nil, krylov.Settings{})
		}},
		{"multi lengths", func() {
			krylov.CGMulti(context.Background(), a, [][]float64{ok}, nil, nil, krylov.Settings{})
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			defer func() {
				r := recover()
				if s, _ := r.(string); !strings.HasPrefix(s, "krylov: ") {
					t.Errorf("panic %v, want a message starting with \"krylov: \"", r)
				}
			}()
			c.f()
		})
	}
}

// TestCGAllocations: no allocation per iteration. A full solve allocates
// its workspace once, so 10 and 100 iterations must allocate the same.
func TestCGAllocations(t *testing.T) {
	if cgRace {
		t.Skip("the race detector's runtime allocates on its own; allocation counts mean nothing under -race")
	}
	// 40 000 unknowns: above sparse's inline threshold, so the kernels run on
	// its worker pool; and well over 100 iterations to converge.
	a := stencil.Poisson2D(200)
	b := cgMul(a, cgOnes(40000))
	x := make([]float64, 40000)
	h := &cgNopRecorder{}
	allocs := func(iters int, m krylov.Preconditioner) float64 {
		return testing.AllocsPerRun(5, func() {
			res, _ := krylov.CG(context.Background(), a, b, x, m, krylov.Settings{MaxIter: iters, RefreshEvery: 7, Recorder: h})
			if res.Iterations != iters {
				t.Fatalf("%d iterations, want %d", res.Iterations, iters)
			}
		})
	}
	jac, err := precond.NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	for _, m := range []krylov.Preconditioner{nil, cgScale(0.25), cgScaleDot(0.25), jac} {
		if a10, a100 := allocs(10, m), allocs(100, m); a10 != a100 {
			t.Errorf("preconditioner %v: %v allocations for 10 iterations, %v for 100", m, a10, a100)
		}
	}
}

type cgNopRecorder struct{}

func (cgNopRecorder) Record(krylov.Progress) error { return nil }
func (cgNopRecorder) Finish(*krylov.Result)        {}

// cgScaleDot is cgScale with the fused PreconditionDot, its sum taken by
// sparse.Dot as the interface requires.
type cgScaleDot float64

func (c cgScaleDot) Precondition(dst, r []float64) { cgScale(c).Precondition(dst, r) }
func (c cgScaleDot) PreconditionDot(dst, r []float64) float64 {
	cgScale(c).Precondition(dst, r)
	return sparse.Dot(r, dst)
}

// TestCGDotPreconditioner: a preconditioner with PreconditionDot gives the
// same answer, bit for bit, as the same preconditioner without it.
func TestCGDotPreconditioner(t *testing.T) {
	a := stencil.Poisson2D(50)
	b := cgMul(a, cgOnes(2500))
	x1, x2 := make([]float64, 2500), make([]float64, 2500)
	r1, err1 := krylov.CG(context.Background(), a, b, x1, cgScale(0.25), krylov.Settings{})
	r2, err2 := krylov.CG(context.Background(), a, b, x2, cgScaleDot(0.25), krylov.Settings{})
	if err1 != nil || err2 != nil || r1.Status != krylov.Converged || r1.Iterations != r2.Iterations {
		t.Fatalf("%v %v, %v after %d and %d iterations", err1, err2, r1.Status, r1.Iterations, r2.Iterations)
	}
	for i := range x1 {
		if x1[i] != x2[i] {
			t.Fatalf("x[%d]: %g vs %g", i, x1[i], x2[i])
		}
	}
}

// TestCGGenericOperator: an operator without sparse's fused product and
// residual (cgOp hides them) goes through MulVec then a separate sweep. The
// arithmetic is the same (sparse documents MulVecDot as Dot after MulVec bit
// for bit, and b − A·x as b + (−1)·A·x is exact), so the answers agree bit
// for bit with the fused path on *sparse.CSR.
func TestCGGenericOperator(t *testing.T) {
	a := stencil.Poisson2D(70) // above sparse's inline threshold: runs on the pool
	b := cgMul(a, cgOnes(4900))
	b[3] = 0
	for _, m := range []krylov.Preconditioner{nil, cgScale(0.25), cgScaleDot(0.25)} {
		x1, x2 := make([]float64, 4900), make([]float64, 4900)
		r1, err1 := krylov.CG(context.Background(), a, b, x1, m, krylov.Settings{RefreshEvery: 9, X0: cgOnes(4900)})
		r2, err2 := krylov.CG(context.Background(), cgOp{a}, b, x2, m, krylov.Settings{RefreshEvery: 9, X0: cgOnes(4900)})
		if err1 != nil || err2 != nil || r1.Status != krylov.Converged {
			t.Fatal(err1, err2, r1.Status)
		}
		if r1.Iterations != r2.Iterations || r1.TrueResidualNorm != r2.TrueResidualNorm {
			t.Errorf("fused: %d iterations, residual %g; generic: %d, %g", r1.Iterations, r1.TrueResidualNorm, r2.Iterations, r2.TrueResidualNorm)
		}
		for i := range x1 {
			if x1[i] != x2[i] {
				t.Fatalf("x[%d]: %g vs %g", i, x1[i], x2[i])
			}
		}
	}
}

// TestCGMemory: a solve allocates CG's work vectors r, p, A·p and z (four
// vectors of n with a preconditioner; the caller's b and x make six) and the
// Lanczos coefficients (two arrays of at most min(MaxIter, 2¹⁶) entries),
// and nothing in proportion to the iterations.
func TestCGMemory(t *testing.T) {
	if cgRace {
		t.Skip("the race detector's runtime allocates on its own; allocation counts mean nothing under -race")
	}
	a := stencil.Poisson2D(200)
	n := a.Rows
	b := cgMul(a, cgOnes(n))
	x := make([]float64, n)
	solve := func() krylov.Result {
		res, err := krylov.CG(context.Background(), a, b, x, cgScale(0.25), krylov.Settings{})
		if err != nil || res.Status != krylov.Converged {
			t.Fatal(res.Status, err)
		}
		return res
	}
	solve() // warm sparse's pool, whose scratch grows once per vector size
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	res := solve()
	runtime.ReadMemStats(&after)
	got := after.TotalAlloc - before.TotalAlloc
	// Go rounds an allocation above 32 KiB up to whole 8 KiB pages (the
	// runtime's size classes, from memory); 4 KiB covers the small objects.
	pages := func(bytes int) int { return (bytes + 8191) / 8192 * 8192 }
	limit := uint64(4*pages(8*n) + 2*pages(8*min(10*n, 1<<16)) + 4096)
	if got > limit {
		t.Errorf("a %d-iteration solve allocated %d bytes, more than 4 vectors and the Lanczos history (%d)", res.Iterations, got, limit)
	}
}

// cgPlainJacobi hides every fused form of a Jacobi preconditioner: CG then
// applies it with Precondition and takes rᵀz with sparse.Dot, the unfused
// path.
type cgPlainJacobi struct{ m *precond.Jacobi }

func (j cgPlainJacobi) Precondition(dst, r []float64) { j.m.Precondition(dst, r) }

// cgDotJacobi keeps only PreconditionDot: the apply fused with rᵀz but not
// with the residual update.
type cgDotJacobi struct{ m *precond.Jacobi }

func (j cgDotJacobi) Precondition(dst, r []float64) { j.m.Precondition(dst, r) }
func (j cgDotJacobi) PreconditionDot(dst, r []float64) float64 {
	return j.m.PreconditionDot(dst, r)
}

// TestCGFusedJacobi: CG with precond.Jacobi fuses the diagonal apply into
// the residual update (DiagonalPreconditioner, sparse.AxpyDiagDot). The
// fused sweep does the unfused sequence's arithmetic (sparse tests it bit for
// bit against AxpyDot, the product and Dot), so the three paths must give the
// same iterates, residual history and result bit for bit — stronger than
// "to rounding". jump3d 40³ with contrast 10⁴ makes the diagonal matter
// (Jacobi cuts its iterations); 64 000 unknowns put the kernels on the
// worker pool; refreshes every 7 iterations with a tolerance that forces
// replacements exercise the path where z must be recomputed.
func TestCGFusedJacobi(t *testing.T) {
	side := 40
	if cgRace {
		side = 12 // the race detector's runtime is ~10× slower; keep it small
	}
	a := stencil.Jump3D(side, 1e4)
	n := a.Rows
	b := cgMul(a, cgOnes(n))
	jac, err := precond.NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	for _, st := range []krylov.Settings{{RelTol: 1e-10}, {RelTol: 1e-13, RefreshEvery: 7}} {
		var xs [3][]float64
		var hs [3]*cgHistory
		var rs [3]krylov.Result
		for i, m := range []krylov.Preconditioner{jac, cgPlainJacobi{jac}, cgDotJacobi{jac}} {
			xs[i], hs[i] = make([]float64, n), &cgHistory{}
			s := st
			s.Recorder = hs[i]
			rs[i], err = krylov.CG(context.Background(), a, b, xs[i], m, s)
			if err != nil {
				t.Fatal(err)
			}
		}
		if rs[0].Status != krylov.Converged && rs[0].Status != krylov.Stagnated {
			t.Fatalf("rtol %g: %v after %d iterations", st.RelTol, rs[0].Status, rs[0].Iterations)
		}
		for i := 1; i < 3; i++ {
			if rs[i].Iterations != rs[0].Iterations || rs[i].Status != rs[0].Status ||
				math.Float64bits(rs[i].TrueResidualNorm) != math.Float64bits(rs[0].TrueResidualNorm) {
				t.Fatalf("rtol %g path %d: %v after %d iterations (‖r‖ %g), fused: %v after %d (‖r‖ %g)", st.RelTol, i,
					rs[i].Status, rs[i].Iterations, rs[i].TrueResidualNorm, rs[0].Status, rs[0].Iterations, rs[0].TrueResidualNorm)
			}
			for k := range xs[0] {
				if math.Float64bits(xs[i][k]) != math.Float64bits(xs[0][k]) {
					t.Fatalf("rtol %g path %d: x[%d] %v, fused %v", st.RelTol, i, k, xs[i][k], xs[0][k])
				}
			}
			for k, row := range hs[0].rows {
				if math.Float64bits(hs[i].rows[k].ResidualNorm) != math.Float64bits(row.ResidualNorm) {
					t.Fatalf("rtol %g path %d: residual at iteration %d differs", st.RelTol, i, row.Iteration)
				}
			}
		}
	}
}
