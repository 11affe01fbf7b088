package sparse_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
)

// normalRandom returns a random sparse m×n matrix with about perRow entries
// per row (row 3 left empty, to exercise a zero row of B·Bᵀ) and weights
// spanning 10⁻⁸…10⁸ (log-uniform), fixed seed.
func normalRandom(m, n, perRow int, seed uint64) (*sparse.CSR, []float64) {
	rng := rand.New(rand.NewPCG(seed, 11))
	var ii, jj []int32
	var vv []float64
	for i := range m {
		if i == 3 {
			continue
		}
		for range perRow {
			ii, jj, vv = append(ii, int32(i)), append(jj, int32(rng.IntN(n))), append(vv, rng.NormFloat64())
		}
	}
	b, _, err := sparse.FromTriplets(m, n, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		panic(err)
	}
	d := make([]float64, n)
	for j := range d {
		d[j] = math.Pow(10, -8+16*rng.Float64())
	}
	return b, d
}

// normalDense returns B·diag(d)·Bᵀ + δ·I formed densely with gonum.
func normalDense(b *sparse.CSR, d []float64, delta float64) *mat.Dense {
	bd := mat.DenseCopyOf(b)
	scaled := mat.DenseCopyOf(b)
	r, c := bd.Dims()
	for i := range r {
		for j := range c {
			scaled.Set(i, j, scaled.At(i, j)*d[j])
		}
	}
	var n mat.Dense
	n.Mul(scaled, bd.T())
	for i := range r {
		n.Set(i, i, n.At(i, i)+delta)
	}
	return &n
}

// TestNormalAgainstDense: the matrix-free product, the diagonal and the
// assembled matrix agree with B·diag(d)·Bᵀ + δ·I formed densely by gonum,
// for weights spanning 10⁻⁸…10⁸, entry by entry to a few units of
// rounding relative to Σ_j |b_ij|·d_j·|b_kj| (each entry is a sum of
// products; Higham, 2nd ed., §3.1: |fl(Σ) − Σ| ≤ γ_n·Σ|terms|). One
// assembly serves two different weight vectors (the pattern is reused).
func TestNormalAgainstDense(t *testing.T) {
	b, d := normalRandom(40, 120, 5, 1)
	_, d2 := normalRandom(40, 120, 5, 2)
	op := sparse.NewNormal(b)
	asm := sparse.NewNormalAssembly(b)
	absB := b.Transpose().Transpose() // a copy, values made absolute below
	for k := range absB.Val {
		absB.Val[k] = math.Abs(absB.Val[k])
	}
	for _, c := range []struct {
		d     []float64
		delta float64
	}{{d, 0}, {d2, 1e-6}, {d, 3}} {
		if err := op.SetWeights(c.d, c.delta); err != nil {
			t.Fatal(err)
		}
		ref := normalDense(b, c.d, c.delta)
		bound := normalDense(absB, c.d, c.delta) // Σ|terms| per entry
		const gamma = 1e-14                      // ≈ nε for at most 120 terms, with slack
		// Column by column: N·e_k.
		y, col := make([]float64, 40), make([]float64, 40)
		for k := range 40 {
			clear(y)
			y[k] = 1
			op.MulVec(col, y)
			for i := range 40 {
				if diff := math.Abs(col[i] - ref.At(i, k)); diff > gamma*bound.At(i, k)+1e-300 {
					t.Fatalf("δ=%g: (N·e_%d)_%d = %g, dense %g", c.delta, k, i, col[i], ref.At(i, k))
				}
			}
		}
		diag := op.Diagonal(nil)
		a := asm.Assemble(c.d, c.delta)
		if err := a.Validate(); err != nil {
			t.Fatal(err)
		}
		for i := range 40 {
			if diff := math.Abs(diag[i] - ref.At(i, i)); diff > gamma*bound.At(i, i) {
				t.Errorf("δ=%g: diagonal %d = %g, dense %g", c.delta, i, diag[i], ref.At(i, i))
			}
			for k := range 40 {
				if diff := math.Abs(a.At(i, k) - ref.At(i, k)); diff > gamma*bound.At(i, k) {
					t.Fatalf("δ=%g: assembled (%d,%d) = %g, dense %g", c.delta, i, k, a.At(i, k), ref.At(i, k))
				}
			}
		}
		if lo, hi := op.WeightRange(); hi/lo < 1e10 {
			t.Errorf("weight range [%g, %g] does not span the test's 10⁻⁸…10⁸", lo, hi)
		}
	}
	if a := asm.Assemble(d, 0); a.At(3, 3) != 0 || !hasEntry(a, 3, 3) {
		t.Errorf("the empty row of B must still get a stored diagonal entry")
	}
	var we *sparse.WeightError
	bad := append([]float64(nil), d...)
	bad[7] = -1
	if err := op.SetWeights(bad, 0); !errors.As(err, &we) || we.Index != 7 {
		t.Errorf("negative weight: %v", err)
	}
	if err := op.SetWeights(d, math.NaN()); !errors.As(err, &we) || we.Index != -1 {
		t.Errorf("NaN δ: %v", err)
	}
}

func hasEntry(a *sparse.CSR, i, j int) bool {
	for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
		if int(a.ColIdx[p]) == j {
			return true
		}
	}
	return false
}
