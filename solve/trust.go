package solve

import (
	"fmt"
	"math"

	"github.com/residua/residua/sparse"
)

// TrustThreshold is the estimated relative forward error above which a
// summary warns that x may not be accurate. Our own choice: three correct
// digits is about the least an engineering use of a solution can work with,
// and below it a user should be told before relying on x.
const TrustThreshold = 1e-3

// Warning codes, the stable values of Summary.Warning.
const (
	// WarnInaccurate: the estimated forward error exceeds TrustThreshold.
	WarnInaccurate = "inaccurate"
	// WarnSingular: the matrix is singular or numerically singular, so x
	// is one of many solutions (or none is accurate).
	WarnSingular = "singular"
)

// zeroDiagonal counts the rows of a whose diagonal entry is zero or not
// stored. A positive semidefinite matrix with a zero diagonal entry has
// that whole row and column zero (|a_ij|² ≤ a_ii·a_jj: Golub and Van Loan,
// Matrix Computations, 4th ed., §4.2.1), so it is singular; an indefinite
// one breaks conjugate gradients down. Either way the count says A is not
// positive definite.
func zeroDiagonal(a *sparse.CSR) int {
	n := 0
	for i := 0; i < min(a.Rows, a.Cols); i++ {
		d := 0.0
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			if int(a.ColIdx[p]) == i {
				d = a.Val[p]
				break
			}
		}
		if d == 0 {
			n++
		}
	}
	return n
}

// assessTrust fills the forward-error estimate and, where it is called
// for, the warning. zeroDiag is zeroDiagonal of a system's matrix.
func (s *Summary) assessTrust(zeroDiag int) {
	if Outcome(s.Status) == SetupFailed || Outcome(s.Status) == Refused {
		return
	}
	if s.LeastSquares() {
		s.assessLeastSquares()
		return
	}
	rel := float64(s.RelativeResidual)
	precond := s.Preconditioner != "" && s.Preconditioner != "none"
	lmin, lmax := num(s.LambdaMin), num(s.LambdaMax)
	n := float64(max(s.Rows, 1))
	switch {
	case zeroDiag > 0:
		s.warn(WarnSingular, fmt.Sprintf("%d diagonal entries of A are zero: a positive semidefinite matrix with a zero diagonal entry has that whole row and column zero, so A is singular and x is one of many solutions; check the model (unconstrained degrees of freedom, rows with no equation)", zeroDiag))
	case !precond && lmin > 0 && lmin < n*eps*lmax:
		s.warn(WarnSingular, fmt.Sprintf("A is numerically singular: its smallest eigenvalue estimate %s is below n·ε times the largest, %s, so no tolerance makes x accurate; check the model for a missing constraint", Sci(lmin), Sci(n*eps*lmax)))
	}
	cond := float64(s.CondEstimate)
	if !(cond > 0) || s.Iterations < 2 {
		if s.Warning == "" {
			s.ForwardErrorNote = "no estimate: fewer than two iterations gave no condition estimate"
		}
		return
	}
	est := cond * rel
	s.ForwardErrorEstimate = NumPtr(est)
	// The perturbation bound ‖x − x*‖/‖x*‖ ≤ κ(A)·‖b − A·x‖/‖b‖ (Higham,
	// Accuracy and Stability of Numerical Algorithms, 2nd ed., §7.1;
	// Golub and Van Loan, 4th ed., §2.6.2).
	if precond {
		s.ForwardErrorNote = "κ·‖r‖/‖b‖ with κ the Lanczos estimate for the preconditioned operator, a lower bound on its condition number; the bound on the error needs A's own condition number, which can be larger by up to the preconditioner's, so the error may exceed this estimate"
	} else {
		s.ForwardErrorNote = "κ·‖r‖/‖b‖ with κ the Lanczos estimate of A's condition number, which approaches it from below: a lower estimate of the bound on the relative error ‖x − x*‖/‖x*‖"
	}
	if est > TrustThreshold && s.Warning == "" {
		s.warn(WarnInaccurate, fmt.Sprintf("the relative error of x may be as large as %s (condition estimate %s times the relative residual %s); a smaller --rtol, a better preconditioner, or checking the model for a nearly singular matrix can help", Sci(est), Sci(cond), Sci(rel)))
	}
}

// assessLeastSquares estimates the forward error of a least-squares x from
// the sensitivity of the problem (Golub and Van Loan, 4th ed., §5.3.7):
// for relative perturbations of size η in A and b,
//
//	‖x̂ − x‖/‖x‖ ≲ η·(2κ + κ²·tan θ),  sin θ = ‖r‖/‖b‖,
//
// with η the backward error the stopping rule certifies (the smaller of
// ‖r‖/(‖A‖·‖x‖ + ‖b‖) and ‖Aᵀr‖/(‖A‖·‖r‖): Paige and Saunders 1982, §6)
// and κ LSQR's condition estimate (Paige and Saunders §5.3), which
// estimates the Frobenius condition ‖Ā‖_F·‖Ā⁺‖_F, at least the 2-norm
// condition number; with column scaling both are of the scaled problem.
func (s *Summary) assessLeastSquares() {
	if len(s.ZeroColumns) > 0 && num(s.Damp) == 0 {
		s.warn(WarnSingular, fmt.Sprintf("A has %d zero columns, so it is rank deficient and the least-squares solution is not unique: x is one of many minimisers (their entries there keep x0's values); damping (--damp) or removing the unknowns makes it unique", len(s.ZeroColumns)))
	}
	cond, anorm := float64(s.CondEstimate), num(s.NormEstimate)
	r, b, x, g := num(s.ResidualNorm), float64(s.RHSNorm), num(s.XNorm), num(s.NormalResidualNorm)
	if !(cond > 0) || !(anorm > 0) || s.Iterations < 1 {
		if s.Warning == "" {
			s.ForwardErrorNote = "no estimate: no iteration gave a condition estimate"
		}
		return
	}
	eta := r / (anorm*x + b)
	if r > 0 {
		eta = min(eta, g/(anorm*r))
	}
	tan := 0.0
	if b > 0 {
		sin := min(r/b, 1)
		if cos := math.Sqrt(1 - sin*sin); cos > 0 {
			tan = sin / cos
		} else {
			tan = math.Inf(1)
		}
	}
	est := eta * (2*cond + cond*cond*tan)
	s.ForwardErrorEstimate = NumPtr(est)
	s.ForwardErrorNote = "η·(2κ + κ²·tan θ), the least-squares sensitivity bound, with η the backward error the stopping rule certifies, κ LSQR's estimate of the (Frobenius) condition number, sin θ = ‖r‖/‖b‖; of the scaled problem when the columns were scaled"
	if est > TrustThreshold && s.Warning == "" {
		s.warn(WarnInaccurate, fmt.Sprintf("the relative error of x may be as large as %s (condition estimate %s, backward error %s); smaller --atol and --btol, or checking the model for nearly dependent columns, can help", Sci(est), Sci(cond), Sci(eta)))
	}
}

// eps is the unit roundoff of float64, 2⁻⁵³.
const eps = 0x1p-53

func (s *Summary) warn(code, text string) { s.Warning, s.WarningText = code, text }

// num reads an optional figure, zero when absent.
func num(v *Num) float64 {
	if v == nil {
		return 0
	}
	return float64(*v)
}
