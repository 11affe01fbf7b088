package sparse

import (
	"errors"
	"fmt"
)

// CSR is a sparse matrix in compressed sparse row form.
//
// Row i's entries are Val[RowPtr[i]:RowPtr[i+1]] in the columns
// ColIdx[RowPtr[i]:RowPtr[i+1]], which are strictly increasing within the row.
// RowPtr has Rows+1 entries, starts at 0 and never decreases. Row pointers are
// int, so the number of stored entries may exceed 2^31; column indices are
// int32, which halves the index traffic of a product, so Rows and Cols must be
// below 2^31.
//
// The fields are exported so that kernels in other packages (preconditioners,
// readers) can walk the arrays without copies. Code that changes them must
// keep the invariants above; Validate checks them.
//
// A CSR also carries what its products have learnt about its arrays: that
// they passed Validate, and the transpose MulVecTrans builds (see "Trusted
// arrays" in the package documentation). That memo belongs to the matrix
// value and goes when it is collected; TransposeBytes reports the memory it
// holds and ForgetTranspose lets it go. A CSR copied by value shares the
// memo, which stays correct because it is keyed by the identity of the
// arrays it describes.
type CSR struct {
	Rows, Cols int
	RowPtr     []int
	ColIdx     []int32
	Val        []float64

	memo *memo // set on first use under memoMu; see mulvec.go
}

// MaxDim is the largest row or column count a CSR can hold.
const MaxDim = 1<<31 - 1

// ErrInvalidCSR is wrapped by the errors that Validate returns.
var ErrInvalidCSR = errors.New("sparse: invalid CSR arrays")

// NewCSR returns a CSR that uses the given arrays (no copy) after checking
// them with Validate.
func NewCSR(rows, cols int, rowPtr []int, colIdx []int32, val []float64) (*CSR, error) {
	a := &CSR{Rows: rows, Cols: cols, RowPtr: rowPtr, ColIdx: colIdx, Val: val}
	if err := a.Validate(); err != nil {
		return nil, err
	}
	return a, nil
}

// Validate reports whether the arrays satisfy the invariants documented on
// CSR: consistent lengths, non-decreasing row pointers, and column indices in
// range and strictly increasing within each row.
func (a *CSR) Validate() error {
	if a.Rows < 0 || a.Cols < 0 || a.Rows > MaxDim || a.Cols > MaxDim {
		return fmt.Errorf("%w: dimensions %d×%d out of range", ErrInvalidCSR, a.Rows, a.Cols)
	}
	if len(a.RowPtr) != a.Rows+1 {
		return fmt.Errorf("%w: %d row pointers for %d rows", ErrInvalidCSR, len(a.RowPtr), a.Rows)
	}
	if a.RowPtr[0] != 0 {
		return fmt.Errorf("%w: first row pointer is %d, not 0", ErrInvalidCSR, a.RowPtr[0])
	}
	nnz := a.RowPtr[a.Rows]
	if len(a.ColIdx) != nnz || len(a.Val) != nnz {
		return fmt.Errorf("%w: %d column indices and %d values for %d entries", ErrInvalidCSR, len(a.ColIdx), len(a.Val), nnz)
	}
	for i := 0; i < a.Rows; i++ {
		lo, hi := a.RowPtr[i], a.RowPtr[i+1]
		if hi < lo {
			return fmt.Errorf("%w: row pointer decreases at row %d", ErrInvalidCSR, i)
		}
		if hi > nnz {
			return fmt.Errorf("%w: row %d ends at entry %d, past the %d entries", ErrInvalidCSR, i, hi, nnz)
		}
		prev := int32(-1)
		for _, j := range a.ColIdx[lo:hi] {
			if j < 0 || int(j) >= a.Cols {
				return fmt.Errorf("%w: row %d has column %d outside [0, %d)", ErrInvalidCSR, i, j, a.Cols)
			}
			if j <= prev {
				return fmt.Errorf("%w: row %d columns not strictly increasing at column %d", ErrInvalidCSR, i, j)
			}
			prev = j
		}
	}
	return nil
}

// NNZ returns the number of stored entries.
func (a *CSR) NNZ() int { return a.RowPtr[a.Rows] }
