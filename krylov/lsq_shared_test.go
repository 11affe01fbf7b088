package krylov

import (
	"bufio"
	"context"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
)

// lsqRef is one row of reference/lsq-numpy.tsv.
type lsqRef struct {
	file, rhs            string
	damp, cond           float64
	rank                 int
	normX, normR, normNR float64
	solution             string
}

func readLSQRefs(t *testing.T) []lsqRef {
	t.Helper()
	path := filepath.Join(shared.Reference(t), "lsq-numpy.tsv")
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var refs []lsqRef
	sc := bufio.NewScanner(f)
	header := true
	for line := 1; sc.Scan(); line++ {
		text := sc.Text()
		if strings.HasPrefix(text, "#") || text == "" {
			continue
		}
		if header { // file matrix rows cols rhs damp rank cond_2 norm_x norm_r norm_normal_residual solution_file
			header = false
			continue
		}
		fs := strings.Split(text, "\t")
		if len(fs) != 12 {
			t.Fatalf("%s:%d: %d fields, want 12", path, line, len(fs))
		}
		num := func(i int) float64 {
			v, err := strconv.ParseFloat(fs[i], 64)
			if err != nil {
				t.Fatalf("%s:%d: field %d: %v", path, line, i+1, err)
			}
			return v
		}
		refs = append(refs, lsqRef{file: fs[0], rhs: fs[4], damp: num(5), rank: int(num(6)), cond: num(7),
			normX: num(8), normR: num(9), normNR: num(10), solution: fs[11]})
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return refs
}

func findRef(refs []lsqRef, file, rhs string, damp float64) *lsqRef {
	for i := range refs {
		if r := &refs[i]; r.file == file && r.rhs == rhs && r.damp == damp {
			return r
		}
	}
	return nil
}

// sigmaMaxPower estimates σ_max(A) by the power method on AᵀA (Golub and
// Van Loan, 4th ed., §8.2.1), from below; enough iterations are run for the
// test's bounds, which only need it to a few digits.
func sigmaMaxPower(a TransOperator) float64 {
	m, n := a.Dims()
	v, u, w := make([]float64, n), make([]float64, m), make([]float64, n)
	for j := range v {
		v[j] = 1 / math.Sqrt(float64(n))
	}
	var lam float64
	for range 300 {
		a.MulVec(u, v)
		a.MulVecTrans(w, u)
		lam = floats.Norm(w, 2)
		for j := range v {
			v[j] = w[j] / lam
		}
	}
	return math.Sqrt(lam)
}

// TestLSQShared runs both methods on the collection's least-squares
// matrices of ../shared/matrices (kind least-squares in MANIFEST.tsv) with
// b = A·ones, the standard normal b of ../shared/reference/NAME_random_b.mtx
// and, where the collection ships one, its own b; damping 0 and 1e-2. Every
// one of these has a row in ../shared/reference/lsq-numpy.tsv with NumPy's
// LAPACK solution; a missing row or solution file fails the test. The
// checks:
//   - the stopping rule the result names holds, recomputed here (checkRule);
//   - the solution is within promiseBound, the error the stopping rule
//     allows, of NumPy's solution and of gonum's dense QR least-squares
//     solution of A (or of [A; λI]), each with its own rounding error
//     (refError); σ_max by the power method and σ_min = σ_max/cond_2 from
//     the reference table;
//   - ‖x‖ and ‖r‖ agree with NumPy's within the same bound
//     (|‖r‖ − ‖r_ref‖| ≤ ‖A·(x − x_ref)‖ ≤ σ_max·‖x − x_ref‖).
//
// A bound computed from the returned x's own gradient (‖g‖/σ²_min) holds
// for every x, right or wrong, since x − x* = (AᵀA + λ²I)⁻¹g exactly: it
// cannot fail. promiseBound instead starts from what the rule promises,
// with norms computed here, so a wrong x that claims convergence breaks it.
func TestLSQShared(t *testing.T) {
	refs := readLSQRefs(t)
	dir := shared.Matrices(t)
	for _, e := range shared.Manifest(t) {
		if e.Kind != "least-squares" || e.Rows < e.Cols {
			continue
		}
		t.Run(e.Name, func(t *testing.T) {
			csr, _, err := matrixio.ReadMatrixFile(e.Path(dir), nil)
			if err != nil {
				t.Fatal(err)
			}
			m, n := csr.Dims()
			if m != e.Rows || n != e.Cols {
				t.Fatalf("read %d×%d, manifest says %d×%d", m, n, e.Rows, e.Cols)
			}
			a := mat.DenseCopyOf(csr)
			// σ_max by the power method, σ_min from NumPy's 2-norm condition
			// number in the reference table (from the singular values).
			ref0 := findRef(refs, e.File, "ones", 0)
			if ref0 == nil || ref0.rank != n {
				t.Fatalf("reference table lacks a full-rank row for %s, b = A·ones", e.File)
			}
			smax := sigmaMaxPower(csr)
			smin := smax / ref0.cond
			ones := make([]float64, n)
			for j := range ones {
				ones[j] = 1
			}
			names := []string{"ones", "random"}
			rhs := [][]float64{make([]float64, m), nil}
			csr.MulVec(rhs[0], ones)
			rb, _, err := matrixio.ReadVectorFile(filepath.Join(shared.Reference(t), e.Name+"_random_b.mtx"), nil)
			if err != nil {
				t.Fatalf("the random right-hand side of the reference table: %v", err)
			}
			if len(rb) != m {
				t.Fatalf("%s_random_b.mtx has %d entries for %d rows", e.Name, len(rb), m)
			}
			rhs[1] = rb
			if e.RHSFile != "" {
				b, _, err := matrixio.ReadVectorFile(filepath.Join(dir, e.RHSFile), nil)
				if err != nil {
					t.Fatal(err)
				}
				names = append(names, "shipped")
				rhs = append(rhs, b)
			}
			// gonum's QR least-squares solutions, one factorization per
			// damping for all right-hand sides.
			xQR := map[float64][][]float64{}
			for _, lam := range []float64{0, 0.01} {
				aa, _ := augmented(a, rhs[0], lam)
				bb := mat.NewDense(m+n, len(rhs), nil)
				for k, b := range rhs {
					for i, v := range b {
						bb.Set(i, k, v)
					}
				}
				var qr mat.QR
				qr.Factorize(aa)
				var xx mat.Dense
				if err := qr.SolveTo(&xx, false, bb); err != nil {
					t.Fatalf("gonum QR: %v", err)
				}
				for k := range rhs {
					xQR[lam] = append(xQR[lam], mat.Col(nil, k, &xx))
				}
			}
			for k, name := range names {
				b := rhs[k]
				for _, lam := range []float64{0, 0.01} {
					xQR := xQR[lam][k]
					ref := findRef(refs, e.File, name, lam)
					if ref == nil || ref.solution == "" {
						t.Errorf("lsq-numpy.tsv has no row with a solution for %s, b %s, damp %g", e.File, name, lam)
						continue
					}
					xNP, _, err := matrixio.ReadVectorFile(filepath.Join(shared.Reference(t), ref.solution), nil)
					if err != nil {
						t.Fatal(err)
					}
					for _, meth := range lsqMethods {
						t.Run(name+"/"+strconv.FormatFloat(lam, 'g', -1, 64)+"/"+meth.String(), func(t *testing.T) {
							x := make([]float64, n)
							// The random b makes illc1033 inconsistent with
							// κ² = 3.6·10⁸ undamped (the reference table's
							// cond_2): LSQR takes 3188 of the default 10·n =
							// 3200 iterations, and CGLS, which works with the
							// normal equations' recurrences and loses more to
							// rounding (Björck 1996, §7.4.1), needs more; the
							// cap is raised for every random b, the stopping
							// rules are the defaults.
							st := LSQSettings{Method: meth, Damp: lam}
							if name == "random" {
								st.MaxIter = 30 * n
							}
							res, err := LSQ(context.Background(), csr, b, x, st)
							if err != nil {
								t.Fatal(err)
							}
							t.Logf("%v by %s after %d iterations, ‖r‖ %.10g, ‖g‖ %.3g, ‖Ā‖ est. %.4g, cond est. %.4g",
								res.Status, res.LSQ.StoppedBy, res.Iterations, res.ResidualNorm, res.LSQ.NormalResidualNorm, res.LSQ.ANormEstimate, res.LSQ.CondEstimate)
							checkResult(t, res, a, b, x, lam)
							checkRule(t, res, csr, b, x, lam)
							pb := promiseBound(res, csr, b, xNP, lam, smin)
							for _, c := range []struct {
								name string
								ref  []float64
							}{{"gonum QR", xQR}, {"NumPy", xNP}} {
								re := refError(a, b, c.ref, lam, smin, smax)
								d := floats.Distance(x, c.ref, 2)
								t.Logf("‖x − x_%s‖ = %.3g, promise bound %.3g + reference error %.3g", c.name, d, pb, re)
								if d > pb+re {
									t.Errorf("‖x − x_%s‖ = %.3g > %.3g + %.3g (what %s's rule allows, and the reference's error)", c.name, d, pb, re, res.LSQ.StoppedBy)
								}
							}
							bound := pb + refError(a, b, xNP, lam, smin, smax)
							t.Logf("‖x‖ %.16g vs %.16g, ‖r‖ %.16g vs %.16g", res.LSQ.XNorm, ref.normX, res.ResidualNorm, ref.normR)
							if d := math.Abs(floats.Norm(x, 2) - ref.normX); d > bound {
								t.Errorf("‖x‖ = %.16g, NumPy %.16g: differ by %.3g > %.3g", floats.Norm(x, 2), ref.normX, d, bound)
							}
							_, r := gradient(a, b, x, lam)
							if d := math.Abs(floats.Norm(r, 2) - ref.normR); d > smax*bound {
								t.Errorf("‖r‖ = %.16g, NumPy %.16g: differ by %.3g > %.3g", floats.Norm(r, 2), ref.normR, d, smax*bound)
							}
						})
					}
				}
			}
		})
	}
}

// plainScale returns the column norms of a by a plain loop over its CSR
// arrays, and the column scaling D the result says was used: 1/√(‖a_j‖² +
// λ²) (1 for a zero column when λ = 0) for colscale, 1 for none.
func plainScale(res Result, a *sparse.CSR, lam float64) (norms, d []float64) {
	_, n := a.Dims()
	norms, d = make([]float64, n), make([]float64, n)
	for k, j := range a.ColIdx {
		norms[j] += a.Val[k] * a.Val[k]
	}
	for j := range norms {
		norms[j] = math.Sqrt(norms[j])
		d[j] = 1
		if res.LSQ.Scaling == "colscale" && (norms[j] > 0 || lam > 0) {
			d[j] = 1 / math.Sqrt(norms[j]*norms[j]+lam*lam)
		}
	}
	return norms, d
}

// promiseBound bounds ‖x − x*‖ by what the stopping rule that the result
// names promises (Paige and Saunders 1982, §6; the rules on the scaled,
// augmented Ā = [A·D; λD], r̄ = [b − A·x; −λx], z = D⁻¹x), with
// ‖Ā‖_F computed here (F; the methods' estimate ‖B_k‖_F stays below it in
// exact arithmetic, and where it passes it in floating point the larger is
// used) and σ̄_min = √(σ_min² + λ²), σ_min from the reference table:
//   - RuleResidual promises ‖r̄‖ ≤ ρ = BTol·‖b‖ + ATol·F·‖z‖. As r̄* is
//     orthogonal to the range of [A; λI], ‖r̄‖² = ‖r̄*‖² + ‖[A; λI]·(x −
//     x*)‖² (Björck 1996, §1.1.2), so ‖x − x*‖ ≤ ρ/σ̄_min. ‖z‖ is taken
//     at the reference solution, with 1% for the difference.
//   - RuleNormalResidual promises ‖D·g‖ ≤ ATol·F·‖r̄‖ for the gradient g =
//     Aᵀr − λ²x, so ‖g‖ ≤ ATol·F·‖r̄‖/min D_jj and ‖x − x*‖ = ‖(AᵀA +
//     λ²I)⁻¹g‖ ≤ ‖g‖/σ̄²_min. ‖r̄‖ is at most ‖b‖: both methods decrease
//     it from ‖b‖ at x0 = 0 (Paige and Saunders 1982, §3; Björck 1996,
//     §7.4.1).
//
// The bound is a priori: it does not use the returned x. Rounding in the
// final x adds far less than the 1% allowed.
func promiseBound(res Result, a *sparse.CSR, b, xRef []float64, lam, sigmaMin float64) float64 {
	norms, d := plainScale(res, a, lam)
	var f2, z2 float64
	minD := math.Inf(1)
	for j := range d {
		f2 += (norms[j]*norms[j] + lam*lam) * d[j] * d[j]
		z2 += (xRef[j] / d[j]) * (xRef[j] / d[j])
		minD = math.Min(minD, d[j])
	}
	f := math.Max(math.Sqrt(f2), res.LSQ.ANormEstimate)
	s := res.LSQ.Settings
	smin := math.Hypot(sigmaMin, lam)
	bn := floats.Norm(b, 2)
	switch res.LSQ.StoppedBy {
	case RuleResidual:
		return 1.01 * (s.BTol*bn + s.ATol*f*math.Sqrt(z2)) / smin
	case RuleNormalResidual:
		return 1.01 * s.ATol * f * bn / minD / (smin * smin)
	}
	return math.Inf(1) // checkRule has failed the test already
}

// refError bounds the error of a dense reference solution xRef computed by a
// backward-stable method (Householder QR, or the SVD behind LAPACK's gelsd):
// u·κ_LS·‖x*‖ up to a modest constant, with κ_LS = κ + κ²·‖r‖/(σ_max·‖x‖)
// (Golub and Van Loan, 4th ed., §5.3.7, §5.3.8 and §8.6); the constant 1e3
// covers the dimension factors of the backward error (common practice).
func refError(a *mat.Dense, b, xRef []float64, lam, sigmaMin, sigmaMax float64) float64 {
	_, r := gradient(a, b, xRef, lam)
	s2 := sigmaMin*sigmaMin + lam*lam
	kappa := math.Sqrt(sigmaMax*sigmaMax+lam*lam) / math.Sqrt(s2)
	xn := floats.Norm(xRef, 2)
	return 1e3 * 0x1p-53 * (kappa + kappa*kappa*floats.Norm(r, 2)/(sigmaMax*xn)) * xn
}

// checkRule recomputes the stopping rule that the result says was met, on
// the scaled, augmented problem (see lsqProblem.passes), with column norms
// computed here.
func checkRule(t *testing.T, res Result, a *sparse.CSR, b, x []float64, lam float64) {
	t.Helper()
	m, n := a.Dims()
	d := make([]float64, n)
	if res.LSQ.Scaling == "colscale" {
		a.ColumnNorms(d)
		for j, c := range d {
			d[j] = 1 / math.Sqrt(c*c+lam*lam)
			if c == 0 && lam == 0 {
				d[j] = 1
			}
		}
	} else {
		for j := range d {
			d[j] = 1
		}
	}
	r := make([]float64, m)
	a.MulVec(r, x)
	for i := range r {
		r[i] = b[i] - r[i]
	}
	g := make([]float64, n)
	a.MulVecTrans(g, r)
	var dg, z float64
	for j := range g {
		gj := d[j] * (g[j] - lam*lam*x[j])
		dg += gj * gj
		zj := x[j] / d[j]
		z += zj * zj
	}
	rbar := math.Hypot(floats.Norm(r, 2), lam*floats.Norm(x, 2))
	switch res.LSQ.StoppedBy {
	case RuleResidual:
		if lim := res.LSQ.Settings.BTol*floats.Norm(b, 2) + res.LSQ.Settings.ATol*res.LSQ.ANormEstimate*math.Sqrt(z); rbar > lim*(1+1e-10) {
			t.Errorf("residual rule: ‖r̄‖ = %.6g > %.6g", rbar, lim)
		}
	case RuleNormalResidual:
		if lim := res.LSQ.Settings.ATol * res.LSQ.ANormEstimate * rbar; math.Sqrt(dg) > lim*(1+1e-10) {
			t.Errorf("normal-residual rule: ‖Āᵀr̄‖ = %.6g > %.6g", math.Sqrt(dg), lim)
		}
	default:
		t.Errorf("StoppedBy %q", res.LSQ.StoppedBy)
	}
}

// TestLSQChem97Zt: Bates/Chem97Zt, 2541×31022, rank 2410 (reference table).
// As stored it is a wide problem: from x0 = 0 without scaling the methods
// reach the minimum-norm solution, compared with NumPy's (LAPACK gelsd,
// minimum norm) in ../shared/reference within the bound of checkMinNorm,
// with σ_r = σ_max/cond_2 from the table's cond_2 and σ_max by the power
// method; damped, it is the unique minimiser, within ‖g‖/λ² (σ_min(Ā) = λ
// for a wide A). Transposed (the design of the manifest's note, 31022×2541,
// rank deficient) the problem has many minimisers sharing one residual
// (Björck 1996, §1.1.1); with and without column scaling the methods find
// minimisers whose residual norms agree within ‖g‖/σ_r each (for any x,
// g = Aᵀr = AᵀA·(x* − x), so ‖A·(x − x*)‖ ≤ ‖g‖/σ_r, and ‖r‖ − ‖r*‖ is at
// most that), and for b = A·ones the residual is at most ‖g‖/σ_r. gonum's dense factorizations are not
// used here: a 2541×31022 dense SVD is too slow for a unit test.
func TestLSQChem97Zt(t *testing.T) {
	refs := readLSQRefs(t)
	dir := shared.Matrices(t)
	zt, _, err := matrixio.ReadMatrixFile(filepath.Join(dir, "Chem97Zt.mtx"), nil)
	if err != nil {
		t.Fatal(err)
	}
	m, n := zt.Dims()
	if m != 2541 || n != 31022 {
		t.Fatalf("Chem97Zt is %d×%d, want 2541×31022", m, n)
	}
	smax := sigmaMaxPower(zt)
	ones := make([]float64, n)
	for j := range ones {
		ones[j] = 1
	}
	b := make([]float64, m)
	zt.MulVec(b, ones)
	for _, lam := range []float64{0, 0.01} {
		ref := findRef(refs, "Chem97Zt.mtx", "ones", lam)
		if ref == nil {
			t.Fatalf("no reference row for ones, damp %g", lam)
		}
		xNP, _, err := matrixio.ReadVectorFile(filepath.Join(shared.Reference(t), ref.solution), nil)
		if err != nil {
			t.Fatal(err)
		}
		sr := smax / ref.cond // undamped: ratio of extreme nonzero singular values
		for _, meth := range lsqMethods {
			t.Run("wide/"+strconv.FormatFloat(lam, 'g', -1, 64)+"/"+meth.String(), func(t *testing.T) {
				x := make([]float64, n)
				res, err := LSQ(context.Background(), zt, b, x, LSQSettings{Method: meth, Damp: lam})
				if err != nil {
					t.Fatal(err)
				}
				t.Logf("%v by %s after %d iterations, ‖x‖ %.12g (NumPy %.12g), ‖r‖ %.3g, ‖g‖ %.3g",
					res.Status, res.LSQ.StoppedBy, res.Iterations, res.LSQ.XNorm, ref.normX, res.ResidualNorm, res.LSQ.NormalResidualNorm)
				if res.Status != Converged || res.LSQ.Scaling != "none" {
					t.Fatalf("%v with %s", res.Status, res.LSQ.Scaling)
				}
				checkRule(t, res, zt, b, x, lam)
				diff := floats.Distance(x, xNP, 2)
				var bound float64
				if lam == 0 {
					bound = res.LSQ.NormalResidualNorm/(sr*sr) + 1e3*0x1p-53*ref.cond*ref.normX
				} else {
					bound = res.LSQ.NormalResidualNorm/(lam*lam) + 1e3*0x1p-53*ref.cond*ref.cond*ref.normX
				}
				if diff > bound {
					t.Errorf("‖x − x_NumPy‖ = %.3g > %.3g", diff, bound)
				}
				if d := math.Abs(res.LSQ.XNorm - ref.normX); d > bound {
					t.Errorf("‖x‖ %.16g, NumPy %.16g", res.LSQ.XNorm, ref.normX)
				}
				if d := math.Abs(res.ResidualNorm - ref.normR); d > smax*bound {
					t.Errorf("‖r‖ %.16g, NumPy %.16g", res.ResidualNorm, ref.normR)
				}
			})
		}
	}

	// The transposed design.
	a := zt.Transpose()
	sr := smax / findRef(refs, "Chem97Zt.mtx", "ones", 0).cond
	bIn := make([]float64, n)
	for i := range bIn {
		bIn[i] = float64(i%7) - 3
	}
	bCon := make([]float64, n)
	oneM := make([]float64, m)
	for i := range oneM {
		oneM[i] = 1
	}
	a.MulVec(bCon, oneM)
	for _, c := range []struct {
		name string
		b    []float64
	}{{"inconsistent", bIn}, {"consistent", bCon}} {
		t.Run("tall/"+c.name, func(t *testing.T) {
			var norms []float64
			var bounds []float64
			for _, meth := range lsqMethods {
				for _, sc := range []Scaling{ScaleColumns, ScaleNone} {
					x := make([]float64, m)
					res, err := LSQ(context.Background(), a, c.b, x, LSQSettings{Method: meth, Scaling: sc})
					if err != nil {
						t.Fatal(err)
					}
					t.Logf("%v/%v: %v by %s after %d iterations, ‖r‖ %.12g, ‖g‖ %.3g", meth, sc, res.Status, res.LSQ.StoppedBy, res.Iterations, res.ResidualNorm, res.LSQ.NormalResidualNorm)
					if res.Status != Converged {
						t.Fatalf("%v/%v: %v", meth, sc, res.Status)
					}
					checkRule(t, res, a, c.b, x, 0)
					norms = append(norms, res.ResidualNorm)
					bounds = append(bounds, res.LSQ.NormalResidualNorm/sr)
				}
			}
			for i := range norms {
				if c.name == "consistent" {
					// r* = 0, so ‖r‖ = ‖A·(x − x*)‖ ≤ ‖g‖/σ_r.
					if norms[i] > bounds[i] {
						t.Errorf("run %d: ‖r‖ = %.3g > ‖g‖/σ_r = %.3g for a consistent system", i, norms[i], bounds[i])
					}
					continue
				}
				if d := math.Abs(norms[i] - norms[0]); d > bounds[i]+bounds[0] {
					t.Errorf("run %d: ‖r‖ %.16g differs from run 0's %.16g by %.3g > %.3g", i, norms[i], norms[0], d, bounds[i]+bounds[0])
				}
			}
		})
	}
}
