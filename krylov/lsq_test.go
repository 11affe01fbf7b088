package krylov

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

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
func checkAgainst(t *testing.T, a *mat.Dense, b, x, xRef []float64, lam, sigmaMin, sigmaMax float64) (diff, bound float64) {
	t.Helper()
	g, r := gradient(a, b, x, lam)
	s2 := sigmaMin*sigmaMin + lam*lam
	bound = floats.Norm(g, 2) / s2
	kappa := math.Sqrt(sigmaMax*sigmaMax+lam*lam) / math.Sqrt(s2)
	xn := floats.Norm(xRef, 2)
	refErr := 1e3 * 0x1p-53 * (kappa + kappa*kappa*floats.Norm(r, 2)/(sigmaMax*xn)) * xn
	diff = floats.Distance(x, xRef, 2)
	if diff > bound+refErr {
		t.Errorf("‖x − x_ref‖ = %.3g > ‖g‖/σ²_min + ref. error = %.3g + %.3g (κ = %.3g)", diff, bound, refErr, kappa)
	}
	return diff, bound + refErr
}

// checkResult checks the figures a converged result reports against the
// same figures recomputed densely from x.
func checkResult(t *testing.T, res Result, a *mat.Dense, b, x []float64, lam float64) {
	t.Helper()
	if res.Status != Converged {
		t.Fatalf("status %v after %d iterations, want converged (‖r‖ %.3g, ‖g‖ %.3g)", res.Status, res.Iterations, res.ResidualNorm, res.LSQ.NormalResidualNorm)
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
		{"NormalResidualNorm", res.LSQ.NormalResidualNorm, floats.Norm(g, 2), mat.Norm(a, 2) * floats.Norm(b, 2)},
		{"XNorm", res.LSQ.XNorm, floats.Norm(x, 2), floats.Norm(x, 2)},
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
	if res.LSQ.Scaling == "none" && res.Iterations >= 5 {
		var svd mat.SVD
		svd.Factorize(a, mat.SVDNone)
		smax := math.Hypot(svd.Values(nil)[0], lam)
		if res.LSQ.ANormEstimate < 0.5*smax {
			t.Errorf("ANormEstimate %.6g < σ_max(Ā)/2 = %.6g", res.LSQ.ANormEstimate, smax/2)
		}
	}
	if res.LSQ.StoppedBy != RuleResidual && res.LSQ.StoppedBy != RuleNormalResidual {
		t.Errorf("StoppedBy %q", res.LSQ.StoppedBy)
	}
}

var lsqMethods = []LSQMethod{LSQR, CGLS}

// TestLSQRandom checks both methods, with and without column scaling, on
// random over- and underdetermined problems, damped and not, against
// gonum's dense QR (tall), the minimum-norm solution from gonum's SVD (wide),
// and gonum's QR of the augmented system [A; λI]·x ≈ [b; 0] (damped).
func TestLSQRandom(t *testing.T) {
	cases := []struct {
		name    string
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
						res.Method, res.LSQ.Scaling, res.Status, res.LSQ.StoppedBy, res.Iterations, res.ResidualNorm, res.LSQ.NormalResidualNorm, res.LSQ.CondEstimate)
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

// historyRecorder keeps every row and the finished result.
type historyRecorder struct {
	rows     []Progress
	finished []*Result
	onRecord func(p Progress) error
}

func (h *historyRecorder) Record(p Progress) error {
	h.rows = append(h.rows, p)
	if h.onRecord != nil {
		return h.onRecord(p)
	}
	return nil
}

func (h *historyRecorder) Finish(r *Result) { h.finished = append(h.finished, r) }

// TestLSQConsistent: for b = A·x* with A of full column rank the methods
// stop by the residual rule and x is within ‖r‖/σ_min of x*, because
// x − x* = A⁺·(A·x − b) when A has full column rank (Björck 1996, §1.2).
func TestLSQConsistent(t *testing.T) {
	a, _ := randProblem(7, 60, 20, 2)
	rng := rand.New(rand.NewPCG(8, 1))
	xs := make([]float64, 20)
	for j := range xs {
		xs[j] = rng.NormFloat64()
	}
	b := make([]float64, 60)
	denseOp{a}.MulVec(b, xs)
	info := svdSolve(t, a, b)
	for _, meth := range lsqMethods {
		for _, lam := range []float64{0} {
			t.Run(meth.String(), func(t *testing.T) {
				x := make([]float64, 20)
				res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, Damp: lam})
				if err != nil {
					t.Fatal(err)
				}
				checkResult(t, res, a, b, x, 0)
				if res.LSQ.StoppedBy != RuleResidual {
					t.Errorf("stopped by %q, want %q", res.LSQ.StoppedBy, RuleResidual)
				}
				if d, bound := floats.Distance(x, xs, 2), res.ResidualNorm/info.sv[len(info.sv)-1]; d > bound {
					t.Errorf("‖x − x*‖ = %.3g > ‖r‖/σ_min = %.3g", d, bound)
				}
			})
		}
	}
}

// TestLSQZeroColumn: a zero column makes A rank deficient. With column
// scaling it is found and reported by index, left unscaled, and its entry of
// x keeps x0's value, so that from x0 = 0 the result is the minimum-norm
// solution (against gonum's SVD). With damping the minimiser has a zero
// there, whatever x0 (the term λ²x_j² is the only one that involves x_j).
func TestLSQZeroColumn(t *testing.T) {
	a, b := randProblem(11, 40, 12, 2)
	zero := []int{5, 9}
	for _, j := range zero {
		for i := range 40 {
			a.Set(i, j, 0)
		}
	}
	info := svdSolve(t, a, b)
	if info.rank != 10 {
		t.Fatalf("gonum SVD rank %d, want 10", info.rank)
	}
	x0 := make([]float64, 12)
	x0[5], x0[9] = 3, -2
	for _, meth := range lsqMethods {
		for _, sc := range []Scaling{ScaleAuto, ScaleColumns} {
			t.Run(meth.String()+"/"+sc.String(), func(t *testing.T) {
				x := make([]float64, 12)
				res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, Scaling: sc})
				if err != nil {
					t.Fatal(err)
				}
				if res.LSQ.Scaling != "colscale" || !slices.Equal(res.LSQ.ZeroColumns, zero) {
					t.Fatalf("scaling %q, zero columns %v; want colscale, %v", res.LSQ.Scaling, res.LSQ.ZeroColumns, zero)
				}
				checkResult(t, res, a, b, x, 0)
				if x[5] != 0 || x[9] != 0 {
					t.Errorf("x[5], x[9] = %g, %g, want exactly 0", x[5], x[9])
				}
				checkMinNorm(t, a, b, x, info)

				// Warm start: the zero columns' entries keep x0's values
				// and the others are the unique minimiser's.
				res, err = LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, Scaling: sc, X0: x0})
				if err != nil {
					t.Fatal(err)
				}
				checkResult(t, res, a, b, x, 0)
				if x[5] != 3 || x[9] != -2 {
					t.Errorf("warm start: x[5], x[9] = %g, %g, want x0's 3, -2", x[5], x[9])
				}
				want := slices.Clone(info.minNorm)
				want[5], want[9] = 3, -2
				checkMinNorm(t, a, b, x, svdInfo{sv: info.sv, rank: info.rank, minNorm: want})

				// Damped: the unique minimiser, against gonum's QR of
				// [A; λI]; its zero-column entries are 0.
				const lam = 0.1
				res, err = LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, Scaling: sc, X0: x0, Damp: lam})
				if err != nil {
					t.Fatal(err)
				}
				checkResult(t, res, a, b, x, lam)
				aa, bb := augmented(a, b, lam)
				checkAgainst(t, a, b, x, qrSolve(t, aa, bb), lam, 0, info.sv[0])
			})
		}
	}
}

// TestLSQZeroRHS: b = 0 (and x0 = 0) is solved by x = 0 at iteration 0,
// converged; x is overwritten.
func TestLSQZeroRHS(t *testing.T) {
	a, _ := randProblem(3, 20, 8, 1)
	for _, meth := range lsqMethods {
		for _, lam := range []float64{0, 0.5} {
			x := []float64{1, 2, 3, 4, 5, 6, 7, 8}
			rec := &historyRecorder{}
			res, err := LSQ(context.Background(), normedOp{denseOp{a}}, make([]float64, 20), x, LSQSettings{Method: meth, Damp: lam, Recorder: rec})
			if err != nil {
				t.Fatal(err)
			}
			if res.Status != Converged || res.Iterations != 0 || res.LSQ.StoppedBy != RuleResidual {
				t.Errorf("%v, λ=%g: %v by %q after %d iterations; want converged by residual at 0", meth, lam, res.Status, res.LSQ.StoppedBy, res.Iterations)
			}
			if floats.Norm(x, 2) != 0 || res.ResidualNorm != 0 || res.LSQ.NormalResidualNorm != 0 || res.RelResidual != 0 {
				t.Errorf("%v, λ=%g: x = %v, ‖r‖ %g, ‖g‖ %g, rel %g; want all zero", meth, lam, x, res.ResidualNorm, res.LSQ.NormalResidualNorm, res.RelResidual)
			}
			if len(rec.rows) != 1 || rec.rows[0].Iteration != 0 || len(rec.finished) != 1 {
				t.Errorf("%v: recorder got %d rows and %d finishes, want 1 and 1", meth, len(rec.rows), len(rec.finished))
			}
		}
	}
}

// TestLSQStops covers the ways to end without converging: the iteration
// cap, cancellation (seen within one iteration), a Recorder error and the
// time budget. None of them looks like success.
func TestLSQStops(t *testing.T) {
	a, b := randProblem(21, 60, 25, 3)
	errStop := errors.New("recorder says stop")
	for _, meth := range lsqMethods {
		t.Run(meth.String()+"/cap", func(t *testing.T) {
			x := make([]float64, 25)
			res, err := LSQ(context.Background(), denseOp{a}, b, x, LSQSettings{Method: meth, MaxIter: 3})
			if err != nil || res.Status != IterationLimit || res.Iterations != 3 || res.LSQ.StoppedBy != "" {
				t.Errorf("got %v by %q after %d, err %v; want iteration-limit after 3, nil", res.Status, res.LSQ.StoppedBy, res.Iterations, err)
			}
			g, r := gradient(a, b, x, 0)
			if res.ResidualNorm != floats.Norm(r, 2) && math.Abs(res.ResidualNorm-floats.Norm(r, 2)) > 1e-12*floats.Norm(b, 2) {
				t.Errorf("ResidualNorm %g is not the true ‖b − A·x‖ %g", res.ResidualNorm, floats.Norm(r, 2))
			}
			_ = g
		})
		t.Run(meth.String()+"/cancel", func(t *testing.T) {
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			rec := &historyRecorder{onRecord: func(p Progress) error {
				if p.Iteration == 4 {
					cancel()
				}
				return nil
			}}
			x := make([]float64, 25)
			res, err := LSQ(ctx, denseOp{a}, b, x, LSQSettings{Method: meth, Recorder: rec})
			if !errors.Is(err, context.Canceled) || res.Status != Cancelled || res.Iterations != 4 {
				t.Errorf("got %v after %d, err %v; want cancelled after 4, context.Canceled", res.Status, res.Iterations, err)
			}
			if len(rec.finished) != 1 || rec.finished[0].Status != Cancelled {
				t.Errorf("Finish calls %d", len(rec.finished))
			}
		})
		t.Run(meth.String()+"/recorder-error", func(t *testing.T) {
			rec := &historyRecorder{onRecord: func(p Progress) error {
				if p.Iteration == 2 {
					return errStop
				}
				return nil
			}}
			x := make([]float64, 25)
			res, err := LSQ(context.Background(), denseOp{a}, b, x, LSQSettings{Method: meth, Recorder: rec})
			if err != errStop || res.Status != Cancelled || res.Iterations != 2 {
				t.Errorf("got %v after %d, err %v; want cancelled after 2, %v", res.Status, res.Iterations, err, errStop)
			}
		})
		t.Run(meth.String()+"/time", func(t *testing.T) {
			x := make([]float64, 25)
			res, err := LSQ(context.Background(), denseOp{a}, b, x, LSQSettings{Method: meth, TimeLimit: time.Nanosecond})
			if err != nil || res.Status != TimeLimit || res.Iterations != 0 {
				t.Errorf("got %v after %d, err %v; want time-limit after 0", res.Status, res.Iterations, err)
			}
		})
	}
}

// TestLSQHistory: the recorder sees iteration 0 with ‖b‖ and ‖Aᵀb‖ (x0 = 0),
// then one row per iteration; a capped run's last row holds the method's
// recursive estimates of ‖r‖ and ‖Aᵀr − λ²x‖ (Paige and Saunders 1982,
// §5.1), which match the true values the result recomputes from x, to 1e-9
// relative on this well-conditioned problem (the estimates are exact in
// exact arithmetic; the allowance is for their drift, common practice).
func TestLSQHistory(t *testing.T) {
	a, b := randProblem(31, 50, 20, 1)
	atb := make([]float64, 20)
	denseOp{a}.MulVecTrans(atb, b)
	x0 := make([]float64, 20)
	for j := range x0 {
		x0[j] = 0.1 * float64(j)
	}
	for _, meth := range lsqMethods {
		for _, c := range []struct {
			name string
			s    LSQSettings
		}{
			{"plain", LSQSettings{Scaling: ScaleNone}},
			{"scaled", LSQSettings{Scaling: ScaleColumns}},
			{"damped-warm", LSQSettings{Scaling: ScaleColumns, Damp: 2, X0: x0}},
		} {
			t.Run(meth.String()+"/"+c.name, func(t *testing.T) {
				for k := 1; k <= 12; k++ {
					rec := &historyRecorder{}
					s := c.s
					s.Method, s.MaxIter, s.Recorder = meth, k, rec
					x := make([]float64, 20)
					res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, s)
					if err != nil || res.Status != IterationLimit {
						t.Fatalf("k=%d: %v, %v", k, res.Status, err)
					}
					if len(rec.rows) != k+1 || len(rec.finished) != 1 {
						t.Fatalf("k=%d: %d rows, %d finishes", k, len(rec.rows), len(rec.finished))
					}
					// Two per iteration, Aᵀ·r0 (and A·x0), two for the
					// final true state.
					if want := 2*k + 1 + 2 + map[bool]int{true: 1}[c.s.X0 != nil]; res.Products != want || rec.finished[0].Products != want {
						t.Errorf("k=%d: %d products (Finish: %d), want %d", k, res.Products, rec.finished[0].Products, want)
					}
					for i, p := range rec.rows {
						if p.Iteration != i {
							t.Fatalf("row %d has iteration %d", i, p.Iteration)
						}
					}
					if c.s.X0 == nil {
						r0 := rec.rows[0]
						if r0.ResidualNorm != floats.Norm(b, 2) || math.Abs(r0.NormalResidualNorm-floats.Norm(atb, 2)) > 1e-12*floats.Norm(atb, 2) {
							t.Errorf("row 0: ‖r‖ %g, ‖Aᵀr‖ %g; want ‖b‖ %g, ‖Aᵀb‖ %g", r0.ResidualNorm, r0.NormalResidualNorm, floats.Norm(b, 2), floats.Norm(atb, 2))
						}
					}
					last := rec.rows[k]
					if math.Abs(last.ResidualNorm-res.ResidualNorm) > 1e-9*res.ResidualNorm ||
						math.Abs(last.NormalResidualNorm-res.LSQ.NormalResidualNorm) > 1e-9*res.LSQ.NormalResidualNorm {
						t.Errorf("k=%d: estimates ‖r‖ %.12g, ‖g‖ %.12g; true %.12g, %.12g", k,
							last.ResidualNorm, last.NormalResidualNorm, res.ResidualNorm, res.LSQ.NormalResidualNorm)
					}
					if rel := last.ResidualNorm / floats.Norm(b, 2); last.RelResidual != rel {
						t.Errorf("RelResidual %g, want %g", last.RelResidual, rel)
					}
				}
			})
		}
	}
}

// TestLSQWarmStart: a warm start reaches the same minimiser (within the
// bound of checkAgainst), in fewer iterations from a good guess, and never
// modifies X0; x may be X0 itself.
func TestLSQWarmStart(t *testing.T) {
	a, b := randProblem(41, 70, 30, 2)
	info := svdSolve(t, a, b)
	for _, meth := range lsqMethods {
		for _, lam := range []float64{0, 0.5} {
			t.Run(meth.String()+"/"+map[bool]string{true: "damped", false: "undamped"}[lam > 0], func(t *testing.T) {
				aa, bb := augmented(a, b, lam)
				ref := qrSolve(t, aa, bb)
				x := make([]float64, 30)
				cold, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, Damp: lam})
				if err != nil {
					t.Fatal(err)
				}
				x0 := slices.Clone(ref)
				for j := range x0 {
					x0[j] *= 1 + 1e-3*float64(j%3-1)
				}
				keep := slices.Clone(x0)
				warm, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, Damp: lam, X0: x0})
				if err != nil {
					t.Fatal(err)
				}
				checkResult(t, warm, a, b, x, lam)
				checkAgainst(t, a, b, x, ref, lam, info.sv[len(info.sv)-1], info.sv[0])
				if !slices.Equal(x0, keep) {
					t.Error("X0 was modified")
				}
				if warm.Iterations >= cold.Iterations {
					t.Errorf("warm start took %d iterations, cold %d", warm.Iterations, cold.Iterations)
				}
				// x aliasing X0.
				res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x0, LSQSettings{Method: meth, Damp: lam, X0: x0})
				if err != nil {
					t.Fatal(err)
				}
				checkResult(t, res, a, b, x0, lam)
				checkAgainst(t, a, b, x0, ref, lam, info.sv[len(info.sv)-1], info.sv[0])
			})
		}
	}
}

// TestLSQSettingsEcho: the zero settings get the documented defaults, and
// the result says what was used.
func TestLSQSettingsEcho(t *testing.T) {
	a, b := randProblem(51, 30, 12, 1)
	cases := []struct {
		name    string
		op      TransOperator
		m, n    int
		s       LSQSettings
		want    LSQSettings
		scaling string
	}{
		{"tall", normedOp{denseOp{a}}, 30, 12, LSQSettings{},
			LSQSettings{ATol: 1e-8, BTol: 1e-8, MaxIter: 120, Scaling: ScaleColumns, Method: LSQR}, "colscale"},
		{"tall-no-norms", denseOp{a}, 30, 12, LSQSettings{},
			LSQSettings{ATol: 1e-8, BTol: 1e-8, MaxIter: 120, Scaling: ScaleNone, Method: LSQR}, "none"},
		{"wide", normedOp{denseOp{mat.DenseCopyOf(a.T())}}, 12, 30, LSQSettings{},
			LSQSettings{ATol: 1e-8, BTol: 1e-8, MaxIter: 120, Scaling: ScaleNone, Method: LSQR}, "none"},
		{"wide-damped", normedOp{denseOp{mat.DenseCopyOf(a.T())}}, 12, 30, LSQSettings{Damp: 1, Method: CGLS},
			LSQSettings{Damp: 1, ATol: 1e-8, BTol: 1e-8, MaxIter: 300, Scaling: ScaleNone, Method: CGLS}, "none"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			bb := b
			if c.m != 30 {
				bb = b[:c.m]
			}
			res, err := LSQ(context.Background(), c.op, bb, make([]float64, c.n), c.s)
			if err != nil {
				t.Fatal(err)
			}
			if got := res.LSQ.Settings; got.Damp != c.want.Damp || got.ATol != c.want.ATol || got.BTol != c.want.BTol ||
				got.MaxIter != c.want.MaxIter || got.Scaling != c.want.Scaling || got.Method != c.want.Method {
				t.Errorf("settings %+v, want %+v", res.LSQ.Settings, c.want)
			}
			if res.LSQ.Scaling != c.scaling || res.Method != c.want.Method.String() {
				t.Errorf("result names %q, %q", res.Method, res.LSQ.Scaling)
			}
		})
	}
	// Column scaling asked of an operator that cannot give column norms.
	x := []float64{7, 7, 7, 7, 7, 7, 7, 7, 7, 7, 7, 7}
	if _, err := LSQ(context.Background(), denseOp{a}, b, x, LSQSettings{Scaling: ScaleColumns}); err != ErrNoColumnNorms {
		t.Errorf("err %v, want ErrNoColumnNorms", err)
	}
}

// nanOp turns a product into NaN after a few calls.
type nanOp struct {
	denseOp
	calls *int
}

func (o nanOp) MulVec(dst, x []float64) {
	o.denseOp.MulVec(dst, x)
	if *o.calls++; *o.calls > 3 {
		dst[0] = math.NaN()
	}
}

// TestLSQBreakdown: a NaN from the operator ends the solve with status
// Breakdown and a *BreakdownError wrapping ErrNotFinite.
func TestLSQBreakdown(t *testing.T) {
	a, b := randProblem(61, 30, 10, 1)
	for _, meth := range lsqMethods {
		calls := 0
		x := make([]float64, 10)
		res, err := LSQ(context.Background(), nanOp{denseOp{a}, &calls}, b, x, LSQSettings{Method: meth})
		var be *BreakdownError
		if res.Status != Breakdown || !errors.Is(err, ErrNotFinite) || !errors.As(err, &be) || be.Iteration < 1 {
			t.Errorf("%v: status %v, err %v; want breakdown with ErrNotFinite at iteration ≥ 1", meth, res.Status, err)
		}
	}
}

// TestLSQPanics: wrong lengths and invalid settings are programmer mistakes.
func TestLSQPanics(t *testing.T) {
	a, b := randProblem(71, 10, 4, 1)
	a4, sq := randProblem(72, 4, 4, 1)
	cases := []struct {
		name string
		b, x []float64
		s    LSQSettings
	}{
		{"short b", b[:9], make([]float64, 4), LSQSettings{}},
		{"long x", b, make([]float64, 5), LSQSettings{}},
		{"short X0", b, make([]float64, 4), LSQSettings{X0: make([]float64, 3)}},
		{"negative damp", b, make([]float64, 4), LSQSettings{Damp: -1}},
		{"NaN atol", b, make([]float64, 4), LSQSettings{ATol: math.NaN()}},
		{"negative MaxIter", b, make([]float64, 4), LSQSettings{MaxIter: -1}},
		{"unknown method", b, make([]float64, 4), LSQSettings{Method: 9}},
		{"unknown scaling", b, make([]float64, 4), LSQSettings{Scaling: 9}},
		{"x is b", sq[:4], sq[:4], LSQSettings{}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			defer func() {
				msg, _ := recover().(string)
				if !strings.HasPrefix(msg, "krylov: ") {
					t.Errorf("panic %q, want one prefixed \"krylov: \"", msg)
				}
			}()
			var op TransOperator = denseOp{a}
			if len(c.b) == 4 {
				op = denseOp{a4}
			}
			LSQ(context.Background(), op, c.b, c.x, c.s)
		})
	}
}

// TestLSQAllocs: the iterations allocate nothing: a run of 40 iterations
// allocates exactly as much as a run of 4 (set-up only).
func TestLSQAllocs(t *testing.T) {
	if raceBuild {
		t.Skip("the race detector's runtime allocates on its own; allocation counts mean nothing under -race")
	}
	a, b := randProblem(81, 200, 100, 3)
	op := normedOp{denseOp{a}}
	x := make([]float64, 100)
	for _, meth := range lsqMethods {
		for _, lam := range []float64{0, 0.1} {
			run := func(k int) float64 {
				return testing.AllocsPerRun(3, func() {
					res, _ := LSQ(context.Background(), op, b, x, LSQSettings{Method: meth, MaxIter: k, Damp: lam, ATol: 1e-20, BTol: 1e-20})
					if res.Iterations != k {
						t.Fatalf("ran %d iterations, want %d", res.Iterations, k)
					}
				})
			}
			if few, many := run(4), run(40); few != many {
				t.Errorf("%v, λ=%g: %v allocations for 4 iterations, %v for 40", meth, lam, few, many)
			}
		}
	}
}

// illConditioned returns an m×n matrix U·diag(σ)·Vᵀ with singular values
// spread geometrically from 1 down to 1/κ, U and V the orthogonal factors of
// gonum QR factorizations of random matrices (the construction of Golub and
// Van Loan, 4th ed., §2.4, used as a test generator; fixed seed).
func illConditioned(seed uint64, m, n int, kappa float64) *mat.Dense {
	rng := rand.New(rand.NewPCG(seed, 3))
	orth := func(k int) *mat.Dense {
		g := mat.NewDense(k, k, nil)
		for i := range k {
			for j := range k {
				g.Set(i, j, rng.NormFloat64())
			}
		}
		var qr mat.QR
		qr.Factorize(g)
		var q mat.Dense
		qr.QTo(&q)
		return &q
	}
	u, v := orth(m), orth(n)
	s := mat.NewDense(m, n, nil)
	for j := range n {
		s.Set(j, j, math.Pow(kappa, -float64(j)/float64(n-1)))
	}
	var a mat.Dense
	a.Product(u, s, v.T())
	return &a
}

// TestLSQStagnation: tolerances below what rounding allows on a matrix with
// κ = 1e10 never end in success: LSQR's estimates reach the rounding floor
// (Paige and Saunders 1982, §6) and the true check fails, so it stops as
// Stagnated; CGLS's recomputed normal residual carries more rounding than
// the floor test allows for, so it runs to the cap.
func TestLSQStagnation(t *testing.T) {
	a := illConditioned(5, 60, 30, 1e10)
	rng := rand.New(rand.NewPCG(6, 1))
	b := make([]float64, 60)
	for i := range b {
		b[i] = rng.NormFloat64()
	}
	for _, meth := range lsqMethods {
		x := make([]float64, 30)
		res, err := LSQ(context.Background(), normedOp{denseOp{a}}, b, x, LSQSettings{Method: meth, ATol: 1e-18, BTol: 1e-18, MaxIter: 5000})
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("%v: %v after %d of %d iterations, ‖g‖ %.3g, cond est. %.3g", meth, res.Status, res.Iterations, res.Settings.MaxIter, res.LSQ.NormalResidualNorm, res.LSQ.CondEstimate)
		want := map[LSQMethod]Status{LSQR: Stagnated, CGLS: IterationLimit}[meth]
		if res.Status != want || res.LSQ.StoppedBy != "" {
			t.Errorf("%v: %v by %q, want %v", meth, res.Status, res.LSQ.StoppedBy, want)
		}
	}
}
