package sparse

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

var _ mat.Matrix = (*CSR)(nil)

// Dims returns the number of rows and columns.
func (a *CSR) Dims() (r, c int) { return a.Rows, a.Cols }

// At returns a(i, j), zero where nothing is stored, by binary search in row
// i. Panics if i or j is out of range.
func (a *CSR) At(i, j int) float64 {
	if uint(i) >= uint(a.Rows) || uint(j) >= uint(a.Cols) {
		panic(fmt.Sprintf("sparse: At(%d, %d) outside a %d×%d matrix", i, j, a.Rows, a.Cols))
	}
	if p := a.find(i, j); p >= 0 {
		return a.Val[p]
	}
	return 0
}

// find returns the position of entry (i, j) in ColIdx and Val, or −1.
func (a *CSR) find(i, j int) int {
	lo, hi := a.RowPtr[i], a.RowPtr[i+1]
	c := int32(j)
	for lo < hi {
		m := int(uint(lo+hi) >> 1)
		if a.ColIdx[m] < c {
			lo = m + 1
		} else {
			hi = m
		}
	}
	if lo < a.RowPtr[i+1] && a.ColIdx[lo] == c {
		return lo
	}
	return -1
}

// T returns the transpose as a gonum mat.Matrix view, without copying, so
// that *CSR satisfies mat.Matrix. Transpose makes a CSR copy.
func (a *CSR) T() mat.Matrix { return mat.Transpose{Matrix: a} }

// Transpose returns Aᵀ as a new CSR: a counting pass over the column
// indices, then one pass over the rows in order, which leaves each row of
// the transpose with increasing column indices (no sort).
func (a *CSR) Transpose() *CSR {
	t := &CSR{
		Rows:   a.Cols,
		Cols:   a.Rows,
		RowPtr: make([]int, a.Cols+1),
		ColIdx: make([]int32, a.NNZ()),
		Val:    make([]float64, a.NNZ()),
	}
	for _, j := range a.ColIdx {
		t.RowPtr[j+1]++
	}
	for j := 0; j < a.Cols; j++ {
		t.RowPtr[j+1] += t.RowPtr[j]
	}
	// next[j] is where column j's next entry goes; reuse RowPtr shifted by
	// one so that no other array is needed.
	next := t.RowPtr[:a.Cols]
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			j := a.ColIdx[p]
			q := next[j]
			t.ColIdx[q] = int32(i)
			t.Val[q] = a.Val[p]
			next[j] = q + 1
		}
	}
	// next[j] now holds the end of column j, the start of column j+1: shift
	// back.
	copy(t.RowPtr[1:], t.RowPtr[:a.Cols])
	t.RowPtr[0] = 0
	return t
}

// Diagonal returns the diagonal a(i, i), 0 ≤ i < min(Rows, Cols), with zero
// where no entry is stored. It writes into dst and returns it; if dst is nil
// a new slice is allocated. Panics if dst is not nil and its length is not
// min(Rows, Cols).
func (a *CSR) Diagonal(dst []float64) []float64 {
	n := min(a.Rows, a.Cols)
	if dst == nil {
		dst = make([]float64, n)
	} else if len(dst) != n {
		panic(fmt.Sprintf("sparse: Diagonal: len(dst) = %d, want %d", len(dst), n))
	}
	for i := range dst {
		if p := a.find(i, i); p >= 0 {
			dst[i] = a.Val[p]
		} else {
			dst[i] = 0
		}
	}
	return dst
}

// ColumnNorms sets dst[j] = ‖A(:, j)‖₂ for every column j, accumulating the
// squares of each column's entries in storage (row) order, so the result is
// the same bits on every call. Column scaling for least squares needs it.
// Panics if len(dst) != Cols.
func (a *CSR) ColumnNorms(dst []float64) {
	if len(dst) != a.Cols {
		panic(fmt.Sprintf("sparse: ColumnNorms: len(dst) = %d, want %d", len(dst), a.Cols))
	}
	clear(dst)
	for k, j := range a.ColIdx {
		v := a.Val[k]
		dst[j] += v * v
	}
	for j := range dst {
		dst[j] = math.Sqrt(dst[j])
	}
}

// Lower returns the lower triangle of A, diagonal included (the entries with
// j ≤ i), as a new CSR of the same dimensions: the pattern incomplete
// Cholesky, IC(0), works on.
func (a *CSR) Lower() *CSR { return a.triangle(true) }

// Upper returns the upper triangle of A, diagonal included (j ≥ i), as a new
// CSR of the same dimensions.
func (a *CSR) Upper() *CSR { return a.triangle(false) }

func (a *CSR) triangle(lower bool) *CSR {
	// The split point of row i: the first entry with column > i (lower
	// keeps those before it) or ≥ i (upper keeps those from it on).
	split := func(i int) int {
		lo, hi := a.RowPtr[i], a.RowPtr[i+1]
		for lo < hi {
			m := int(uint(lo+hi) >> 1)
			c := int(a.ColIdx[m])
			if c < i || (lower && c == i) {
				lo = m + 1
			} else {
				hi = m
			}
		}
		return lo
	}
	t := &CSR{Rows: a.Rows, Cols: a.Cols, RowPtr: make([]int, a.Rows+1)}
	for i := 0; i < a.Rows; i++ {
		s := split(i)
		if lower {
			t.RowPtr[i+1] = t.RowPtr[i] + s - a.RowPtr[i]
		} else {
			t.RowPtr[i+1] = t.RowPtr[i] + a.RowPtr[i+1] - s
		}
	}
	nnz := t.RowPtr[a.Rows]
	t.ColIdx = make([]int32, 0, nnz)
	t.Val = make([]float64, 0, nnz)
	for i := 0; i < a.Rows; i++ {
		s := split(i)
		lo, hi := a.RowPtr[i], s
		if !lower {
			lo, hi = s, a.RowPtr[i+1]
		}
		t.ColIdx = append(t.ColIdx, a.ColIdx[lo:hi]...)
		t.Val = append(t.Val, a.Val[lo:hi]...)
	}
	return t
}

// Bytes returns the memory the matrix's arrays take: 8 bytes per row
// pointer, 4 per column index and 8 per value (by length, not capacity; the
// struct and any transpose kept by MulVecTrans are not counted).
func (a *CSR) Bytes() int64 {
	return 8*int64(len(a.RowPtr)) + 4*int64(len(a.ColIdx)) + 8*int64(len(a.Val))
}
