package krylov

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// denseOp is a TransOperator over a gonum dense matrix, with plain loops so
// that results are deterministic.
type denseOp struct{ a *mat.Dense }

func (o denseOp) Dims() (int, int) { return o.a.Dims() }

func (o denseOp) MulVec(dst, x []float64) {
	m, n := o.a.Dims()
	if len(dst) != m || len(x) != n {
		panic("denseOp: bad lengths")
	}
	for i := range m {
		row := o.a.RawRowView(i)
		var s float64
		for j, v := range row {
			s += v * x[j]
		}
		dst[i] = s
	}
}

func (o denseOp) MulVecTrans(dst, x []float64) {
	m, n := o.a.Dims()
	if len(dst) != n || len(x) != m {
		panic("denseOp: bad lengths")
	}
	clear(dst)
	for i := range m {
		row := o.a.RawRowView(i)
		xi := x[i]
		for j, v := range row {
			dst[j] += v * xi
		}
	}
}

// normedOp also reports its column norms, so column scaling is available.
type normedOp struct{ denseOp }

func (o normedOp) ColumnNorms(dst []float64) {
	m, n := o.a.Dims()
	if len(dst) != n {
		panic("normedOp: bad length")
	}
	clear(dst)
	for i := range m {
		for j, v := range o.a.RawRowView(i) {
			dst[j] += v * v
		}
	}
	for j := range dst {
		dst[j] = math.Sqrt(dst[j])
	}
}

// randProblem returns an m×n matrix with standard normal entries whose
// columns are multiplied by factors spread over the given number of decades
// (so that column scaling matters), and a standard normal b. Fixed seed.
func randProblem(seed uint64, m, n int, decades float64) (*mat.Dense, []float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	a := mat.NewDense(m, n, nil)
	for j := range n {
		f := math.Pow(10, decades*(rng.Float64()-0.5))
		for i := range m {
			a.Set(i, j, f*rng.NormFloat64())
		}
	}
	b := make([]float64, m)
	for i := range b {
		b[i] = rng.NormFloat64()
	}
	return a, b
}

// augmented returns [A; λI] and [b; 0].
func augmented(a *mat.Dense, b []float64, lam float64) (*mat.Dense, []float64) {
	m, n := a.Dims()
	aa := mat.NewDense(m+n, n, nil)
	aa.Slice(0, m, 0, n).(*mat.Dense).Copy(a)
	for j := range n {
		aa.Set(m+j, j, lam)
	}
	bb := make([]float64, m+n)
	copy(bb, b)
	return aa, bb
}

// qrSolve returns gonum's dense QR least-squares solution (Householder QR,
// Golub and Van Loan, Matrix Computations, 4th ed., §5.3.3) of a tall,
// full-column-rank problem.
func qrSolve(t *testing.T, a *mat.Dense, b []float64) []float64 {
	t.Helper()
	var qr mat.QR
	qr.Factorize(a)
	var x mat.VecDense
	if err := qr.SolveVecTo(&x, false, mat.NewVecDense(len(b), b)); err != nil {
		t.Fatalf("gonum QR: %v", err)
	}
	return x.RawVector().Data
}

// svdInfo holds gonum's SVD of A: the singular values, the numerical rank
// and the minimum-norm least-squares solution (Golub and Van Loan, 4th ed.,
// §5.5.1).
type svdInfo struct {
	sv      []float64
	rank    int
	minNorm []float64
}

func svdSolve(t *testing.T, a *mat.Dense, b []float64) svdInfo {
	t.Helper()
	var svd mat.SVD
	if !svd.Factorize(a, mat.SVDThin) {
		t.Fatal("gonum SVD failed")
	}
	sv := svd.Values(nil)
	m, n := a.Dims()
	// The rank threshold max(m, n)·u·σ_max is LAPACK's default for gelsd
	// (from memory); the test problems have a clear gap.
	rank := svd.Rank(float64(max(m, n)) * 0x1p-52)
	var x mat.VecDense
	svd.SolveVecTo(&x, mat.NewVecDense(len(b), b), rank)
	return svdInfo{sv: sv, rank: rank, minNorm: x.RawVector().Data}
}

// gradient returns g = Aᵀ(b − A·x) − λ²x and r = b − A·x, computed densely.
func gradient(a *mat.Dense, b, x []float64, lam float64) (g, r []float64) {
	m, n := a.Dims()
	op := denseOp{a}
	r = make([]float64, m)
	op.MulVec(r, x)
	for i := range r {
		r[i] = b[i] - r[i]
	}
	g = make([]float64, n)
	op.MulVecTrans(g, r)
	for j := range g {
		g[j] -= lam * lam * x[j]
	}
	return g, r
}

// checkAgainst checks the solution x of min ‖A·x − b‖² + λ²‖x‖² against a
// reference xRef computed densely. For full-column-rank Ā = [A; λI] the
// error is exactly x* − x = (AᵀA + λ²I)⁻¹·g with g = Aᵀ(b − A·x) − λ²x, so
// ‖x − x*‖ ≤ ‖g‖/(σ_min² + λ²) (Björck 1996, §1.1.2, the normal
// equations). The reference itself is within u·κ_LS·‖x*‖ of x*, up to a
// modest constant, with κ_LS = κ + κ²·‖r‖/(σ_max·‖x‖) (Golub and Van Loan,
// 4th ed., §5.3.7, and the backward stability of Householder QR and of the
// SVD, §5.3.8 and §8.6); the constant 1e3 covers the dimension factors of the
// backward error (common practice).
func checkAgainst(t *testing.T, a *mat.Dense, b, x, xRef []float64, lam, sigmaMin, sigmaMax float64) {
	t.Helper()
	g, r := gradient(a, b, x, lam)
	s2 := sigmaMin*sigmaMin + lam*lam
	bound := floats.Norm(g, 2) / s2
	kappa := math.Sqrt(sigmaMax*sigmaMax+lam*lam) / math.Sqrt(s2)
	xn := floats.Norm(xRef, 2)
	refErr := 1e3 * 0x1p-53 * (kappa + kappa*kappa*floats.Norm(r, 2)/(sigmaMax*xn)) * xn
	diff := floats.Distance(x, xRef, 2)
	if diff > bound+refErr {
		t.Errorf("‖x − x_ref‖ = %.3g > ‖g‖/σ²_min + ref. error = %.3g + %.3g (κ = %.3g)", diff, bound, refErr, kappa)
	}
}

// checkResult checks the figures a converged result reports against the
// same figures recomputed densely from x.
func checkResult(t *testing.T, res LSQResult, a *mat.Dense, b, x []float64, lam float64) {
	t.Helper()
	if res.Status != Converged {
		t.Fatalf("status %v after %d iterations, want converged (‖r‖ %.3g, ‖g‖ %.3g)", res.Status, res.Iterations, res.ResidualNorm, res.NormalResidualNorm)
	}
	g, r := gradient(a, b, x, lam)
	// The result's norms are recomputed from x by LSQ with the same
	// products; they agree to rounding (relative 1e-12 is far above the
	// u·n of the sums).
	for _, c := range []struct {
		name      string
		got, want float64
		scale     float64
	}{
		{"ResidualNorm", res.ResidualNorm, floats.Norm(r, 2), floats.Norm(b, 2)},
		{"NormalResidualNorm", res.NormalResidualNorm, floats.Norm(g, 2), mat.Norm(a, 2) * floats.Norm(b, 2)},
		{"XNorm", res.XNorm, floats.Norm(x, 2), floats.Norm(x, 2)},
		{"RHSNorm", res.RHSNorm, floats.Norm(b, 2), floats.Norm(b, 2)},
	} {
		if math.Abs(c.got-c.want) > 1e-12*c.scale {
			t.Errorf("%s = %.16g, recomputed %.16g", c.name, c.got, c.want)
		}
	}
	// ‖B_k‖_F ≥ σ_max(B_k), and the Lanczos process behind both methods
	// finds the extreme singular values first (Golub and Van Loan, 4th ed.,
	// §10.1.4), so after a few iterations the estimate is at least about
	// σ_max(Ā); half of it is the allowance (common practice). It is no
	// upper bound in floating point: once orthogonality is lost, singular
	// values repeat in B_k and ‖B_k‖_F can pass ‖Ā‖_F.
	if res.Scaling == "none" && res.Iterations >= 5 {
		var svd mat.SVD
		svd.Factorize(a, mat.SVDNone)
		smax := math.Hypot(svd.Values(nil)[0], lam)
		if res.ANormEstimate < 0.5*smax {
			t.Errorf("ANormEstimate %.6g < σ_max(Ā)/2 = %.6g", res.ANormEstimate, smax/2)
		}
	}
	if res.StoppedBy != RuleResidual && res.StoppedBy != RuleNormalResidual {
		t.Errorf("StoppedBy %q", res.StoppedBy)
	}
}

var lsqMethods = []LSQMethod{LSQR, CGLS}

// TestLSQRandom checks both methods, with and without column scaling, on
// random over- and underdetermined problems, damped and not, against
// gonum's dense QR (tall), the minimum-norm solution from gonum's SVD (wide),
// and gonum's QR of the augmented system [A; λI]·x ≈ [b; 0] (damped).
func TestLSQRandom(t *testing.T) {
	cases := []struct {
		name string
		m, n    int
		lam     float64
		decades float64
	}{
		{"over", 80, 30, 0, 4},
		{"over-damped", 80, 30, 0.3, 4},
		{"under", 30, 80, 0, 4},
		{"under-damped", 30, 80, 0.3, 4},
		// A random square matrix is already ill-conditioned (σ_min of order
		// 1/√n; Golub and Van Loan, 4th ed., §2.6.2 from memory), so its
		// columns are spread over one decade only, or unscaled CGLS
		// (which sees κ²) would not reach 1e-8.
		{"square", 40, 40, 0, 1},
	}
	for ci, c := range cases {
		a, b := randProblem(uint64(100+ci), c.m, c.n, c.decades)
		info := svdSolve(t, a, b)
		var ref []float64
		sigmaMin := info.sv[len(info.sv)-1]
		switch {
		case c.lam > 0:
			aa, bb := augmented(a, b, c.lam)
			ref = qrSolve(t, aa, bb) // [A; λI] is tall with full column rank
			if c.m < c.n {
				sigmaMin = 0 // A has n − m zero singular values
			}
		case c.m >= c.n:
			ref = qrSolve(t, a, b)
		default:
			ref = info.minNorm
		}
		for _, meth := range lsqMethods {
			for _, sc := range []Scaling{ScaleAuto, ScaleNone, ScaleColumns} {
				if c.m < c.n && c.lam == 0 && sc == ScaleColumns {
					continue // changes which minimiser is found: see TestLSQScalingWide
				}
				t.Run(c.name+"/"+meth.String()+"/"+sc.String(), func(t *testing.T) {
					x := make([]float64, c.n)
					res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Damp: c.lam, Method: meth, Scaling: sc})
					if err != nil {
						t.Fatal(err)
					}
					t.Logf("%s, %s: %v by %s after %d iterations, ‖r‖ %.6g, ‖g‖ %.3g, cond est. %.3g",
						res.Method, res.Scaling, res.Status, res.StoppedBy, res.Iterations, res.ResidualNorm, res.NormalResidualNorm, res.CondEstimate)
					checkResult(t, res, a, b, x, c.lam)
					if c.m < c.n && c.lam == 0 {
						checkMinNorm(t, a, b, x, info)
						return
					}
					checkAgainst(t, a, b, x, ref, c.lam, sigmaMin, info.sv[0])
				})
			}
		}
	}
}

// checkMinNorm checks x against the minimum-norm least-squares solution x⁺
// from gonum's SVD. Write x = x_R + x_N with x_R in range(Aᵀ) and x_N in
// null(A). Both x_R and x⁺ lie in range(Aᵀ), where AᵀA is invertible with
// least eigenvalue σ_r² (σ_r the smallest nonzero singular value), and
// AᵀA·(x⁺ − x_R) = Aᵀ(b − A·x) = g, so ‖x_R − x⁺‖ ≤ ‖g‖/σ_r² (Björck
// 1996, §1.2). The null-space part x_N is zero in exact arithmetic, because
// from x0 = 0 the iterates lie in the Krylov space of AᵀA started from Aᵀb
// (Björck 1996, §7.4.1); for the rounding that leaks into it we allow
// 1e3·u·κ·‖x⁺‖ (an allowance of common practice).
func checkMinNorm(t *testing.T, a *mat.Dense, b, x []float64, info svdInfo) {
	t.Helper()
	g, _ := gradient(a, b, x, 0)
	sr := info.sv[info.rank-1]
	bound := floats.Norm(g, 2) / (sr * sr)
	xn := floats.Norm(info.minNorm, 2)
	leak := 1e3 * 0x1p-53 * (info.sv[0] / sr) * xn
	if diff := floats.Distance(x, info.minNorm, 2); diff > bound+leak {
		t.Errorf("‖x − x⁺‖ = %.3g > %.3g + %.3g", diff, bound, leak)
	}
}
