package krylov_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// minresIndefinite returns a random sparse symmetric indefinite n×n matrix
// with a dense copy: a 1D Laplacian shifted into the middle of its spectrum
// plus random symmetric couplings (fixed seed).
func minresIndefinite(n int, seed uint64) (*sparse.CSR, *mat.Dense) {
	rng := rand.New(rand.NewPCG(seed, 1))
	d := mat.NewDense(n, n, nil)
	for i := range n {
		d.Set(i, i, 2-1.3)
		if i > 0 {
			d.Set(i, i-1, -1)
			d.Set(i-1, i, -1)
		}
	}
	for range n {
		i, j := rng.IntN(n), rng.IntN(n)
		v := rng.Float64() - 0.5
		d.Set(i, j, d.At(i, j)+v)
		if i != j {
			d.Set(j, i, d.At(j, i)+v)
		}
	}
	var ii, jj []int32
	var vv []float64
	for i := range n {
		for j := range n {
			if v := d.At(i, j); v != 0 {
				ii, jj, vv = append(ii, int32(i)), append(jj, int32(j)), append(vv, v)
			}
		}
	}
	a, _, err := sparse.FromTriplets(n, n, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		panic(err)
	}
	return a, d
}

// TestMINRESIndefiniteVsLU: on random symmetric indefinite systems MINRES
// reaches the true relative residual 1e-10 and agrees with gonum's dense LU
// solution within κ·(relres + n·ε), the forward-error bound of a backward-
// stable answer (Higham, Accuracy and Stability of Numerical Algorithms,
// 2nd ed., §7.1).
func TestMINRESIndefiniteVsLU(t *testing.T) {
	for _, n := range []int{30, 200} {
		a, d := minresIndefinite(n, uint64(n))
		var eig mat.EigenSym
		if !eig.Factorize(mat.NewSymDense(n, d.RawMatrix().Data), false) {
			t.Fatal("eigen decomposition failed")
		}
		vals := eig.Values(nil)
		if vals[0] >= 0 || vals[n-1] <= 0 {
			t.Fatalf("n=%d: test matrix is not indefinite: λ in [%g, %g]", n, vals[0], vals[n-1])
		}
		b := cgMul(a, cgOnes(n))
		var lu mat.LU
		lu.Factorize(d)
		var xd mat.VecDense
		if err := lu.SolveVecTo(&xd, false, mat.NewVecDense(n, append([]float64(nil), b...))); err != nil {
			t.Fatal(err)
		}
		x := make([]float64, n)
		res, err := krylov.MINRES(context.Background(), a, b, x, nil, krylov.Settings{RelTol: 1e-10})
		if err != nil || res.Status != krylov.Converged {
			t.Fatalf("n=%d: %v, %v", n, res.Status, err)
		}
		if rel := cgTrueRel(a, b, x); rel > 1e-10 {
			t.Errorf("n=%d: true relative residual %g", n, rel)
		}
		kappa := lu.Cond()
		var diff, xn float64
		for i := range x {
			diff = max(diff, math.Abs(x[i]-xd.AtVec(i)))
			xn = max(xn, math.Abs(xd.AtVec(i)))
		}
		if bound := kappa * (res.RelResidual + float64(n)*0x1p-52) * 10; diff/xn > bound {
			t.Errorf("n=%d: ‖x − x_LU‖∞/‖x_LU‖∞ = %g above κ(relres + nε)·10 = %g", n, diff/xn, bound)
		}
		// Lanczos estimates lie inside the spectrum (Ritz values:
		// Golub and Van Loan §10.1.4).
		if res.LambdaMin < vals[0]*(1+1e-8) || res.LambdaMax > vals[n-1]*(1+1e-8) || res.LambdaMin >= 0 {
			t.Errorf("n=%d: Ritz range [%g, %g] not inside [%g, %g] or not indefinite", n, res.LambdaMin, res.LambdaMax, vals[0], vals[n-1])
		}
		if res.Method != "minres" || res.Preconditioner != "none" || res.MINRES == nil {
			t.Errorf("method %q preconditioner %q MINRES %v", res.Method, res.Preconditioner, res.MINRES)
		}
	}
}

// TestMINRESMonotone: MINRES minimises ‖r‖₂ over nested Krylov spaces, so
// its residual norms never increase (Paige and Saunders 1975, §6). With the
// periodic true-residual check off, the recorded norm is the method's own
// |η_k|, which is multiplied by |s_k| ≤ 1 at every step.
func TestMINRESMonotone(t *testing.T) {
	a, _ := minresIndefinite(300, 7)
	b := cgOnes(300)
	x := make([]float64, 300)
	h := &cgHistory{}
	res, err := krylov.MINRES(context.Background(), a, b, x, nil, krylov.Settings{RefreshEvery: -1, Recorder: h})
	if err != nil || res.Status != krylov.Converged {
		t.Fatalf("%v %v", res.Status, err)
	}
	rows := h.rows
	for k := 1; k < len(rows)-1; k++ { // the last row is the true residual
		if rows[k].ResidualNorm > rows[k-1].ResidualNorm {
			t.Fatalf("iteration %d: residual %g rose from %g", k, rows[k].ResidualNorm, rows[k-1].ResidualNorm)
		}
	}
}

// TestMINRESvsCGOnSPD: on an SPD matrix MINRES and CG need similar iteration
// counts for the same residual tolerance (Greenbaum, Iterative Methods for
// Solving Linear Systems, 1997, ch. 2 and §5.3: the CG and MINRES residual
// norms are tied, ‖r^CG_k‖ = ‖r^MR_k‖/√(1 − (‖r^MR_k‖/‖r^MR_{k−1}‖)²)).
// "Similar" is within 10% plus two iterations, common practice.
func TestMINRESvsCGOnSPD(t *testing.T) {
	a := stencil.Poisson2D(60)
	n := 3600
	b := cgMul(a, cgOnes(n))
	for _, m := range []krylov.Preconditioner{nil, cgScale(0.25)} {
		x := make([]float64, n)
		rc, err := krylov.CG(context.Background(), a, b, x, m, krylov.Settings{})
		if err != nil || rc.Status != krylov.Converged {
			t.Fatal(rc.Status, err)
		}
		rm, err := krylov.MINRES(context.Background(), a, b, x, m, krylov.Settings{})
		if err != nil || rm.Status != krylov.Converged {
			t.Fatal(rm.Status, err)
		}
		if d := math.Abs(float64(rm.Iterations - rc.Iterations)); d > 0.1*float64(rc.Iterations)+2 {
			t.Errorf("preconditioner %v: MINRES %d iterations, CG %d", m, rm.Iterations, rc.Iterations)
		}
		// Poisson2D(60)'s extreme eigenvalues are known in closed form
		// (poisson2DExtremes); the Ritz values approach them from inside.
		lo, hi := poisson2DExtremes(60)
		scale := 1.0
		if m != nil {
			scale = 0.25
		}
		if rm.LambdaMax > hi*scale*(1+1e-8) || rm.LambdaMax < 0.99*hi*scale || rm.LambdaMin < lo*scale*(1-1e-8) {
			t.Errorf("Ritz range [%g, %g], spectrum [%g, %g]", rm.LambdaMin, rm.LambdaMax, lo*scale, hi*scale)
		}
	}
}

// TestMINRESBreakdownsAndLimits covers the statuses other than Converged.
func TestMINRESBreakdownsAndLimits(t *testing.T) {
	a, _ := minresIndefinite(200, 3)
	b := cgOnes(200)
	x := make([]float64, 200)
	ctx := context.Background()

	// An indefinite preconditioner: rᵀM⁻¹r < 0 (here M = −I).
	res, err := krylov.MINRES(ctx, a, b, x, cgScale(-1), krylov.Settings{})
	var be *krylov.BreakdownError
	if res.Status != krylov.Breakdown || !errors.Is(err, krylov.ErrPreconditionerNotSPD) || !errors.As(err, &be) {
		t.Errorf("negative preconditioner: %v, %v", res.Status, err)
	}

	res, err = krylov.MINRES(ctx, a, b, x, nil, krylov.Settings{MaxIter: 5})
	if res.Status != krylov.IterationLimit || err != nil || res.Iterations != 5 {
		t.Errorf("iteration limit: %v %v after %d", res.Status, err, res.Iterations)
	}
	if rel := cgTrueRel(a, b, x); math.Abs(rel-res.RelResidual) > 1e-12 {
		t.Errorf("x does not hold the last iterate: true %g, reported %g", rel, res.RelResidual)
	}

	cctx, cancel := context.WithCancel(ctx)
	cancel()
	res, err = krylov.MINRES(cctx, a, b, x, nil, krylov.Settings{})
	if res.Status != krylov.Cancelled || !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled: %v %v", res.Status, err)
	}

	res, err = krylov.MINRES(ctx, a, b, x, nil, krylov.Settings{TimeLimit: time.Nanosecond})
	if res.Status != krylov.TimeLimit || err != nil {
		t.Errorf("time limit: %v %v", res.Status, err)
	}

	res, err = krylov.MINRES(ctx, a, make([]float64, 200), x, nil, krylov.Settings{})
	if res.Status != krylov.Converged || err != nil || cgNorm(x) != 0 {
		t.Errorf("b = 0: %v %v ‖x‖ %g", res.Status, err, cgNorm(x))
	}
}

// TestMINRESSingular: a singular symmetric A with b outside its range has no
// solution; MINRES must say so (status Stagnated, Singular, ‖A·r‖ small
// relative to ‖A‖‖r‖) instead of claiming convergence. A = diag(0, 1..n−1)
// coupled by a rotation-free tridiagonal block keeps e₁ in the null space;
// b = e₁ + A·1 has the least-squares residual e₁ exactly.
func TestMINRESSingular(t *testing.T) {
	n := 100
	ii, jj, vv := []int32{}, []int32{}, []float64{}
	for i := 1; i < n; i++ {
		ii, jj, vv = append(ii, int32(i)), append(jj, int32(i)), append(vv, float64(i%7)-3.5)
		if i > 1 {
			ii, jj, vv = append(ii, int32(i), int32(i-1)), append(jj, int32(i-1), int32(i)), append(vv, 0.5, 0.5)
		}
	}
	a, _, err := sparse.FromTriplets(n, n, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	b := cgMul(a, cgOnes(n))
	b[0] = 1
	x := make([]float64, n)
	res, err := krylov.MINRES(context.Background(), a, b, x, nil, krylov.Settings{})
	if err != nil || res.Status != krylov.Stagnated || !res.MINRES.Singular {
		t.Fatalf("%v %v singular=%v", res.Status, err, res.MINRES != nil && res.MINRES.Singular)
	}
	if math.Abs(res.TrueResidualNorm-1) > 1e-6 || res.MINRES.NormalResidualRel > 1e-8 {
		t.Errorf("‖r‖ = %g (least-squares residual 1), ‖Ar‖/(‖A‖‖r‖) = %g", res.TrueResidualNorm, res.MINRES.NormalResidualRel)
	}
}

// TestMINRESAllocations: no allocation per iteration.
func TestMINRESAllocations(t *testing.T) {
	if cgRace {
		t.Skip("the race detector's runtime allocates on its own")
	}
	a := stencil.Poisson2D(200)
	b := cgMul(a, cgOnes(40000))
	x := make([]float64, 40000)
	h := &cgNopRecorder{}
	allocs := func(iters int, m krylov.Preconditioner) float64 {
		return testing.AllocsPerRun(5, func() {
			res, _ := krylov.MINRES(context.Background(), a, b, x, m, krylov.Settings{MaxIter: iters, RefreshEvery: 7, Recorder: h})
			if res.Iterations != iters {
				t.Fatalf("%d iterations, want %d", res.Iterations, iters)
			}
		})
	}
	for _, m := range []krylov.Preconditioner{nil, cgScale(0.25), cgScaleDot(0.25)} {
		if a10, a100 := allocs(10, m), allocs(100, m); a10 != a100 {
			t.Errorf("preconditioner %v: %v allocations for 10 iterations, %v for 100", m, a10, a100)
		}
	}
}
