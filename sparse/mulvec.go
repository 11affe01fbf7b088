package sparse

import (
	"fmt"
	"math"
	"runtime"
	"sync"
	"weak"
)

func (a *CSR) checkMul(op string, dst, x []float64, dstLen, xLen int) {
	if len(dst) != dstLen || len(x) != xLen {
		panic(fmt.Sprintf("sparse: %s: %d×%d matrix with len(dst) = %d, len(x) = %d; want %d and %d",
			op, a.Rows, a.Cols, len(dst), len(x), dstLen, xLen))
	}
}

// MulVec sets dst = A·x. Each dst[i] is the sum of row i's products in
// column order, so the result does not depend on the number of workers.
// The rows are split over the worker pool (see Workers) in ranges balanced
// by stored entries; small matrices run on the caller. It allocates nothing.
// dst must not overlap x. Panics if len(dst) != Rows or len(x) != Cols.
func (a *CSR) MulVec(dst, x []float64) {
	a.checkMul("MulVec", dst, x, a.Rows, a.Cols)
	getPool().matOp(job{op: opMulVec, a: a, d: dst, x: x})
}

// MulVecDot sets dst = A·x and returns xᵀ·dst, computed block by block while
// the block of dst just written is still in cache: the product and the
// curvature pᵀA·p of conjugate gradients in one sweep. The sum equals
// Dot(x, dst) bit for bit. dst must not overlap x. Panics if A is not square
// or a length differs from its order.
func (a *CSR) MulVecDot(dst, x []float64) float64 {
	if a.Rows != a.Cols {
		panic(fmt.Sprintf("sparse: MulVecDot: matrix is %d×%d, not square", a.Rows, a.Cols))
	}
	a.checkMul("MulVecDot", dst, x, a.Rows, a.Cols)
	return getPool().matOp(job{op: opMulVecDot, a: a, d: dst, x: x})
}

// Residual sets dst = b − A·x and returns dstᵀdst (the squared residual
// norm, summed like Dot) in one sweep. dst may be b but must not overlap x.
// Panics if len(dst) or len(b) != Rows, or len(x) != Cols.
func (a *CSR) Residual(dst, b, x []float64) float64 {
	a.checkMul("Residual", dst, x, a.Rows, a.Cols)
	if len(b) != a.Rows {
		panic(fmt.Sprintf("sparse: Residual: len(b) = %d, want %d", len(b), a.Rows))
	}
	return getPool().matOp(job{op: opResidual, a: a, d: dst, x: x, y: b})
}

// MulVecTrans sets dst = Aᵀ·x for any shape of A. Each dst[j] is the sum of
// column j's products in row order, so the result does not depend on the
// number of workers.
//
// It runs as MulVec on the transpose, which the first call builds and keeps
// for later calls (the memory of one more copy of the arrays: 12 bytes per
// entry plus 8 per column). A matrix that is exactly symmetric (the same
// pattern, and values equal bit for bit) is detected then and used as its
// own transpose, at no extra memory. Later calls therefore cost the same as
// MulVec. The arrays of A must not change after the first call, unless
// ForgetTranspose is called. dst must not overlap x. Panics if
// len(dst) != Cols or len(x) != Rows.
func (a *CSR) MulVecTrans(dst, x []float64) {
	a.checkMul("MulVecTrans", dst, x, a.Cols, a.Rows)
	t := a.cachedTranspose()
	if t == nil {
		t = a
	}
	getPool().matOp(job{op: opMulVec, a: t, d: dst, x: x})
}

// transEntry is a kept transpose, with the identity of the arrays it was
// built from, so that a matrix given new arrays gets a new transpose.
type transEntry struct {
	t         *CSR // nil: the matrix is its own transpose
	rows      int
	rowPtr    *int
	colIdx    *int32
	val       *float64
	nnz       int
	symmetric bool
}

// transCache maps a matrix, held weakly, to its *transEntry. A cleanup
// attached to the matrix deletes the entry when the matrix is collected, so
// the cache never keeps a matrix or its transpose alive.
var transCache sync.Map

func first[T any](s []T) *T {
	if len(s) == 0 {
		return nil
	}
	return &s[0]
}

func (a *CSR) arraysMatch(e *transEntry) bool {
	return e.rows == a.Rows && e.nnz == a.NNZ() && e.rowPtr == first(a.RowPtr) &&
		e.colIdx == first(a.ColIdx) && e.val == first(a.Val)
}

// cachedTranspose returns the kept transpose of a, building it on first
// use; nil means a is its own transpose.
func (a *CSR) cachedTranspose() *CSR {
	key := weakKey(a)
	if v, ok := transCache.Load(key); ok {
		if e := v.(*transEntry); a.arraysMatch(e) {
			return e.t
		}
	}
	t := a.Transpose()
	e := &transEntry{rows: a.Rows, rowPtr: first(a.RowPtr), colIdx: first(a.ColIdx), val: first(a.Val), nnz: a.NNZ()}
	if sameArrays(a, t) {
		e.symmetric = true
	} else {
		e.t = t
	}
	if _, loaded := transCache.Swap(key, e); !loaded {
		runtime.AddCleanup(a, func(k weak.Pointer[CSR]) { transCache.Delete(k) }, key)
	}
	return e.t
}

// ForgetTranspose drops the transpose that MulVecTrans keeps for a, to free
// its memory or because a's arrays were changed in place.
func (a *CSR) ForgetTranspose() {
	transCache.Delete(weakKey(a))
}

// sameArrays reports whether a and b have identical dimensions, pattern and
// value bits.
func sameArrays(a, b *CSR) bool {
	if a.Rows != b.Rows || a.Cols != b.Cols || a.NNZ() != b.NNZ() {
		return false
	}
	for i, p := range a.RowPtr {
		if b.RowPtr[i] != p {
			return false
		}
	}
	for k, c := range a.ColIdx {
		if b.ColIdx[k] != c || math.Float64bits(a.Val[k]) != math.Float64bits(b.Val[k]) {
			return false
		}
	}
	return true
}

// weakKey is the transCache key of a.
func weakKey(a *CSR) weak.Pointer[CSR] { return weak.Make(a) }
