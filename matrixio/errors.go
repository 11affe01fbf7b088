package matrixio

import (
	"errors"
	"fmt"
)

// The reasons a Matrix Market stream is rejected. A *ParseError wraps one of
// them (test with errors.Is); the rest of its message says what was expected
// and what was found. Input that ends too early is reported as a *ParseError
// wrapping io.ErrUnexpectedEOF instead.
var (
	ErrBanner        = errors.New("bad banner line")
	ErrObject        = errors.New("unsupported object")
	ErrFormat        = errors.New("unsupported format")
	ErrField         = errors.New("unsupported field")
	ErrSymmetry      = errors.New("unsupported symmetry")
	ErrComplex       = errors.New("complex values are not supported")
	ErrSizeLine      = errors.New("bad size line")
	ErrEntryCount    = errors.New("more entries than the size line declares")
	ErrEntryFields   = errors.New("wrong number of fields in an entry")
	ErrIndexRange    = errors.New("index out of range")
	ErrValue         = errors.New("not a number")
	ErrNotFinite     = errors.New("value is not finite")
	ErrBothTriangles = errors.New("entries on both sides of the diagonal in a symmetric file")
	ErrSkewDiagonal  = errors.New("nonzero diagonal entry in a skew-symmetric file")
	ErrLimit         = errors.New("size exceeds a limit")
	ErrMostlyEmpty   = errors.New("dimensions dwarf the entries")
	ErrShape         = errors.New("not a vector")
	ErrNoRHS         = errors.New("bundle holds no right-hand side")
)

// ParseError reports a defect at a position of a Matrix Market stream, in the
// manner of encoding/csv's ParseError.
type ParseError struct {
	File   string // file name, or "" for a stream without one
	Line   int    // 1-based line number
	Column int    // 1-based byte column in the line, or 0 when the whole line is meant
	Err    error  // the reason: wraps one of the Err... values or io.ErrUnexpectedEOF
}

func (e *ParseError) Error() string {
	file := e.File
	if file == "" {
		file = "<input>"
	}
	if e.Column > 0 {
		return fmt.Sprintf("%s:%d:%d: %v", file, e.Line, e.Column, e.Err)
	}
	return fmt.Sprintf("%s:%d: %v", file, e.Line, e.Err)
}

func (e *ParseError) Unwrap() error { return e.Err }

// reason builds the error of a ParseError: the named reason followed by what
// was expected and what was found.
func reason(base error, format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{base}, args...)...)
}
