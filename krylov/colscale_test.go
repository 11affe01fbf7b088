package krylov

import (
	"context"
	"math"
	"sort"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// dampedScaleProblem is a tall random problem whose column norms spread over
// four decades, and a damping λ equal to the median column norm: columns
// well below λ then have a scale factor set by λ, columns well above it one
// set by their norm, so a scaling that forgets λ is wrong by large factors
// on half of the columns.
func dampedScaleProblem() (a *mat.Dense, b []float64, lam float64) {
	a, b = randProblem(1701, 50, 10, 4)
	_, n := a.Dims()
	norms := make([]float64, n)
	for j := range n {
		norms[j] = mat.Norm(a.ColView(j), 2)
	}
	sort.Float64s(norms)
	return a, b, norms[n/2]
}

// TestColumnScaleDamped checks the column scaling of a damped problem with λ
// of the order of the column norms against gonum's dense arithmetic. The
// scale factors are D_jj = 1/√((AᵀA + λ²I)_jj), the Jacobi scaling of the
// damped normal equations (Björck, Numerical Methods for Least Squares
// Problems, 1996, §7.2.1), so that the augmented [A·D; λD] has columns of
// unit Euclidean norm. Both are recomputed here with gonum (the normal matrix
// by mat.Dense.Mul, the augmented columns by mat.Norm); the only rounding is
// that of the sums, relative 1e-14 (common practice for n = 50 terms).
func TestColumnScaleDamped(t *testing.T) {
	a, _, lam := dampedScaleProblem()
	m, n := a.Dims()
	var ata mat.Dense
	ata.Mul(a.T(), a)
	d := make([]float64, n)
	normedOp{denseOp{a}}.ColumnNorms(d)
	undamped := make([]float64, n)
	for j := range d {
		undamped[j] = 1 / d[j]
	}
	zero, bad := columnScale(d, lam)
	if zero != nil || bad != -1 {
		t.Fatalf("zero columns %v, bad %d; want none", zero, bad)
	}
	aug := mat.NewDense(m+n, n, nil)
	worst := 0.0 // largest relative gap between the damped and undamped factors
	for j := range n {
		want := 1 / math.Sqrt(ata.At(j, j)+lam*lam)
		if math.Abs(d[j]-want) > 1e-14*want {
			t.Errorf("D_%d = %.17g, want 1/√((AᵀA + λ²I)_jj) = %.17g", j, d[j], want)
		}
		worst = math.Max(worst, math.Abs(undamped[j]-want)/want)
		for i := range m {
			aug.Set(i, j, a.At(i, j)*d[j])
		}
		aug.Set(m+j, j, lam*d[j])
	}
	for j := range n {
		if got := mat.Norm(aug.ColView(j), 2); math.Abs(got-1) > 1e-14 {
			t.Errorf("column %d of [A·D; λD] has norm %.17g, want 1", j, got)
		}
	}
	// The case must be one where the damping matters: the undamped factors
	// 1/‖a_j‖ are off by far more than the tolerance above.
	if worst < 0.1 {
		t.Fatalf("undamped factors within %.3g of the damped ones: λ = %.3g is too small for this check", worst, lam)
	}
}

// TestLSQColumnScaleDamped checks the same scaling through LSQ, where only
// its effect is visible. With D right, Ā = [A·D; λD] has unit columns, so
// ‖Ā‖_F = √n. LSQR's estimate ‖B_k‖_F (Paige and Saunders 1982, §5.3) is
// ‖U_{k+1}ᵀ·Ā·V_k‖_F, at most ‖Ā‖_F while the Lanczos vectors stay
// orthogonal (they do for this small problem of modest scaled condition;
// the allowance is relative 1e-10, common practice), and at least
// σ_max(B_k), which the Lanczos process finds first (Golub and Van Loan,
// 4th ed., §10.1.4): half of σ_max(Ā) is the allowance, as in checkResult.
// A factor D that forgets λ makes the columns of Ā √(1 + λ²/‖a_j‖²) long,
// about 100 for this problem's shortest column, and the estimate passes √n
// at once. The solution itself is checked against gonum's QR of [A; λI].
func TestLSQColumnScaleDamped(t *testing.T) {
	a, b, lam := dampedScaleProblem()
	m, n := a.Dims()
	x := make([]float64, n)
	res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{
		Damp: lam, Method: LSQR, Scaling: ScaleColumns, ATol: 1e-14, BTol: 1e-14,
	})
	if err != nil {
		t.Fatal(err)
	}
	if res.LSQ.Scaling != "colscale" {
		t.Fatalf("scaling %q, want colscale", res.LSQ.Scaling)
	}
	// σ_max of [A·D; λD] with D from gonum's normal matrix.
	var ata mat.Dense
	ata.Mul(a.T(), a)
	aug := mat.NewDense(m+n, n, nil)
	for j := range n {
		dj := 1 / math.Sqrt(ata.At(j, j)+lam*lam)
		for i := range m {
			aug.Set(i, j, a.At(i, j)*dj)
		}
		aug.Set(m+j, j, lam*dj)
	}
	var svd mat.SVD
	if !svd.Factorize(aug, mat.SVDNone) {
		t.Fatal("gonum SVD failed")
	}
	smax, frob := svd.Values(nil)[0], math.Sqrt(float64(n))
	got := res.LSQ.ANormEstimate
	t.Logf("%d iterations, ‖B_k‖_F %.15g, σ_max(Ā) %.6g, ‖Ā‖_F = √n %.15g", res.Iterations, got, smax, frob)
	if got > frob*(1+1e-10) || got < smax/2 {
		t.Errorf("‖Ā‖_F estimate %.15g outside [σ_max/2, ‖Ā‖_F] = [%.6g, %.15g]: the columns of [A·D; λD] are not of unit norm", got, smax/2, frob)
	}
	aa, bb := augmented(a, b, lam)
	ref := qrSolve(t, aa, bb)
	if d := floats.Distance(x, ref, 2); d > 1e-8*floats.Norm(ref, 2) {
		t.Errorf("‖x − x_QR‖ = %.3g, want ≤ 1e-8·‖x_QR‖ = %.3g", d, 1e-8*floats.Norm(ref, 2))
	}
}
