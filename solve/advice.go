package solve

import (
	"errors"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
)

// Advice returns what a user can do about a solve that failed or broke
// down, in words, or "" when there is nothing to add to the error. The
// reasoning is the textbook's: an SPD matrix has a positive diagonal
// (aᵢᵢ = eᵢᵀAeᵢ > 0) and pᵀAp > 0 for every p ≠ 0 (Golub and Van Loan,
// Matrix Computations, 4th ed., §4.2), so a non-positive diagonal entry or
// a non-positive curvature pᵀAp found by conjugate gradients proves that
// A is not positive definite; CG then does not apply, whatever the
// preconditioner.
func Advice(err error) string {
	if err == nil {
		return ""
	}
	var de *precond.DiagonalError
	if errors.As(err, &de) {
		switch {
		case errors.Is(de.Err, precond.ErrNegativeDiagonal):
			return "a negative diagonal entry means A is not positive definite, so conjugate gradients do not apply: " +
				"if A is negative definite, solve (−A)·x = −b instead; otherwise solve it in the least-squares sense " +
				"(LSQR: residua lsq on the command line); the preconditioner none only shows where conjugate gradients break down"
		case errors.Is(de.Err, precond.ErrZeroDiagonal), errors.Is(de.Err, precond.ErrMissingDiagonal):
			return "a zero diagonal entry means A is not positive definite (a saddle-point or singular system?): " +
				"check the model (an unconstrained degree of freedom gives an empty row), or solve it in the " +
				"least-squares sense (LSQR: residua lsq on the command line)"
		case errors.Is(de.Err, precond.ErrNotFiniteDiagonal):
			return "the matrix holds NaN or Inf: check how it was assembled"
		}
	}
	var pb *precond.BreakdownError
	if errors.As(err, &pb) {
		return "incomplete Cholesky found no positive pivot even with diagonal shifts: try the jacobi preconditioner, " +
			"and check that A is positive definite"
	}
	switch {
	case errors.Is(err, krylov.ErrNotPositiveDefinite):
		return "conjugate gradients found a direction p with pᵀAp ≤ 0, which proves A is not positive definite: " +
			"check the model for a sign error or a missing constraint, or solve it in the least-squares sense (LSQR: residua lsq on the command line)"
	case errors.Is(err, krylov.ErrPreconditionerNotSPD):
		return "the preconditioner is not positive definite for this matrix: try the jacobi preconditioner, or none"
	case errors.Is(err, krylov.ErrNotFinite):
		return "NaN or Inf appeared in the iteration: check the matrix and b for huge or non-finite entries"
	case errors.Is(err, ErrNotSymmetric):
		return "conjugate gradients need a symmetric matrix: solve it in the least-squares sense (LSQR: residua lsq on the command line), " +
			"or check how the matrix was assembled if it should be symmetric"
	case errors.Is(err, ErrNotSquare):
		return "a rectangular system has no unique solution in general: solve it in the least-squares sense (LSQR: residua lsq on the command line)"
	}
	return ""
}
