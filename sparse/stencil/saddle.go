package stencil

import (
	"fmt"
	"math/rand/v2"

	"github.com/residua/residua/sparse"
)

// Constraints returns a random sparse m×n constraint matrix B of full row
// rank m (m ≤ n), for saddle-point test problems: row i has one pivot entry
// of value 1 + u (u uniform in [0, 1)) in column π(i), π a random choice
// of m distinct columns, and perRow − 1 further entries, uniform in
// [−1, 1), in columns outside π. B restricted to the columns π is then a
// nonsingular diagonal matrix, so B has rank m. The same seed gives the
// same matrix. It panics if m < 1, m > n or perRow < 1.
func Constraints(m, n, perRow int, seed uint64) *sparse.CSR {
	if m < 1 || m > n || perRow < 1 {
		panic(fmt.Sprintf("stencil: Constraints(%d, %d, %d): want 1 ≤ m ≤ n and perRow ≥ 1", m, n, perRow))
	}
	rng := rand.New(rand.NewPCG(seed, 0x5add1e))
	perm := rng.Perm(n)
	pivot := perm[:m]
	free := perm[m:] // columns outside the pivots
	extra := min(perRow-1, len(free))
	var ii, jj []int32
	var vv []float64
	for i, p := range pivot {
		ii, jj, vv = append(ii, int32(i)), append(jj, int32(p)), append(vv, 1+rng.Float64())
		for range extra {
			ii = append(ii, int32(i))
			jj = append(jj, int32(free[rng.IntN(len(free))]))
			vv = append(vv, 2*rng.Float64()-1)
		}
	}
	b, _, err := sparse.FromTriplets(m, n, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		panic("stencil: " + err.Error()) // cannot happen: indices are in range
	}
	return b
}

// Saddle returns the symmetric saddle-point (KKT) matrix
//
//	K = [ H  Bᵀ ]
//	    [ B −c·I ]
//
// of order h.Rows + b.Rows, with c ≥ 0 (c = 0 leaves the (2,2) block empty:
// no entries are stored there). h must be square with b.Cols columns. It
// panics on mismatched shapes or a negative c.
func Saddle(h, b *sparse.CSR, c float64) *sparse.CSR {
	if h.Rows != h.Cols || b.Cols != h.Rows || !(c >= 0) {
		panic(fmt.Sprintf("stencil: Saddle of a %d×%d H, a %d×%d B and c = %g", h.Rows, h.Cols, b.Rows, b.Cols, c))
	}
	n, m := h.Rows, b.Rows
	bt := b.Transpose()
	k := &sparse.CSR{Rows: n + m, Cols: n + m, RowPtr: make([]int, n+m+1)}
	nnz := h.NNZ() + 2*b.NNZ()
	if c > 0 {
		nnz += m
	}
	k.ColIdx = make([]int32, 0, nnz)
	k.Val = make([]float64, 0, nnz)
	for i := range n {
		k.ColIdx = append(k.ColIdx, h.ColIdx[h.RowPtr[i]:h.RowPtr[i+1]]...)
		k.Val = append(k.Val, h.Val[h.RowPtr[i]:h.RowPtr[i+1]]...)
		for p := bt.RowPtr[i]; p < bt.RowPtr[i+1]; p++ {
			k.ColIdx = append(k.ColIdx, int32(n)+bt.ColIdx[p])
			k.Val = append(k.Val, bt.Val[p])
		}
		k.RowPtr[i+1] = len(k.Val)
	}
	for i := range m {
		k.ColIdx = append(k.ColIdx, b.ColIdx[b.RowPtr[i]:b.RowPtr[i+1]]...)
		k.Val = append(k.Val, b.Val[b.RowPtr[i]:b.RowPtr[i+1]]...)
		if c > 0 {
			k.ColIdx = append(k.ColIdx, int32(n+i))
			k.Val = append(k.Val, -c)
		}
		k.RowPtr[n+i+1] = len(k.Val)
	}
	return k
}
