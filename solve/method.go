package solve

import "fmt"

// Method names an iterative method, or Auto for residua's choice. Its
// values are the stable lower-case names used on the command line, in JSON
// and on the wire.
type Method string

const (
	// Auto lets residua choose: conjugate gradients for a system (MINRES
	// when the matrix shows it is not positive definite: a diagonal entry
	// that is not positive, or a breakdown of conjugate gradients), LSQR
	// for least squares.
	Auto Method = "auto"
	// CG is conjugate gradients, preconditioned or not, for a symmetric
	// positive definite A (krylov.CG).
	CG Method = "cg"
	// LSQR is the Golub–Kahan bidiagonalization method of Paige and
	// Saunders for least squares (krylov.LSQR).
	LSQR Method = "lsqr"
	// CGLS is conjugate gradients on the normal equations without forming
	// them, for least squares (krylov.CGLS).
	CGLS Method = "cgls"
	// MINRES is the minimum residual method of Paige and Saunders for a
	// symmetric A that need not be definite (krylov.MINRES), with an SPD
	// preconditioner.
	MINRES Method = "minres"
)

// Methods lists the methods in the order the documentation gives them.
var Methods = []Method{Auto, CG, LSQR, CGLS, MINRES}

// ParseMethod returns the Method named s; the empty string is Auto. It
// accepts exactly the names above and returns an error listing them for
// anything else.
func ParseMethod(s string) (Method, error) {
	if s == "" {
		return Auto, nil
	}
	for _, m := range Methods {
		if s == string(m) {
			return m, nil
		}
	}
	return "", fmt.Errorf("unknown method %q (want auto, cg, lsqr, cgls or minres)", s)
}

// LeastSquares reports whether m solves least-squares problems.
func (m Method) LeastSquares() bool { return m == LSQR || m == CGLS }

// Name returns the method's name for people, as the summary prints it;
// precond says whether a preconditioner is in use.
func (m Method) Name(precond bool) string {
	switch m {
	case CG:
		if precond {
			return "preconditioned conjugate gradients"
		}
		return "conjugate gradients"
	case LSQR:
		return "LSQR"
	case CGLS:
		return "CGLS"
	case MINRES:
		if precond {
			return "preconditioned MINRES"
		}
		return "MINRES"
	case Auto, "":
		return "the automatic choice"
	}
	return string(m)
}
