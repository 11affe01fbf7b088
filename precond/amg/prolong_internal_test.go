package amg

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
)

// poisson1D returns the tridiagonal (−1, 2, −1) matrix of order n.
func poisson1D(n int) *sparse.CSR {
	a := &sparse.CSR{Rows: n, Cols: n, RowPtr: make([]int, n+1)}
	for i := range n {
		for j := max(0, i-1); j <= min(n-1, i+1); j++ {
			a.ColIdx = append(a.ColIdx, int32(j))
			if j == i {
				a.Val = append(a.Val, 2)
			} else {
				a.Val = append(a.Val, -1)
			}
		}
		a.RowPtr[i+1] = len(a.Val)
	}
	return a
}

// TestAggregates1D checks the greedy aggregation on the 1D Poisson graph:
// phase 1 makes node 0 a root with its one neighbour, then roots 3, 6, 9,
// ... take their two neighbours, so the interior aggregates are triples of
// consecutive points ({3k−1, 3k, 3k+1}), the pattern Vaněk, Mandel and
// Brezina 1996, §4 analyse.
func TestAggregates1D(t *testing.T) {
	n := 31
	a := poisson1D(n)
	g := strength(a, nil, DefaultTheta)
	agg, na := aggregate(g, n)
	// {0,1}, {2,3,4}, {5,6,7}, ..., {29,30}.
	if na != 11 {
		t.Fatalf("%d aggregates, want 11", na)
	}
	for i := range n {
		want := int32((i + 1) / 3)
		if agg[i] != want {
			t.Fatalf("node %d in aggregate %d, want %d (aggregates %v)", i, agg[i], want, agg)
		}
	}
}

// TestSmoothedProlongator1D: with aggregates of three consecutive points,
// the constant near-null space and ω = 2/3 (= 4/(3·ρ) for ρ(D⁻¹A) → 2),
// the smoothed prolongator's column of an interior aggregate {j−1, j, j+1}
// is the piecewise linear hat 1/3, 2/3, 1, 2/3, 1/3 on j−2..j+2, scaled by
// the tentative prolongator's 1/√3: linear interpolation inside each
// aggregate (Vaněk, Mandel and Brezina 1996, §4).
func TestSmoothedProlongator1D(t *testing.T) {
	n := 31
	a := poisson1D(n)
	g := strength(a, nil, DefaultTheta)
	agg, na := aggregate(g, n)
	ones := make([]float64, n)
	for i := range ones {
		ones[i] = 1
	}
	pt, bc, cn := tentative(n, 1, ones, nil, agg, na)
	if cn != nil {
		t.Fatal("one near-null vector gave coarse nodes of several unknowns")
	}
	// The coarse near-null space is R = ‖1_agg‖ = √3 for a triple.
	if got := bc[3]; math.Abs(got-math.Sqrt(3)) > 1e-15 {
		t.Errorf("coarse near-null entry %g, want √3", got)
	}
	p := smoothProlongator(filtered(a, nil, g), pt, 2.0/3)
	s := 1 / math.Sqrt(3)
	for _, c := range []int{2, 3, 5, 8} { // interior aggregates {3c−1, 3c, 3c+1}
		j := 3 * c
		want := map[int]float64{j - 2: s / 3, j - 1: 2 * s / 3, j: s, j + 1: 2 * s / 3, j + 2: s / 3}
		for i := range n {
			got := p.At(i, c)
			// One multiply-add per entry: a few ulps.
			if math.Abs(got-want[i]) > 4e-16 {
				t.Errorf("P(%d, %d) = %.17g, want %.17g", i, c, got, want[i])
			}
		}
	}
}

// TestLanczosMax1D: λmax(D⁻¹A) of 1D Poisson is 1 + cos(π/(n+1))
// (the eigenvalues of tridiag(−1, 2, −1) are 2 − 2cos(kπ/(n+1)); Saad,
// Iterative Methods 2nd ed., §2.2, from memory). Ten Lanczos steps from a
// random start come within 5% of it (our own tolerance: the Chebyshev
// interval's factor 1.1 must cover the shortfall).
func TestLanczosMax1D(t *testing.T) {
	for _, n := range []int{50, 1000, 100000} {
		a := poisson1D(n)
		got := maxEigDinvA(a, a.Diagonal(nil))
		want := 1 + math.Cos(math.Pi/float64(n+1))
		if got > want*(1+1e-12) || got < 0.95*want {
			t.Errorf("n=%d: λmax estimate %g, exact %g", n, got, want)
		}
	}
}

// TestTentativeQR: with k near-null vectors, P_tent·B_c = B and
// P_tentᵀ·P_tent = I (the defining properties of the tentative
// prolongator, Vaněk, Mandel and Brezina 1996, §3), checked with gonum
// dense products, for aggregates both larger and smaller than k.
func TestTentativeQR(t *testing.T) {
	n, k := 14, 3
	b := make([]float64, n*k)
	for i := range n {
		x := float64(i)
		b[i*k], b[i*k+1], b[i*k+2] = 1, x, x*x/10
	}
	// Aggregates of 5, 4, 3 and 2 nodes (the last smaller than k).
	agg := []int32{0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 3, 3}
	pt, bc, cn := tentative(n, k, b, nil, agg, 4)
	if pt.Cols != 3+3+3+2 || cn == nil || cn.count != 4 {
		t.Fatalf("P_tent has %d columns (want 11), coarse nodes %v", pt.Cols, cn)
	}
	P := mat.NewDense(n, pt.Cols, nil)
	for i := range n {
		for q := pt.RowPtr[i]; q < pt.RowPtr[i+1]; q++ {
			P.Set(i, int(pt.ColIdx[q]), pt.Val[q])
		}
	}
	var ptp, pb mat.Dense
	ptp.Mul(P.T(), P)
	pb.Mul(P, mat.NewDense(pt.Cols, k, bc))
	for i := range pt.Cols {
		for j := range pt.Cols {
			want := 0.0
			if i == j {
				want = 1
			}
			if math.Abs(ptp.At(i, j)-want) > 1e-14 {
				t.Errorf("(PᵀP)(%d,%d) = %g, want %g", i, j, ptp.At(i, j), want)
			}
		}
	}
	for i := range n {
		for c := range k {
			if math.Abs(pb.At(i, c)-b[i*k+c]) > 1e-13 {
				t.Errorf("(P·B_c)(%d,%d) = %g, want %g", i, c, pb.At(i, c), b[i*k+c])
			}
		}
	}
}
