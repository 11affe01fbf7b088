package main

import (
	"math"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
)

// smallestSingularValue returns σ_min of a (rows ≥ cols) from gonum's SVD.
func smallestSingularValue(t *testing.T, a *sparse.CSR) float64 {
	t.Helper()
	d := mat.NewDense(a.Rows, a.Cols, nil)
	for i := 0; i < a.Rows; i++ {
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			d.Set(i, int(a.ColIdx[k]), a.Val[k])
		}
	}
	var svd mat.SVD
	if !svd.Factorize(d, mat.SVDNone) {
		t.Fatal("gonum SVD failed")
	}
	v := svd.Values(nil)
	return v[len(v)-1]
}

// lsq on the collection's least-squares matrices with their shipped
// right-hand sides matches NumPy's dense LAPACK solutions in
// ../shared/reference (lsq-numpy.tsv, *_shipped_damp*_x.mtx). The bound:
// with g = Aᵀr − λ²x the gradient, recomputed here from the x lsq wrote
// (plainGradient; lsq's normal_residual_norm must agree with it),
// (AᵀA + λ²I)(x* − x) = g, so
// ‖x − x*‖ ≤ ‖g‖/(σ_min² + λ²) (Björck, Numerical Methods for Least Squares
// Problems, §1.1), with σ_min from gonum's SVD; the reference itself is
// accurate to about κ₂²·ε relative (LAPACK gelsd is backward stable), which
// the 1e-9 slack covers for κ₂ ≤ 1.5e3.
func TestLSQSharedReference(t *testing.T) {
	ref := shared.Reference(t)
	cases := []struct {
		matrix, rhs, damp, solution string
	}{
		{"well1033.mtx", "well1033_b.mtx", "0", "well1033_shipped_damp0_x.mtx"},
		{"well1033.mtx", "well1033_b.mtx", "0.01", "well1033_shipped_damp0.01_x.mtx"},
		{"illc1850.mtx", "illc1850_b.mtx", "0", "illc1850_shipped_damp0_x.mtx"},
	}
	for _, c := range cases {
		t.Run(c.solution, func(t *testing.T) {
			dir := t.TempDir()
			out := filepath.Join(dir, "x.mtx")
			path := sharedMatrix(t, c.matrix)
			rep, stderr, code := runJSON(t, "lsq", path, "-b", sharedMatrix(t, c.rhs), "--damp", c.damp,
				"--atol", "1e-12", "--btol", "1e-12", "-o", out)
			if code != 0 || !rep.Converged {
				t.Fatalf("exit %d, status %s: %s", code, rep.Status, stderr)
			}
			if rep.ResidualNorm == nil || rep.NormalResidualNorm == nil {
				t.Fatal("JSON lacks residual_norm or normal_residual_norm")
			}
			x, _, err := matrixio.ReadVectorFile(out, nil)
			if err != nil {
				t.Fatal(err)
			}
			want, _, err := matrixio.ReadVectorFile(filepath.Join(ref, c.solution), nil)
			if err != nil {
				t.Fatal(err)
			}
			a, _, err := matrixio.ReadMatrixFile(path, nil)
			if err != nil {
				t.Fatal(err)
			}
			smin := smallestSingularValue(t, a)
			lambda := 0.0
			if c.damp != "0" {
				lambda = 0.01
			}
			diff := make([]float64, len(x))
			for i := range x {
				diff[i] = x[i] - want[i]
			}
			b, _, err := matrixio.ReadVectorFile(sharedMatrix(t, c.rhs), nil)
			if err != nil {
				t.Fatal(err)
			}
			g, r := plainGradient(a, b, x, lambda)
			// The report's norms are of the same x: they agree with the
			// recomputation up to the order of the sums (1e-9 relative to
			// the terms' scale ‖A‖_F·‖r‖ and ‖r‖, common practice).
			if d := math.Abs(float64(*rep.NormalResidualNorm) - norm2(g)); d > 1e-9*frobenius(a)*norm2(r) {
				t.Errorf("normal_residual_norm %g, recomputed %g", float64(*rep.NormalResidualNorm), norm2(g))
			}
			if d := math.Abs(float64(*rep.ResidualNorm) - norm2(r)); d > 1e-9*norm2(r)+1e-15*norm2(b) {
				t.Errorf("residual_norm %g, recomputed %g", float64(*rep.ResidualNorm), norm2(r))
			}
			bound := norm2(g)/(smin*smin+lambda*lambda) + 1e-9*norm2(want)
			if got := norm2(diff); got > bound {
				t.Errorf("‖x − x_ref‖ = %g > bound %g (‖x_ref‖ = %g)", got, bound, norm2(want))
			}
		})
	}
}

// plainGradient returns g = Aᵀ(b − A·x) − λ²x and r = b − A·x by plain
// loops over a's CSR arrays, independent of the code under test.
func plainGradient(a *sparse.CSR, b, x []float64, lambda float64) (g, r []float64) {
	r = append([]float64(nil), b...)
	g = make([]float64, a.Cols)
	for i := 0; i < a.Rows; i++ {
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			r[i] -= a.Val[k] * x[a.ColIdx[k]]
		}
	}
	for i := 0; i < a.Rows; i++ {
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			g[a.ColIdx[k]] += a.Val[k] * r[i]
		}
	}
	for j := range g {
		g[j] -= lambda * lambda * x[j]
	}
	return g, r
}

// frobenius returns ‖A‖_F.
func frobenius(a *sparse.CSR) float64 {
	var s float64
	for _, v := range a.Val {
		s += v * v
	}
	return math.Sqrt(s)
}

// lsq's exit statuses and messages.
func TestLSQExitStatus(t *testing.T) {
	cases := []struct {
		name string
		args []string
		code int
		want string
	}{
		{"iteration cap", []string{"lsq", sharedMatrix(t, "illc1850.mtx"), "--max-iter", "3"}, exitNotConverged, "iteration-limit"},
		{"negative damping", []string{"lsq", sharedMatrix(t, "well1033.mtx"), "--damp", "-1"}, exitUsage, "--damp"},
		{"bad scaling", []string{"lsq", sharedMatrix(t, "well1033.mtx"), "--precond", "ic0"}, exitUsage, "colscale"},
		{"bad method", []string{"lsq", sharedMatrix(t, "well1033.mtx"), "--method", "qr"}, exitUsage, "lsqr"},
		{"no matrix", []string{"lsq"}, exitUsage, "one matrix"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, stderr, code := runCLI(t, append(c.args, "--quiet")...)
			if code != c.code || !strings.Contains(stderr, c.want) {
				t.Errorf("exit %d (want %d), stderr %q (want %q)", code, c.code, stderr, c.want)
			}
		})
	}
}

// A consistent tall system b = A·1 with full column rank (well1850: rank
// 712 = cols per lsq-numpy.tsv) has the unique solution x = 1; with column
// scaling, CGLS and LSQR both get there.
func TestLSQConsistent(t *testing.T) {
	for _, method := range []string{"lsqr", "cgls"} {
		for _, scaling := range []string{"colscale", "none"} {
			t.Run(method+"/"+scaling, func(t *testing.T) {
				out := filepath.Join(t.TempDir(), "x.mtx")
				rep, stderr, code := runJSON(t, "lsq", sharedMatrix(t, "well1850.mtx"), "--method", method, "--precond", scaling, "-o", out)
				if code != 0 || rep.Method != method || rep.Preconditioner != scaling {
					t.Fatalf("exit %d, method %q, scaling %q: %s", code, rep.Method, rep.Preconditioner, stderr)
				}
				x, _, err := matrixio.ReadVectorFile(out, nil)
				if err != nil {
					t.Fatal(err)
				}
				// The error is recomputed from the written x: κ₂ = 111
				// (lsq-numpy.tsv) and the consistent-system rule with
				// btol = atol = 1e-8 give a relative error of about
				// κ·(atol + btol) ≈ 2e-6 at worst (Paige and Saunders
				// 1982, §6, from memory), so max |x_i − 1| ≤ 1e-5.
				worst := 0.0
				for _, v := range x {
					worst = math.Max(worst, math.Abs(v-1))
				}
				if len(x) != 712 || worst > 1e-5 {
					t.Errorf("%d entries, max |x_i − 1| = %g", len(x), worst)
				}
				// The report says the same.
				if rep.ErrorVsOnes == nil || float64(*rep.ErrorVsOnes) != worst {
					t.Errorf("error_vs_ones %v, recomputed %g", rep.ErrorVsOnes, worst)
				}
				if math.IsNaN(float64(*rep.NormalResidualNorm)) {
					t.Error("normal residual is NaN")
				}
			})
		}
	}
}
