package sparse

import (
	"fmt"
	"math"
	"strings"
	"sync"
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
// by stored entries; small matrices run on the caller. It allocates nothing
// after the first call (see "Trusted arrays" in the package doc). dst must
// not overlap x. Panics if len(dst) != Rows or len(x) != Cols, or if the
// arrays fail Validate.
func (a *CSR) MulVec(dst, x []float64) {
	a.checkMul("MulVec", dst, x, a.Rows, a.Cols)
	a.trust("MulVec")
	getPool().matOp(job{op: opMulVec, a: a, d: dst, x: x})
}

// MulVecDot sets dst = A·x and returns xᵀ·dst, computed block by block while
// the block of dst just written is still in cache: the product and the
// curvature pᵀA·p of conjugate gradients in one sweep. The sum equals
// Dot(x, dst) bit for bit. dst must not overlap x. Panics if A is not
// square, a length differs from its order, or the arrays fail Validate.
func (a *CSR) MulVecDot(dst, x []float64) float64 {
	if a.Rows != a.Cols {
		panic(fmt.Sprintf("sparse: MulVecDot: matrix is %d×%d, not square", a.Rows, a.Cols))
	}
	a.checkMul("MulVecDot", dst, x, a.Rows, a.Cols)
	a.trust("MulVecDot")
	return getPool().matOp(job{op: opMulVecDot, a: a, d: dst, x: x})
}

// Residual sets dst = b − A·x and returns dstᵀdst (the squared residual
// norm, summed like Dot) in one sweep. dst may be b but must not overlap x.
// Panics if len(dst) or len(b) != Rows, len(x) != Cols, or the arrays fail
// Validate.
func (a *CSR) Residual(dst, b, x []float64) float64 {
	a.checkMul("Residual", dst, x, a.Rows, a.Cols)
	if len(b) != a.Rows {
		panic(fmt.Sprintf("sparse: Residual: len(b) = %d, want %d", len(b), a.Rows))
	}
	a.trust("Residual")
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
// MulVec. The arrays of A must not change in place after the first call,
// unless ForgetTranspose is called. dst must not overlap x. Panics if
// len(dst) != Cols, len(x) != Rows, or the arrays fail Validate.
func (a *CSR) MulVecTrans(dst, x []float64) {
	a.checkMul("MulVecTrans", dst, x, a.Cols, a.Rows)
	a.trust("MulVecTrans")
	t := a.cachedTranspose()
	if t == nil {
		t = a
	}
	getPool().matOp(job{op: opMulVec, a: t, d: dst, x: x})
}

// arrays identifies a matrix's arrays: a matrix given new arrays (or new
// dimensions) is checked again and gets a new transpose.
type arrays struct {
	rows, cols, nnz int
	rowPtr          *int
	colIdx          *int32
	val             *float64
}

func first[T any](s []T) *T {
	if len(s) == 0 {
		return nil
	}
	return &s[0]
}

func (a *CSR) arrays() arrays {
	return arrays{a.Rows, a.Cols, len(a.Val), first(a.RowPtr), first(a.ColIdx), first(a.Val)}
}

// memo is what the products remember about a matrix's arrays, held by the
// matrix itself (CSR.memo). Each fact is keyed by the arrays it was learnt
// from, so a matrix given new arrays is checked again and gets a new
// transpose.
type memo struct {
	mu         sync.Mutex // guards the fields below
	trusted    arrays     // the arrays that passed Validate (zero: none yet)
	transOf    arrays     // the arrays trans was built from (zero: none)
	trans      *CSR       // nil with transOf set: the matrix is its own transpose
	transBytes int64
}

// memoMu serialises the first installation of a matrix's memo, so that two
// goroutines making the first products of one matrix agree on it. It is
// held only for that pointer check.
var memoMu sync.Mutex

// memo returns a's memo, making it on first use.
func (a *CSR) memoOf() *memo {
	memoMu.Lock()
	m := a.memo
	if m == nil {
		m = &memo{}
		a.memo = m
	}
	memoMu.Unlock()
	return m
}

// trust checks a's arrays with Validate the first time a product sees them
// (one pass over the column indices, about a third of a product's memory
// traffic), and panics if they are invalid; the product kernels then read
// the arrays without bounds checks.
func (a *CSR) trust(op string) {
	m := a.memoOf()
	id := a.arrays()
	m.mu.Lock()
	ok := m.trusted == id
	m.mu.Unlock()
	if ok {
		return
	}
	// Validate slices ColIdx by the row pointers before checking that they
	// stay within the entries; check that first so that a bad pointer gets
	// this message rather than a slice-bounds runtime error.
	if len(a.RowPtr) == a.Rows+1 && a.Rows >= 0 {
		for i := 0; i < a.Rows; i++ {
			if p := a.RowPtr[i+1]; p < a.RowPtr[i] || p > len(a.ColIdx) || p > len(a.Val) {
				panic(fmt.Sprintf("sparse: %s: invalid CSR arrays: row pointer %d of row %d outside [%d, %d]",
					op, p, i, a.RowPtr[i], min(len(a.ColIdx), len(a.Val))))
			}
		}
	}
	if err := a.Validate(); err != nil {
		panic(fmt.Sprintf("sparse: %s: %v", op, strings.TrimPrefix(err.Error(), "sparse: ")))
	}
	m.mu.Lock()
	m.trusted = id
	m.mu.Unlock()
}

// cachedTranspose returns the kept transpose of a, building it on first
// use; nil means a is its own transpose. a must be trusted. Two first
// calls at once may both build it; one result is kept.
func (a *CSR) cachedTranspose() *CSR {
	m := a.memoOf()
	id := a.arrays()
	m.mu.Lock()
	if m.transOf == id {
		t := m.trans
		m.mu.Unlock()
		return t
	}
	m.mu.Unlock()
	t := a.Transpose()
	var bytes int64
	if sameArrays(a, t) {
		t = nil
	} else {
		t.trust("MulVecTrans")
		bytes = t.Bytes()
	}
	m.mu.Lock()
	m.transOf, m.trans, m.transBytes = id, t, bytes
	m.mu.Unlock()
	return t
}

// TransposeBytes returns the memory held by the transpose that MulVecTrans
// keeps for a: zero before the first MulVecTrans, after ForgetTranspose,
// and for a matrix that is exactly its own transpose.
func (a *CSR) TransposeBytes() int64 {
	m := a.memoOf()
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.transOf != a.arrays() {
		return 0
	}
	return m.transBytes
}

// ForgetTranspose drops the transpose that MulVecTrans keeps for a, to free
// its memory, and forgets that a's arrays were checked: call it after
// changing a's arrays in place.
func (a *CSR) ForgetTranspose() {
	m := a.memoOf()
	m.mu.Lock()
	m.trusted, m.transOf, m.trans, m.transBytes = arrays{}, arrays{}, nil, 0
	m.mu.Unlock()
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

// unitRoundoff is u = 2⁻⁵³, the unit roundoff of float64 arithmetic with
// rounding to nearest (Higham, Accuracy and Stability of Numerical
// Algorithms, 2nd ed., §2.1).
const unitRoundoff = 0x1p-53

// ResidualBound returns u·‖((w_i + 1)·(|A|·|x| + |b|)_i)_i‖₂, with u the
// unit roundoff and w_i row i's number of stored entries: a first-order
// bound on ‖fl(b − A·x) − (b − A·x)‖₂, the rounding error of the residual
// that Residual computes. Row i of b − A·x is an inner product of length
// w_i + 1, whose computed value errs by at most γ_{w_i+1}·(|b| + |A|·|x|)_i
// with γ_m = m·u/(1 − m·u) (Higham, 2nd ed., §3.1, the inner product bound
// (3.5), applied to the residual as in §12.1; γ_m taken to first order,
// m·u). A residual whose norm is at this level is rounding noise: by the
// Oettli–Prager theorem (Higham §7.2) x is then the exact solution of a
// system whose entries each moved by a few units of roundoff, and no
// method working in float64 can be expected to push it lower. The rows are
// split over the worker pool; block sums are added in block order, so the
// result does not depend on the worker count. Panics if len(x) != Cols,
// len(b) != Rows, or the arrays fail Validate.
func (a *CSR) ResidualBound(x, b []float64) float64 {
	if len(x) != a.Cols || len(b) != a.Rows {
		panic(fmt.Sprintf("sparse: ResidualBound: %d×%d matrix with len(x) = %d, len(b) = %d",
			a.Rows, a.Cols, len(x), len(b)))
	}
	a.trust("ResidualBound")
	return unitRoundoff * math.Sqrt(getPool().matOp(job{op: opResidualBound, a: a, d: b, x: x, y: b}))
}
