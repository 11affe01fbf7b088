package sparse

import (
	"fmt"
	"runtime"
	"slices"
	"sync/atomic"

	"github.com/residua/residua/internal/hugepage"
)

// Sparse matrix-matrix products: C = A·B (Mul), C = Aᵀ·B (MulTrans) and the
// Galerkin triple product Pᵀ·A·P (Galerkin) that multigrid coarse operators
// are made of.
//
// Mul works row by row (Gustavson, "Two fast algorithms for sparse
// matrices: multiplication and permuted transposition", ACM TOMS 4, 1978;
// also Saad, Iterative Methods for Sparse Linear Systems, 2nd ed., §3.4
// from memory): row i of C is Σ_k a(i,k)·B(k,:), over the entries of A's
// row i in column order. It runs in two passes over the rows, both split
// over goroutines:
//
//  1. symbolic: each row's count of distinct columns, found with a marker
//     array of length B.Cols per goroutine; a prefix sum then fixes RowPtr,
//     so C is allocated once at its exact size;
//  2. numeric: each row's products are added into a dense accumulator of
//     length B.Cols per goroutine, the row's columns are sorted, and the
//     sums are gathered into C's row in column order.
//
// The rows are handed out in fixed chunks of mulChunk rows from an atomic
// counter, so a slow goroutine delays nobody. Every c(i,j) is summed in the
// same order whichever goroutine computes row i (k increasing along A's row
// i, one term per k), so the result is bitwise identical run to run and at
// any number of goroutines. Unlike the vector kernels (which use the
// persistent pool, Workers), these set-up products start their own
// goroutines, runtime.GOMAXPROCS(0) of them at the time of the call: they
// run once per set-up, allocate their result anyway, and may then follow a
// GOMAXPROCS that changed since the pool started.

// mulChunk is the number of rows a goroutine claims at a time: large enough
// that the atomic counter is touched rarely, small enough that rows of very
// different lengths still spread evenly (our own choice).
const mulChunk = 256

// mulInlineWork is the product's work estimate (Σ over A's entries of the
// length of the B row they select) below which Mul runs on the caller
// alone: starting goroutines costs a few microseconds each (our own
// choice, the same order as inlineWork for the vector kernels).
const mulInlineWork = 1 << 16

// Mul returns C = A·B as a new CSR with sorted columns and no stored zeros
// beyond those the arithmetic produces (an entry appears where A's row i
// and B's column j share an index, even if the sum cancels to zero).
// Neither argument is modified; A and B may be the same matrix. Panics if
// A.Cols != B.Rows, if either matrix's arrays fail Validate, or if C would
// have 2³¹ columns or more (impossible: C has B's columns).
func Mul(a, b *CSR) *CSR {
	return mulWorkers(a, b, runtime.GOMAXPROCS(0))
}

// MulTrans returns C = Aᵀ·B, forming Aᵀ explicitly (Transpose, one pass)
// and then multiplying with Mul; the result is the same bits as
// Mul(a.Transpose(), b). Panics if A.Rows != B.Rows or the arrays fail
// Validate.
func MulTrans(a, b *CSR) *CSR {
	if a.Rows != b.Rows {
		panic(fmt.Sprintf("sparse: MulTrans: Aᵀ is %d×%d, B is %d×%d", a.Cols, a.Rows, b.Rows, b.Cols))
	}
	a.trust("MulTrans")
	return Mul(a.Transpose(), b)
}

// Galerkin returns the coarse operator Pᵀ·A·P of a multigrid hierarchy
// (Saad, §13.3 from memory; Briggs, Henson and McCormick, A Multigrid
// Tutorial, 2nd ed., ch. 8, the variational property): first A·P, then
// Pᵀ·(A·P), each by Mul. For symmetric A the result is symmetric in
// pattern, and in value up to rounding (the two triangles are summed in
// different orders). Panics if A is not square, P.Rows != A.Rows, or the
// arrays fail Validate.
func Galerkin(a, p *CSR) *CSR {
	if a.Rows != a.Cols || p.Rows != a.Rows {
		panic(fmt.Sprintf("sparse: Galerkin: A is %d×%d, P is %d×%d", a.Rows, a.Cols, p.Rows, p.Cols))
	}
	ap := Mul(a, p)
	p.trust("Galerkin")
	return Mul(p.Transpose(), ap)
}

// mulWorkers is Mul on w goroutines (w < 1 means 1).
func mulWorkers(a, b *CSR, w int) *CSR {
	if a.Cols != b.Rows {
		panic(fmt.Sprintf("sparse: Mul: A is %d×%d, B is %d×%d", a.Rows, a.Cols, b.Rows, b.Cols))
	}
	a.trust("Mul")
	b.trust("Mul")
	c := &CSR{Rows: a.Rows, Cols: b.Cols, RowPtr: make([]int, a.Rows+1)}
	hugepage.Advise(c.RowPtr) // before the first write: see internal/hugepage
	if a.Rows == 0 {
		return c
	}
	// Work estimate: the number of products, Σ over A's entries of the
	// length of the B row each one selects. It decides inline or parallel
	// only; the result does not depend on it.
	work := 0
	for _, k := range a.ColIdx {
		work += b.RowPtr[k+1] - b.RowPtr[k]
	}
	nChunks := (a.Rows + mulChunk - 1) / mulChunk
	w = max(1, min(w, nChunks))
	if work < mulInlineWork {
		w = 1
	}

	// Pass 1, symbolic: c.RowPtr[i+1] = number of distinct columns of row i.
	var next atomic.Int64
	parallel(w, func(int) {
		mark := make([]int32, b.Cols)
		for j := range mark {
			mark[j] = -1
		}
		for {
			ch := int(next.Add(1) - 1)
			if ch >= nChunks {
				return
			}
			for i := ch * mulChunk; i < min((ch+1)*mulChunk, a.Rows); i++ {
				n := 0
				for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
					k := a.ColIdx[p]
					for q := b.RowPtr[k]; q < b.RowPtr[k+1]; q++ {
						if j := b.ColIdx[q]; mark[j] != int32(i) {
							mark[j] = int32(i)
							n++
						}
					}
				}
				c.RowPtr[i+1] = n
			}
		}
	})
	for i := 0; i < a.Rows; i++ {
		c.RowPtr[i+1] += c.RowPtr[i]
	}
	nnz := c.RowPtr[a.Rows]
	c.ColIdx = make([]int32, nnz)
	c.Val = make([]float64, nnz)
	hugepage.Advise(c.ColIdx)
	hugepage.Advise(c.Val)

	// Pass 2, numeric: row i's columns go straight into its slot of
	// ColIdx, in order of first appearance, then are sorted; the sums come
	// from the accumulator in sorted order.
	next.Store(0)
	parallel(w, func(int) {
		mark := make([]int32, b.Cols)
		for j := range mark {
			mark[j] = -1
		}
		acc := make([]float64, b.Cols)
		for {
			ch := int(next.Add(1) - 1)
			if ch >= nChunks {
				return
			}
			for i := ch * mulChunk; i < min((ch+1)*mulChunk, a.Rows); i++ {
				lo := c.RowPtr[i]
				cols := c.ColIdx[lo:c.RowPtr[i+1]]
				n := 0
				for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
					k, av := a.ColIdx[p], a.Val[p]
					for q := b.RowPtr[k]; q < b.RowPtr[k+1]; q++ {
						j := b.ColIdx[q]
						if mark[j] != int32(i) {
							mark[j] = int32(i)
							cols[n] = j
							n++
							acc[j] = av * b.Val[q]
						} else {
							acc[j] += av * b.Val[q]
						}
					}
				}
				slices.Sort(cols)
				vals := c.Val[lo : lo+len(cols)]
				for t, j := range cols {
					vals[t] = acc[j]
				}
			}
		}
	})
	return c
}
