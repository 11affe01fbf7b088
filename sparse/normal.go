package sparse

import (
	"fmt"
	"math"
	"runtime"
	"sync"
)

// Normal-equations operators N = B·diag(d)·Bᵀ + δ·I for a stored m×n B, a
// weight vector d of length n that changes from one solve to the next and
// a regularisation δ ≥ 0: the matrices an interior-point method solves
// with at every step (Nocedal and Wright, Numerical Optimization, 2nd ed.,
// §14.1, eq. 14.44: A·D·Aᵀ with D = X·S⁻¹ for a linear program). The
// pattern of N does not depend on d, so everything that depends on the
// pattern alone is computed once per B: the transpose (B's own cached
// transpose, as MulVecTrans keeps it), and for the assembled form the
// symbolic product.

// Normal is N = B·diag(d)·Bᵀ + δ·I applied matrix-free: N·y = B·(D·(Bᵀ·y))
// + δ·y, with D·Bᵀ stored as Bᵀ's pattern (B's cached transpose) and
// values scaled by the weights when they are set, so that a product costs
// two sparse products and no vector pass for D. It satisfies krylov's
// Operator. A Normal holds a scratch vector: it is not safe for concurrent
// use; make one per solve (cheap: the transpose is B's and is shared).
type Normal struct {
	b     *CSR
	dbt   *CSR // diag(d)·Bᵀ: Bᵀ's row and column arrays, values scaled by d
	delta float64
	t     []float64 // scratch of length n
	dmin  float64
	dmax  float64
}

// NewNormal returns the normal-equations operator of b with all weights
// one and δ = 0 (call SetWeights). It builds b's transpose on first use
// and shares it with b's MulVecTrans. It panics if b's arrays fail
// Validate.
func NewNormal(b *CSR) *Normal {
	b.trust("NewNormal")
	bt := b.cachedTranspose()
	if bt == nil {
		bt = b
	}
	o := &Normal{
		b:   b,
		dbt: &CSR{Rows: bt.Rows, Cols: bt.Cols, RowPtr: bt.RowPtr, ColIdx: bt.ColIdx, Val: make([]float64, len(bt.Val))},
		t:   make([]float64, b.Cols),
	}
	copy(o.dbt.Val, bt.Val)
	o.dmin, o.dmax = 1, 1
	o.dbt.trust("NewNormal")
	return o
}

// WeightError is a weight or regularisation that SetWeights refused.
// Index is the weight's 0-based position (−1 for δ).
type WeightError struct {
	Index int
	Value float64
}

func (e *WeightError) Error() string {
	if e.Index < 0 {
		return fmt.Sprintf("sparse: regularisation δ = %g must be finite and ≥ 0", e.Value)
	}
	return fmt.Sprintf("sparse: weight %d is %g; weights must be finite and ≥ 0", e.Index+1, e.Value)
}

// SetWeights sets d and δ for the following products; d is copied into
// the operator's scaled transpose (one pass over Bᵀ's entries). It returns
// a *WeightError for a NaN, infinite or negative weight or δ, and panics
// if len(d) != b.Cols.
func (o *Normal) SetWeights(d []float64, delta float64) error {
	if len(d) != o.b.Cols {
		panic(fmt.Sprintf("sparse: SetWeights: %d weights for %d columns", len(d), o.b.Cols))
	}
	if !(delta >= 0) || math.IsInf(delta, 1) {
		return &WeightError{Index: -1, Value: delta}
	}
	dmin, dmax := math.Inf(1), 0.0
	for j, v := range d {
		if !(v >= 0) || math.IsInf(v, 1) {
			return &WeightError{Index: j, Value: v}
		}
		dmin, dmax = min(dmin, v), max(dmax, v)
	}
	if len(d) == 0 {
		dmin = 0
	}
	bt := o.b.cachedTranspose()
	if bt == nil {
		bt = o.b
	}
	// Row j of Bᵀ is column j of B: scale it by d_j.
	for j := range d {
		for p := bt.RowPtr[j]; p < bt.RowPtr[j+1]; p++ {
			o.dbt.Val[p] = d[j] * bt.Val[p]
		}
	}
	o.delta, o.dmin, o.dmax = delta, dmin, dmax
	return nil
}

// WeightRange returns the smallest and largest weight set.
func (o *Normal) WeightRange() (lo, hi float64) { return o.dmin, o.dmax }

// Delta returns δ.
func (o *Normal) Delta() float64 { return o.delta }

// B returns the stored matrix.
func (o *Normal) B() *CSR { return o.b }

// Dims returns (m, m), m = b.Rows.
func (o *Normal) Dims() (rows, cols int) { return o.b.Rows, o.b.Rows }

// MulVec sets dst = (B·diag(d)·Bᵀ + δ·I)·y. dst must not overlap y. It
// panics if len(dst) or len(y) != m.
func (o *Normal) MulVec(dst, y []float64) {
	o.dbt.MulVec(o.t, y)
	o.b.MulVec(dst, o.t)
	if o.delta != 0 {
		Axpy(dst, o.delta, y)
	}
}

// Diagonal sets dst[i] = Σ_j b_ij²·d_j + δ, the diagonal of N, in one pass
// over B, and returns dst (allocated when nil). It panics if dst is not
// nil and has the wrong length.
func (o *Normal) Diagonal(dst []float64) []float64 {
	m := o.b.Rows
	if dst == nil {
		dst = make([]float64, m)
	}
	if len(dst) != m {
		panic(fmt.Sprintf("sparse: Normal.Diagonal: len(dst) = %d, want %d", len(dst), m))
	}
	bt := o.b.cachedTranspose()
	if bt == nil {
		bt = o.b
	}
	clear(dst)
	// Walk Bᵀ: entry (j, i) of diag(d)·Bᵀ is d_j·b_ij, and of Bᵀ b_ij.
	for j := range bt.Rows {
		for p := bt.RowPtr[j]; p < bt.RowPtr[j+1]; p++ {
			dst[bt.ColIdx[p]] += o.dbt.Val[p] * bt.Val[p]
		}
	}
	for i := range dst {
		dst[i] += o.delta
	}
	return dst
}

// NormalAssembly assembles N = B·diag(d)·Bᵀ + δ·I explicitly, for a
// factorization-based preconditioner, with its pattern (that of B·Bᵀ by
// sparse.Mul, with every diagonal entry present) computed once and reused
// for every d: Assemble only recomputes the values, row by row
// (Gustavson's numeric phase with a dense accumulator per goroutine),
// each entry summed in the order of B's columns whatever the goroutine
// count, so the result is bitwise reproducible.
type NormalAssembly struct {
	b, bt *CSR
	n     *CSR // the pattern: row pointers and column indices, no values
}

// NewNormalAssembly computes the pattern of B·Bᵀ + I. It panics if b's
// arrays fail Validate.
func NewNormalAssembly(b *CSR) *NormalAssembly {
	b.trust("NewNormalAssembly")
	bt := b.cachedTranspose()
	if bt == nil {
		bt = b
	}
	p := Mul(b, bt)
	m := b.Rows
	// Add the diagonal entries that an empty row of B leaves out (δ goes
	// there).
	n := &CSR{Rows: m, Cols: m, RowPtr: make([]int, m+1)}
	n.ColIdx = make([]int32, 0, p.NNZ()+m)
	for i := range m {
		row := p.ColIdx[p.RowPtr[i]:p.RowPtr[i+1]]
		placed := false
		for _, c := range row {
			if !placed && int(c) >= i {
				if int(c) > i {
					n.ColIdx = append(n.ColIdx, int32(i))
				}
				placed = true
			}
			n.ColIdx = append(n.ColIdx, c)
		}
		if !placed {
			n.ColIdx = append(n.ColIdx, int32(i))
		}
		n.RowPtr[i+1] = len(n.ColIdx)
	}
	return &NormalAssembly{b: b, bt: bt, n: n}
}

// NNZ returns the number of stored entries of N.
func (na *NormalAssembly) NNZ() int { return na.n.NNZ() }

// Assemble returns a new CSR holding B·diag(d)·Bᵀ + δ·I on the stored
// pattern (its row and column arrays are shared with the assembly and must
// not be modified; the values are its own). It panics if len(d) !=
// b.Cols; the weights are not checked (Normal.SetWeights does that).
func (na *NormalAssembly) Assemble(d []float64, delta float64) *CSR {
	b, bt, pat := na.b, na.bt, na.n
	if len(d) != b.Cols {
		panic(fmt.Sprintf("sparse: Assemble: %d weights for %d columns", len(d), b.Cols))
	}
	m := b.Rows
	out := &CSR{Rows: m, Cols: m, RowPtr: pat.RowPtr, ColIdx: pat.ColIdx, Val: make([]float64, len(pat.ColIdx))}
	w := max(1, min(runtime.GOMAXPROCS(0), (m+mulChunk-1)/mulChunk))
	if b.NNZ() < mulInlineWork {
		w = 1
	}
	var wg sync.WaitGroup
	for k := range w {
		lo, hi := k*m/w, (k+1)*m/w
		wg.Add(1)
		go func() {
			defer wg.Done()
			acc := make([]float64, m)
			for i := lo; i < hi; i++ {
				// Row i of N: Σ_j b_ij·d_j·(row j of Bᵀ), j in the
				// order of row i of B.
				for p := b.RowPtr[i]; p < b.RowPtr[i+1]; p++ {
					j := b.ColIdx[p]
					s := b.Val[p] * d[j]
					for q := bt.RowPtr[j]; q < bt.RowPtr[j+1]; q++ {
						acc[bt.ColIdx[q]] += s * bt.Val[q]
					}
				}
				acc[i] += delta
				for q := pat.RowPtr[i]; q < pat.RowPtr[i+1]; q++ {
					c := pat.ColIdx[q]
					out.Val[q] = acc[c]
					acc[c] = 0
				}
			}
		}()
	}
	wg.Wait()
	return out
}
