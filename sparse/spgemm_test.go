package sparse

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// checkAgainstDense compares c with the gonum dense product want entry by
// entry. The tolerance is relative to the sum of the absolute values of the
// terms (bounded here by the inner dimension times the largest |a|·|b|):
// the two products add the same terms in different orders, which Higham,
// Accuracy and Stability of Numerical Algorithms, 2nd ed., §3.1 bounds by
// γ_n·Σ|terms| (n the inner dimension).
func checkAgainstDense(t *testing.T, c *CSR, want *mat.Dense, inner int, scale float64) {
	t.Helper()
	if err := c.Validate(); err != nil {
		t.Fatalf("product is not a valid CSR: %v", err)
	}
	r, cc := want.Dims()
	if c.Rows > 0 && c.Cols > 0 && (c.Rows != r || c.Cols != cc) {
		t.Fatalf("product is %d×%d, want %d×%d", c.Rows, c.Cols, r, cc)
	}
	tol := float64(inner+1) * 0x1p-52 * scale
	for i := 0; i < c.Rows; i++ {
		for j := 0; j < c.Cols; j++ {
			if got, w := c.At(i, j), want.At(i, j); math.Abs(got-w) > tol {
				t.Fatalf("C(%d,%d) = %g, dense product gives %g (tolerance %g)", i, j, got, w, tol)
			}
		}
	}
}

func sameCSR(a, b *CSR) bool { return sameArrays(a, b) }

// TestMulAgainstDense checks Mul against gonum's dense product (mat.Dense.Mul)
// on random matrices with sizes on both sides of the chunk length (256 rows)
// and of the inline threshold, at 1, 2 and 3 goroutines, and checks that the
// result is the same bits at every goroutine count.
func TestMulAgainstDense(t *testing.T) {
	t.Parallel()
	cases := []struct {
		m, k, n int
		density float64
	}{
		{0, 3, 4, 0.5},
		{1, 1, 1, 1},
		{3, 5, 2, 0.6},
		{17, 9, 23, 0.3},
		{255, 40, 31, 0.1},
		{256, 64, 64, 0.08},
		{257, 300, 129, 0.05},
		{513, 200, 90, 0.2},   // past the inline threshold
		{900, 700, 400, 0.02}, // several chunks per goroutine
	}
	for _, tc := range cases {
		t.Run(fmt.Sprintf("%dx%dx%d", tc.m, tc.k, tc.n), func(t *testing.T) {
			a := randCSR(tc.m, tc.k, tc.density, true, uint64(tc.m*7+tc.k))
			b := randCSR(tc.k, tc.n, tc.density, true, uint64(tc.n*13+tc.k))
			c1 := mulWorkers(a, b, 1)
			if tc.m > 0 {
				var want mat.Dense
				want.Mul(denseOf(a), denseOf(b))
				// |a|,|b| < 1, so each product's terms sum to at most inner.
				checkAgainstDense(t, c1, &want, tc.k, float64(tc.k))
			}
			for _, w := range []int{2, 3} {
				if cw := mulWorkers(a, b, w); !sameCSR(c1, cw) {
					t.Errorf("Mul on %d goroutines differs from Mul on 1", w)
				}
			}
		})
	}
}

// TestMulBanded multiplies large banded matrices (many chunks, parallel
// path) and checks the product against the reference product computed row
// by row with refMulVec on unit vectors: column j of A·B is A·(B·e_j).
func TestMulBanded(t *testing.T) {
	t.Parallel()
	n := 5000
	a := randBanded(n, 3, 1)
	b := randBanded(n, 2, 2)
	c := mulWorkers(a, b, 3)
	if err := c.Validate(); err != nil {
		t.Fatal(err)
	}
	// The product of bandwidths 3 and 2 has bandwidth 5: every row but the
	// first and last five has 11 entries.
	if got := c.RowPtr[n/2+1] - c.RowPtr[n/2]; got != 11 {
		t.Errorf("middle row has %d entries, want 11 (band 3 times band 2)", got)
	}
	x := randVec(n, 5)
	want := refMulVec(a, refMulVec(b, x))
	got := refMulVec(c, x)
	for i := range want {
		// (A·B)·x and A·(B·x) differ by rounding in sums of at most 35
		// terms of size below 1 (Higham §3.1).
		if math.Abs(got[i]-want[i]) > 64*0x1p-52*35 {
			t.Fatalf("(A·B)·x[%d] = %g, A·(B·x)[%d] = %g", i, got[i], i, want[i])
		}
	}
	if !sameCSR(c, mulWorkers(a, b, 1)) || !sameCSR(c, mulWorkers(a, b, 2)) {
		t.Error("Mul differs between 1, 2 and 3 goroutines")
	}
}

// TestMulTransAndGalerkin checks Aᵀ·B and Pᵀ·A·P against gonum dense
// products on random SPD matrices A (A = GᵀG + n·I, SPD by construction,
// Golub & Van Loan, Matrix Computations 4th ed., §4.2) and random
// prolongator-like P.
func TestMulTransAndGalerkin(t *testing.T) {
	t.Parallel()
	for _, n := range []int{5, 40, 300} {
		t.Run(fmt.Sprint(n), func(t *testing.T) {
			g := randCSR(n, n, 0.05, false, uint64(n))
			id := identity(n, float64(n))
			gtg := MulTrans(g, g)
			a := add(gtg, id)
			nc := max(1, n/3)
			p := randCSR(n, nc, 0.3, false, uint64(n+1))

			var want mat.Dense
			want.Mul(denseOf(g).T(), denseOf(g))
			checkAgainstDense(t, gtg, &want, n, float64(n))

			ac := Galerkin(a, p)
			var ap, ptap mat.Dense
			ap.Mul(denseOf(a), denseOf(p))
			ptap.Mul(denseOf(p).T(), &ap)
			// Terms of A·P are below n+n·1 in size; of Pᵀ·(A·P) below n·that.
			checkAgainstDense(t, ac, &ptap, n, float64(n)*float64(n)*float64(2*n))
			if ac.Rows != nc || ac.Cols != nc {
				t.Fatalf("Galerkin is %d×%d, want %d×%d", ac.Rows, ac.Cols, nc, nc)
			}
			// The pattern of Pᵀ·A·P is symmetric when A's is.
			tr := ac.Transpose()
			for i := range ac.RowPtr {
				if ac.RowPtr[i] != tr.RowPtr[i] {
					t.Fatalf("Galerkin pattern not symmetric at row %d", i)
				}
			}
		})
	}
}

func TestMulPanics(t *testing.T) {
	t.Parallel()
	a := randCSR(3, 4, 0.5, false, 1)
	for name, f := range map[string]func(){
		"Mul":      func() { Mul(a, a) },
		"MulTrans": func() { MulTrans(a, randCSR(4, 4, 0.5, false, 2)) },
		"Galerkin": func() { Galerkin(a, randCSR(3, 2, 0.5, false, 2)) },
		"invalid": func() {
			bad := &CSR{Rows: 4, Cols: 2, RowPtr: []int{0, 1, 1, 1, 1}, ColIdx: []int32{7}, Val: []float64{1}}
			Mul(a, bad)
		},
	} {
		t.Run(name, func(t *testing.T) {
			defer func() {
				if r := recover(); r == nil {
					t.Errorf("%s did not panic", name)
				} else if s, ok := r.(string); !ok || s[:7] != "sparse:" {
					t.Errorf("panic %v does not start with sparse:", r)
				}
			}()
			f()
		})
	}
}

func identity(n int, s float64) *CSR {
	c := &CSR{Rows: n, Cols: n, RowPtr: make([]int, n+1), ColIdx: make([]int32, n), Val: make([]float64, n)}
	for i := range n {
		c.RowPtr[i+1] = i + 1
		c.ColIdx[i] = int32(i)
		c.Val[i] = s
	}
	return c
}

// add returns A + B through the dense form (test sizes only).
func add(a, b *CSR) *CSR {
	var d mat.Dense
	d.Add(denseOf(a), denseOf(b))
	c := &CSR{Rows: a.Rows, Cols: a.Cols, RowPtr: make([]int, a.Rows+1)}
	for i := 0; i < a.Rows; i++ {
		for j := 0; j < a.Cols; j++ {
			if v := d.At(i, j); v != 0 {
				c.ColIdx = append(c.ColIdx, int32(j))
				c.Val = append(c.Val, v)
			}
		}
		c.RowPtr[i+1] = len(c.ColIdx)
	}
	return c
}

// BenchmarkGalerkin times the coarse operator of a piecewise-constant
// prolongator (aggregates of 8 consecutive rows) on a banded matrix.
func BenchmarkGalerkin(b *testing.B) {
	n := 1 << 20
	a := randBanded(n, 3, 1)
	p := &CSR{Rows: n, Cols: n / 8, RowPtr: make([]int, n+1), ColIdx: make([]int32, n), Val: make([]float64, n)}
	rng := rand.New(rand.NewPCG(1, 1))
	for i := range n {
		p.RowPtr[i+1] = i + 1
		p.ColIdx[i] = int32(i / 8)
		p.Val[i] = rng.Float64()
	}
	b.ReportAllocs()
	for b.Loop() {
		Galerkin(a, p)
	}
}

// TestDiagSweeps checks DiagInit and DiagStep against their definitions,
// written as plain loops, on lengths on both sides of the block size and
// the inline threshold.
func TestDiagSweeps(t *testing.T) {
	t.Parallel()
	for _, n := range []int{0, 1, 2047, 2049, 1 << 16} {
		w, r := randVec(n, 1), randVec(n, 2)
		x, d := randVec(n, 3), randVec(n, 4)
		wantX, wantD := append([]float64(nil), x...), append([]float64(nil), d...)
		for i := range wantX {
			wantD[i] = 0.5*wantD[i] + 1.5*w[i]*r[i]
			wantX[i] += wantD[i]
		}
		DiagStep(x, d, w, r, 0.5, 1.5)
		for i := range x {
			if x[i] != wantX[i] || d[i] != wantD[i] {
				t.Fatalf("n=%d: DiagStep at %d: x %g d %g, want %g %g", n, i, x[i], d[i], wantX[i], wantD[i])
			}
		}
		DiagInit(x, d, w, r, 2)
		for i := range x {
			if want := 2 * w[i] * r[i]; x[i] != want || d[i] != want {
				t.Fatalf("n=%d: DiagInit at %d: x %g d %g, want %g", n, i, x[i], d[i], want)
			}
		}
	}
}
