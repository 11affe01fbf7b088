package stencil

import (
	"math"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
)

// dense copies a into a gonum dense matrix, reading the CSR arrays directly
// so that the check does not depend on the sparse package's own kernels.
func dense(a *sparse.CSR) *mat.Dense {
	d := mat.NewDense(a.Rows, a.Cols, nil)
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			d.Set(i, int(a.ColIdx[p]), a.Val[p])
		}
	}
	return d
}

// symDense returns a as a *mat.SymDense after checking that it is exactly
// symmetric entry by entry.
func symDense(t *testing.T, a *sparse.CSR) *mat.SymDense {
	t.Helper()
	d := dense(a)
	n := a.Rows
	s := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			if d.At(i, j) != d.At(j, i) {
				t.Fatalf("not symmetric: a(%d,%d) = %v, a(%d,%d) = %v", i, j, d.At(i, j), j, i, d.At(j, i))
			}
			s.SetSym(i, j, d.At(i, j))
		}
	}
	return s
}

// eigenvalues returns the ascending eigenvalues of a, from gonum's dense
// symmetric eigen-decomposition (mat.EigenSym, LAPACK dsyev).
func eigenvalues(t *testing.T, a *sparse.CSR) []float64 {
	t.Helper()
	var es mat.EigenSym
	if !es.Factorize(symDense(t, a), false) {
		t.Fatal("mat.EigenSym did not converge")
	}
	return es.Values(nil)
}

// sin2 is 4·sin²(pπ/(2(n+1))), the p-th eigenvalue of the n×n tridiagonal
// matrix tridiag(−1, 2, −1) (LeVeque, Finite Difference Methods for Ordinary
// and Partial Differential Equations, §2.10 for 1D, §3.4 for the 2D
// Laplacian, whose eigenvalues are the sums of two of these).
func sin2(p, n int) float64 {
	s := math.Sin(float64(p) * math.Pi / float64(2*(n+1)))
	return 4 * s * s
}

func compareSpectra(t *testing.T, got, want []float64) {
	t.Helper()
	sort.Float64s(want)
	if len(got) != len(want) {
		t.Fatalf("%d eigenvalues, want %d", len(got), len(want))
	}
	// Tolerance: a backward-stable symmetric eigensolver perturbs each
	// eigenvalue by O(n·ε·‖A‖) (Golub and Van Loan, Matrix Computations, 4th
	// ed., §8.1.2, Weyl/Wielandt–Hoffman bounds); ‖A‖ ≤ 2·diag here, and
	// 1e-12·max|λ| leaves a margin of ~50× over n·ε for these sizes.
	tol := 1e-12 * math.Abs(want[len(want)-1])
	for k := range got {
		if math.Abs(got[k]-want[k]) > tol {
			t.Fatalf("eigenvalue %d: EigenSym %v, analytic %v (tol %g)", k, got[k], want[k], tol)
		}
	}
}

func TestPoisson2DEigenvalues(t *testing.T) {
	for _, n := range []int{1, 2, 3, 7} {
		a := Poisson2D(n)
		// LeVeque §3.4: λ_pq = 4sin²(pπ/(2(n+1))) + 4sin²(qπ/(2(n+1))) for
		// the unscaled 5-point Laplacian, 1 ≤ p, q ≤ n.
		var want []float64
		for p := 1; p <= n; p++ {
			for q := 1; q <= n; q++ {
				want = append(want, sin2(p, n)+sin2(q, n))
			}
		}
		compareSpectra(t, eigenvalues(t, a), want)
	}
}

func TestPoisson3DEigenvalues(t *testing.T) {
	for _, n := range []int{1, 2, 4} {
		a := Poisson3D(n)
		// LeVeque §3.4 carried to three dimensions: one sin² term per axis.
		var want []float64
		for p := 1; p <= n; p++ {
			for q := 1; q <= n; q++ {
				for r := 1; r <= n; r++ {
					want = append(want, sin2(p, n)+sin2(q, n)+sin2(r, n))
				}
			}
		}
		compareSpectra(t, eigenvalues(t, a), want)
	}
}

func TestAnisotropic3DEigenvalues(t *testing.T) {
	const n = 4
	kx, ky, kz := 1.0, 1e-2, 1e-4
	a := Anisotropic3D(n, kx, ky, kz)
	// Separable operator: the eigenvalues are weighted sums of the 1D ones
	// (LeVeque §3.4 with a coefficient per axis).
	var want []float64
	for p := 1; p <= n; p++ {
		for q := 1; q <= n; q++ {
			for r := 1; r <= n; r++ {
				want = append(want, kx*sin2(p, n)+ky*sin2(q, n)+kz*sin2(r, n))
			}
		}
	}
	compareSpectra(t, eigenvalues(t, a), want)
}

func TestStencil27Eigenvalues(t *testing.T) {
	for _, n := range []int{1, 2, 4} {
		a := Stencil27(n)
		// A = 27·I − T⊗T⊗T with T = tridiag(1, 1, 1), whose eigenvalues are
		// 1 + 2cos(kπ/(n+1)); the eigenvalues of a Kronecker product are the
		// products of the factors' eigenvalues (Horn and Johnson, Topics in
		// Matrix Analysis, Theorem 4.2.12).
		mu := func(k int) float64 { return 1 + 2*math.Cos(float64(k)*math.Pi/float64(n+1)) }
		var want []float64
		for p := 1; p <= n; p++ {
			for q := 1; q <= n; q++ {
				for r := 1; r <= n; r++ {
					want = append(want, 27-mu(p)*mu(q)*mu(r))
				}
			}
		}
		compareSpectra(t, eigenvalues(t, a), want)
	}
}

func TestJump3DPositiveDefinite(t *testing.T) {
	for _, n := range []int{1, 3, 4, 5} {
		a := Jump3D(n, 1e4)
		// gonum's dense Cholesky succeeds exactly when the matrix is SPD
		// (Golub and Van Loan §4.2).
		var ch mat.Cholesky
		if !ch.Factorize(symDense(t, a)) {
			t.Fatalf("n=%d: mat.Cholesky refused Jump3D: not positive definite", n)
		}
		// Both coefficients appear when the grid has at least two points per
		// side, and faces between blocks carry the harmonic mean.
		hm := 2 * 1e4 / (1 + 1e4)
		seen := map[float64]bool{}
		for _, v := range a.Val {
			if v < 0 {
				seen[-v] = true
			}
		}
		if n >= 2 && (!seen[1] || !seen[1e4] || !seen[hm]) {
			t.Errorf("n=%d: off-diagonal magnitudes %v, want 1, 1e4 and the harmonic mean %v", n, seen, hm)
		}
	}
}

// TestStructure checks the sizes, the CSR invariants, exact symmetry, the
// diagonal and the zero row sums of interior rows for each problem.
func TestStructure(t *testing.T) {
	const n = 6
	tests := []struct {
		name      string
		a         *sparse.CSR
		rows, nnz int
		diag      float64
		zeroSum   bool // interior rows of a pure Laplacian sum to zero
	}{
		{"poisson2d", Poisson2D(n), n * n, 5*n*n - 4*n, 4, true},
		{"poisson3d", Poisson3D(n), n * n * n, 7*n*n*n - 6*n*n, 6, true},
		// 27-point: each axis contributes 3n−2 in-range (point, offset)
		// pairs, so there are (3n−2)³ entries.
		{"stencil27", Stencil27(n), n * n * n, (3*n - 2) * (3*n - 2) * (3*n - 2), 26, true},
		{"anisotropic3d", Anisotropic3D(n, 1, 1e-2, 1e-4), n * n * n, 7*n*n*n - 6*n*n, 2 * (1 + 1e-2 + 1e-4), true},
		{"jump3d", Jump3D(n, 10), n * n * n, 7*n*n*n - 6*n*n, math.NaN(), true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			a := tc.a
			if err := a.Validate(); err != nil {
				t.Fatal(err)
			}
			if a.Rows != tc.rows || a.Cols != tc.rows || a.NNZ() != tc.nnz {
				t.Fatalf("%d×%d with %d entries, want %d×%d with %d", a.Rows, a.Cols, a.NNZ(), tc.rows, tc.rows, tc.nnz)
			}
			d := dense(a)
			for i := 0; i < a.Rows; i++ {
				if !math.IsNaN(tc.diag) && d.At(i, i) != tc.diag {
					t.Fatalf("a(%d,%d) = %v, want %v", i, i, d.At(i, i), tc.diag)
				}
				for j := 0; j < i; j++ {
					if d.At(i, j) != d.At(j, i) {
						t.Fatalf("a(%d,%d) = %v but a(%d,%d) = %v", i, j, d.At(i, j), j, i, d.At(j, i))
					}
				}
			}
			// A row whose stencil lies wholly inside the grid sums to zero for
			// a Laplacian-type operator (constants are in its null space
			// without boundary conditions); a boundary row sums to > 0.
			b := Ones(a)
			full := 0
			for i := 0; i < a.Rows; i++ {
				if interior(i, n, tc.rows) {
					full++
					// Sums of a few exactly representable numbers in
					// Jump3D's harmonic means: a few ulps of the diagonal.
					if math.Abs(b[i]) > 1e-12*math.Abs(d.At(i, i)) {
						t.Fatalf("interior row %d sums to %v, want 0", i, b[i])
					}
				} else if b[i] <= 0 {
					t.Fatalf("boundary row %d sums to %v, want > 0", i, b[i])
				}
			}
			if full == 0 {
				t.Fatal("no interior rows checked")
			}
		})
	}
}

// interior reports whether grid point i (of a 2D or 3D grid of side n) has
// all its neighbours inside the grid.
func interior(i, n, rows int) bool {
	in := func(c int) bool { return c > 0 && c < n-1 }
	x, y := i%n, (i/n)%n
	if rows == n*n {
		return in(x) && in(y)
	}
	return in(x) && in(y) && in(i/(n*n))
}

// TestOnesIsProduct checks Ones against gonum's dense product A·1.
func TestOnesIsProduct(t *testing.T) {
	a := Jump3D(5, 1e4)
	ones := make([]float64, a.Cols)
	for i := range ones {
		ones[i] = 1
	}
	var want mat.VecDense
	want.MulVec(dense(a), mat.NewVecDense(len(ones), ones))
	got := Ones(a)
	for i := range got {
		// Dense MulVec adds the zeros too and may order the sum differently:
		// allow a few ulps of the row's largest entry.
		if math.Abs(got[i]-want.AtVec(i)) > 1e-11 {
			t.Fatalf("b[%d] = %v, dense A·1 = %v", i, got[i], want.AtVec(i))
		}
	}
}

// TestDeterministic checks that the parallel build gives the same arrays at
// every worker count.
func TestDeterministic(t *testing.T) {
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(0))
	runtime.GOMAXPROCS(1)
	ref := Jump3D(17, 1e4)
	for _, w := range []int{2, 3, 7} {
		runtime.GOMAXPROCS(w)
		a := Jump3D(17, 1e4)
		for p := range ref.Val {
			if a.ColIdx[p] != ref.ColIdx[p] || math.Float64bits(a.Val[p]) != math.Float64bits(ref.Val[p]) {
				t.Fatalf("workers=%d: entry %d differs", w, p)
			}
		}
		for i := range ref.RowPtr {
			if a.RowPtr[i] != ref.RowPtr[i] {
				t.Fatalf("workers=%d: row pointer %d differs", w, i)
			}
		}
	}
}

func TestGenerate(t *testing.T) {
	for _, name := range Names() {
		a, err := Generate(name, 3)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if err := a.Validate(); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
	}
	for _, tc := range []struct {
		name string
		n    int
		want string
	}{
		{"poisson4d", 3, "unknown problem"},
		{"poisson3d", 0, "at least 1"},
		{"poisson3d", 1291, "more than"},
		{"poisson2d", 46341, "more than"},
	} {
		_, err := Generate(tc.name, tc.n)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("Generate(%q, %d) error %v, want one containing %q", tc.name, tc.n, err, tc.want)
		}
	}
}

func TestPanics(t *testing.T) {
	for name, f := range map[string]func(){
		"side 0":        func() { Poisson3D(0) },
		"negative kx":   func() { Anisotropic3D(3, -1, 1, 1) },
		"infinite kz":   func() { Anisotropic3D(3, 1, 1, math.Inf(1)) },
		"NaN contrast":  func() { Jump3D(3, math.NaN()) },
		"too many rows": func() { Poisson3D(1291) },
	} {
		func() {
			defer func() {
				r := recover()
				if s, ok := r.(string); !ok || !strings.HasPrefix(s, "stencil: ") {
					t.Errorf("%s: recovered %v, want a panic beginning \"stencil: \"", name, r)
				}
			}()
			f()
		}()
	}
}

func BenchmarkBuild(b *testing.B) {
	for _, n := range []int{40, 100, 200} {
		b.Run("poisson3d/"+strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				Poisson3D(n)
			}
		})
	}
}
