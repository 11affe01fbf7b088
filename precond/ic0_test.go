package precond

import (
	"errors"
	"math"
	"math/rand/v2"
	"sync"
	"testing"

	"github.com/residua/residua/sparse"
	"gonum.org/v1/gonum/mat"
)

// tridiag returns the SPD tridiagonal matrix with diagonal d and
// off-diagonal e.
func tridiag(d, e []float64) *sparse.CSR {
	n := len(d)
	a := make([][]float64, n)
	for i := range a {
		a[i] = make([]float64, n)
		a[i][i] = d[i]
		if i > 0 {
			a[i][i-1], a[i-1][i] = e[i-1], e[i-1]
		}
	}
	return csrFromDense(a)
}

// kershaw is D. S. Kershaw's 4×4 SPD matrix on which incomplete Cholesky
// meets a negative pivot (J. Comput. Phys. 26, 1978; values from memory,
// checked SPD below with gonum's dense Cholesky).
func kershaw() *sparse.CSR {
	return csrFromDense([][]float64{
		{3, -2, 0, 2},
		{-2, 3, -2, 0},
		{0, -2, 3, -2},
		{2, 0, -2, 3},
	})
}

func TestIC0NoFillEqualsCholesky(t *testing.T) {
	// When the Cholesky factor of A has no entry outside the pattern of A's
	// lower triangle, IC(0) drops nothing and performs exactly the
	// Cholesky recurrences, so the factors agree up to rounding. A
	// tridiagonal matrix is such a case: the Cholesky factor of a band
	// matrix keeps its lower bandwidth (Golub and Van Loan, 4th ed., §4.3.5),
	// here 1, and every entry in the band is in A's pattern.
	rng := rand.New(rand.NewPCG(3, 4))
	n := 60
	d, e := make([]float64, n), make([]float64, n-1)
	for i := range d {
		d[i] = 2.5 + rng.Float64()
	}
	for i := range e {
		e[i] = rng.Float64()*2 - 1
	}
	ones, minus := make([]float64, 40), make([]float64, 39)
	for i := range ones {
		ones[i] = 2
	}
	for i := range minus {
		minus[i] = -1
	}
	for _, tc := range []struct {
		name string
		a    *sparse.CSR
	}{
		{"laplacian-1d", tridiag(ones, minus)},
		{"random-tridiagonal", tridiag(d, e)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := NewIC0(tc.a, IC0Options{})
			if err != nil {
				t.Fatal(err)
			}
			if m.Shift() != 0 || m.Tries() != 1 {
				t.Errorf("shift %g after %d tries, want 0 after 1", m.Shift(), m.Tries())
			}
			var chol mat.Cholesky
			if !chol.Factorize(mat.NewSymDense(tc.a.Rows, dense(tc.a).RawMatrix().Data)) {
				t.Fatal("gonum's Cholesky failed on an SPD matrix")
			}
			var want mat.TriDense
			chol.LTo(&want)
			got := m.cholLower()
			// The two compute the same recurrences in a different order;
			// a few ulps relative to the entries' size (≤ 3.5) bound the
			// difference on these well-conditioned matrices.
			for i := 0; i < tc.a.Rows; i++ {
				for j := 0; j <= i; j++ {
					if g, w := got.At(i, j), want.At(i, j); math.Abs(g-w) > 1e-14*4 {
						t.Fatalf("L[%d][%d] = %.17g, gonum's Cholesky gives %.17g", i, j, g, w)
					}
				}
			}
		})
	}
}

func TestIC0MatchesAOnPattern(t *testing.T) {
	// The defining property of IC(0) (Meijerink and van der Vorst, 1977;
	// Saad, 2nd ed., §10.3.2, Proposition 10.4 for ILU(0)): the product of
	// the factors equals A on A's pattern; it differs from A only where A
	// is zero.
	for _, tc := range []struct {
		name string
		a    *sparse.CSR
	}{
		{"poisson-2d-9x7", laplace(9, 7, 1)},
		{"poisson-3d-4x5x3", laplace(4, 5, 3)},
		{"random-spd", randomSPD(80, 6, 7)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := NewIC0(tc.a, IC0Options{})
			if err != nil {
				t.Fatal(err)
			}
			l := m.cholLower()
			var llt mat.Dense
			llt.Mul(l, l.T())
			ad := dense(tc.a)
			differs := 0
			for i := 0; i < tc.a.Rows; i++ {
				for j := 0; j < tc.a.Cols; j++ {
					a, p := ad.At(i, j), llt.At(i, j)
					if a != 0 {
						// Each entry is a short sum of products of
						// entries of size ≲ max|a_ij|; 1e-13 relative
						// leaves room for its rounding.
						if math.Abs(a-p) > 1e-13*(1+math.Abs(a)) {
							t.Fatalf("(L·Lᵀ)[%d][%d] = %.17g, A has %.17g", i, j, p, a)
						}
					} else if p != 0 {
						differs++
					}
				}
			}
			if tc.name != "random-spd" && differs == 0 {
				t.Error("L·Lᵀ equals A everywhere: no fill was dropped, the test matrix is too easy")
			}
		})
	}
}

func TestIC0PreconditionInvertsFactors(t *testing.T) {
	// Precondition must return z with L·(Lᵀ·z) = r, L the Cholesky-like
	// factor. Checked by multiplying back with gonum's dense products.
	for _, tc := range []struct {
		name string
		a    *sparse.CSR
	}{
		{"poisson-3d-5x4x6", laplace(5, 4, 6)},
		{"random-spd", randomSPD(150, 8, 11)},
		{"kershaw-shifted", kershaw()},
		{"one-by-one", csrFromDense([][]float64{{4}})},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := NewIC0(tc.a, IC0Options{})
			if err != nil {
				t.Fatal(err)
			}
			n := tc.a.Rows
			rng := rand.New(rand.NewPCG(1, 2))
			r := make([]float64, n)
			for i := range r {
				r[i] = rng.NormFloat64()
			}
			z := make([]float64, n)
			m.Precondition(z, r)
			l := m.cholLower()
			var y, back mat.VecDense
			y.MulVec(l.T(), mat.NewVecDense(n, z))
			back.MulVec(l, &y)
			// M's condition number is modest on these matrices; 1e-11
			// relative to ‖r‖∞ covers the rounding of two solves and two
			// products.
			for i := 0; i < n; i++ {
				if math.Abs(back.AtVec(i)-r[i]) > 1e-11*(1+math.Abs(r[i])) {
					t.Fatalf("L·(Lᵀ·z)[%d] = %.17g, r has %.17g", i, back.AtVec(i), r[i])
				}
			}
			// In place: dst and r the same slice give the same bits.
			in := append([]float64(nil), r...)
			m.Precondition(in, in)
			for i := range in {
				if in[i] != z[i] {
					t.Fatalf("in-place result differs at %d: %g vs %g", i, in[i], z[i])
				}
			}
		})
	}
}

func TestIC0ShiftRetry(t *testing.T) {
	a := kershaw()
	// The matrix is SPD (gonum's dense Cholesky succeeds), yet plain
	// IC(0) meets a negative pivot.
	var chol mat.Cholesky
	if !chol.Factorize(mat.NewSymDense(4, dense(a).RawMatrix().Data)) {
		t.Fatal("Kershaw's matrix should be SPD")
	}
	_, err := NewIC0(a, IC0Options{MaxTries: 1})
	var be *BreakdownError
	if !errors.As(err, &be) || !errors.Is(err, ErrBreakdown) {
		t.Fatalf("unshifted IC(0): got %v, want a *BreakdownError", err)
	}
	if be.Tries != 1 || be.Shift != 0 || be.Pivot > 0 {
		t.Errorf("breakdown %+v: want 1 try at shift 0 with a pivot ≤ 0", be)
	}
	m, err := NewIC0(a, IC0Options{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Tries() < 2 || m.Shift() <= 0 {
		t.Fatalf("shift %g after %d tries: the retry did not happen", m.Shift(), m.Tries())
	}
	// Shifts follow FirstShift·Growth^(t−2) for try t ≥ 2.
	if want := DefaultFirstShift * math.Pow(DefaultGrowth, float64(m.Tries()-2)); math.Abs(m.Shift()-want) > 1e-12*want {
		t.Errorf("shift %g after %d tries, want %g", m.Shift(), m.Tries(), want)
	}
	// The factor is IC(0) of A + α·diag(A): L·Lᵀ matches it on A's
	// pattern (the defining property again).
	l := m.cholLower()
	var llt mat.Dense
	llt.Mul(l, l.T())
	for i := 0; i < 4; i++ {
		for j := 0; j < 4; j++ {
			want := dense(a).At(i, j)
			if i == j {
				want *= 1 + m.Shift()
			}
			if want != 0 && math.Abs(llt.At(i, j)-want) > 1e-13*4 {
				t.Errorf("(L·Lᵀ)[%d][%d] = %g, want %g", i, j, llt.At(i, j), want)
			}
		}
	}
	// A tighter cap stops earlier with the last shift tried named.
	_, err = NewIC0(a, IC0Options{MaxTries: m.Tries() - 1})
	if !errors.As(err, &be) || be.Tries != m.Tries()-1 {
		t.Fatalf("capped: got %v", err)
	}
}

func TestIC0RefusesDiagonal(t *testing.T) {
	for _, tc := range diagonalCases() {
		t.Run(tc.name, func(t *testing.T) {
			_, err := NewIC0(tc.a, IC0Options{})
			checkDiagonalError(t, err, tc.row, tc.reason)
		})
	}
}

func TestIC0ConcurrentAndDeterministic(t *testing.T) {
	a := laplace(12, 11, 10)
	m1, err := NewIC0(a, IC0Options{})
	if err != nil {
		t.Fatal(err)
	}
	m2, _ := NewIC0(a, IC0Options{})
	n := a.Rows
	r := make([]float64, n)
	for i := range r {
		r[i] = math.Sin(float64(i))
	}
	want := make([]float64, n)
	m1.Precondition(want, r)
	other := make([]float64, n)
	m2.Precondition(other, r)
	for i := range want {
		if want[i] != other[i] {
			t.Fatalf("two set-ups differ at %d: %v vs %v", i, want[i], other[i])
		}
	}
	// Several solves share one factor; each must get the same bits.
	var wg sync.WaitGroup
	errs := make(chan string, 8)
	for g := 0; g < 8; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			z := make([]float64, n)
			for rep := 0; rep < 20; rep++ {
				m1.Precondition(z, r)
				for i := range z {
					if z[i] != want[i] {
						errs <- "concurrent result differs"
						return
					}
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Fatal(e)
	}
}

func TestPreconditionAllocatesNothing(t *testing.T) {
	a := laplace(10, 10, 10)
	ic, _ := NewIC0(a, IC0Options{})
	jac, _ := NewJacobi(a)
	r := make([]float64, a.Rows)
	z := make([]float64, a.Rows)
	for _, p := range []interface{ Precondition(dst, r []float64) }{ic, jac} {
		if n := testing.AllocsPerRun(20, func() { p.Precondition(z, r) }); n != 0 {
			t.Errorf("%T.Precondition allocates %v times per call", p, n)
		}
	}
}

func TestPreconditionPanicsOnLength(t *testing.T) {
	a := laplace(3, 3, 1)
	ic, _ := NewIC0(a, IC0Options{})
	jac, _ := NewJacobi(a)
	for _, p := range []interface{ Precondition(dst, r []float64) }{ic, jac} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%T: no panic on a short vector", p)
				}
			}()
			p.Precondition(make([]float64, 8), make([]float64, 9))
		}()
	}
}
