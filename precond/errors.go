package precond

import (
	"errors"
	"fmt"
)

// Named reasons for a refused diagonal, for errors.Is on a *DiagonalError.
var (
	// ErrMissingDiagonal: the row stores no diagonal entry.
	ErrMissingDiagonal = errors.New("diagonal entry is missing")
	// ErrZeroDiagonal: the diagonal entry is zero.
	ErrZeroDiagonal = errors.New("diagonal entry is zero")
	// ErrNegativeDiagonal: the diagonal entry is negative, so A is not
	// positive definite.
	ErrNegativeDiagonal = errors.New("diagonal entry is negative")
	// ErrNotFiniteDiagonal: the diagonal entry is NaN or ±Inf.
	ErrNotFiniteDiagonal = errors.New("diagonal entry is not finite")
)

// ErrBreakdown is wrapped by *BreakdownError: incomplete Cholesky met a
// pivot that was not positive at every shift it tried.
var ErrBreakdown = errors.New("incomplete Cholesky broke down")

// ErrNotSquare is returned for a matrix with different row and column
// counts.
var ErrNotSquare = errors.New("matrix is not square")

// ErrTooLarge is returned when a factor would hold 2³¹ or more entries,
// more than its int32 row pointers can address.
var ErrTooLarge = errors.New("factor too large for int32 row pointers")

// DiagonalError reports a diagonal entry that a preconditioner cannot use.
// Row is 0-based; the message names it 1-based, as a person (and the Matrix
// Market file) counts rows. Value is the entry (0 when it is missing).
type DiagonalError struct {
	Row   int
	Value float64
	Err   error // ErrMissingDiagonal, ErrZeroDiagonal, ErrNegativeDiagonal or ErrNotFiniteDiagonal
}

func (e *DiagonalError) Error() string {
	if errors.Is(e.Err, ErrMissingDiagonal) {
		return fmt.Sprintf("precond: row %d: %v", e.Row+1, e.Err)
	}
	return fmt.Sprintf("precond: row %d: %v (%g)", e.Row+1, e.Err, e.Value)
}

func (e *DiagonalError) Unwrap() error { return e.Err }

// BreakdownError reports that IC(0) found no usable shift: at the last shift
// tried, the pivot of Row (0-based; 1-based in the message) was Pivot, which
// is not positive (or not finite). Tries counts the factorizations
// attempted, including the unshifted one.
type BreakdownError struct {
	Row   int
	Pivot float64
	Shift float64 // the last shift α tried, in A + α·diag(A)
	Tries int
}

func (e *BreakdownError) Error() string {
	return fmt.Sprintf("precond: %v: pivot %.3g at row %d with shift %g, after %d tries", ErrBreakdown, e.Pivot, e.Row+1, e.Shift, e.Tries)
}

func (e *BreakdownError) Unwrap() error { return ErrBreakdown }

// checkDiagonal returns the error for diagonal value v of row i (present
// says whether the row stores one), or nil when v is positive and finite.
func checkDiagonal(i int, v float64, present bool) error {
	switch {
	case !present:
		return &DiagonalError{Row: i, Err: ErrMissingDiagonal}
	case v != v || v > maxFloat || v < -maxFloat:
		return &DiagonalError{Row: i, Value: v, Err: ErrNotFiniteDiagonal}
	case v == 0:
		return &DiagonalError{Row: i, Value: v, Err: ErrZeroDiagonal}
	case v < 0:
		return &DiagonalError{Row: i, Value: v, Err: ErrNegativeDiagonal}
	}
	return nil
}

const maxFloat = 1.7976931348623157e308
