package precond

import (
	"fmt"

	"github.com/residua/residua/sparse"
)

// Jacobi is the Jacobi (diagonal) preconditioner M = diag(A); it applies
// M⁻¹ by multiplying with the inverted diagonal, stored once at set-up
// (Saad, 2nd ed., §10.2). It holds no scratch state, so Precondition is safe
// for concurrent use.
type Jacobi struct {
	inv []float64
}

// NewJacobi returns the Jacobi preconditioner of the square matrix a. It
// refuses a missing, zero, negative or non-finite diagonal entry with a
// *DiagonalError naming the first such row. a is only read.
func NewJacobi(a *sparse.CSR) (*Jacobi, error) {
	d, err := diagonal(a)
	if err != nil {
		return nil, err
	}
	for i, v := range d {
		d[i] = 1 / v
	}
	return &Jacobi{inv: d}, nil
}

// Precondition sets dst = M⁻¹·r = r ./ diag(A). dst and r may be the same
// slice. It panics if len(dst) or len(r) is not the matrix order.
func (j *Jacobi) Precondition(dst, r []float64) {
	n := len(j.inv)
	if len(dst) != n || len(r) != n {
		panic(fmt.Sprintf("precond: Jacobi.Precondition: len(dst)=%d, len(r)=%d, want %d", len(dst), len(r), n))
	}
	inv := j.inv
	for i, v := range r[:n] {
		dst[i] = v * inv[i]
	}
}

// PreconditionDot sets dst = M⁻¹·r and returns rᵀdst, summed like
// sparse.Dot(r, dst), on sparse's worker pool (krylov.DotPreconditioner).
// dst must not be r. It panics on the lengths Precondition panics on.
func (j *Jacobi) PreconditionDot(dst, r []float64) float64 {
	n := len(j.inv)
	if len(dst) != n || len(r) != n {
		panic(fmt.Sprintf("precond: Jacobi.PreconditionDot: len(dst)=%d, len(r)=%d, want %d", len(dst), len(r), n))
	}
	return sparse.DiagDot(dst, j.inv, r)
}

// InverseDiagonal returns diag(A)⁻¹, the preconditioner's own array, which
// the caller must not modify: conjugate gradients fuse the apply into their
// residual update through it (krylov.DiagonalPreconditioner).
func (j *Jacobi) InverseDiagonal() []float64 { return j.inv }

// Size returns the matrix order n.
func (j *Jacobi) Size() int { return len(j.inv) }

// Bytes returns the memory the preconditioner holds: the inverted diagonal.
func (j *Jacobi) Bytes() int64 { return int64(len(j.inv)) * 8 }

// diagonal returns a copy of a's diagonal, checking that a is square and
// that every diagonal entry is present, positive and finite.
func diagonal(a *sparse.CSR) ([]float64, error) {
	if a.Rows != a.Cols {
		return nil, fmt.Errorf("precond: %w (%d×%d)", ErrNotSquare, a.Rows, a.Cols)
	}
	d := make([]float64, a.Rows)
	for i := range d {
		v, ok := diagonalEntry(a, i)
		if err := checkDiagonal(i, v, ok); err != nil {
			return nil, err
		}
		d[i] = v
	}
	return d, nil
}

// diagonalEntry finds A[i][i] by binary search in row i's sorted columns.
func diagonalEntry(a *sparse.CSR, i int) (float64, bool) {
	lo, hi := a.RowPtr[i], a.RowPtr[i+1]
	cols := a.ColIdx[lo:hi]
	k, ok := searchInt32(cols, int32(i))
	if !ok {
		return 0, false
	}
	return a.Val[lo+k], true
}

// searchInt32 returns the position of x in the increasing slice s.
func searchInt32(s []int32, x int32) (int, bool) {
	lo, hi := 0, len(s)
	for lo < hi {
		m := int(uint(lo+hi) >> 1)
		if s[m] < x {
			lo = m + 1
		} else {
			hi = m
		}
	}
	return lo, lo < len(s) && s[lo] == x
}
