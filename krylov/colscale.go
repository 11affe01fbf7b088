package krylov

import (
	"errors"
	"fmt"
	"math"
)

// ColumnNormer is implemented by operators that can report the Euclidean
// norms of their columns, which column scaling needs. *sparse.CSR is meant to
// satisfy it; a matrix-free operator can too, if it knows its columns.
type ColumnNormer interface {
	// ColumnNorms sets dst[j] = ‖A(:, j)‖₂ for every column j.
	// len(dst) == cols.
	ColumnNorms(dst []float64)
}

// ErrNoColumnNorms is returned by LSQ when ScaleColumns is asked for and the
// operator does not implement ColumnNormer.
var ErrNoColumnNorms = errors.New("krylov: column scaling needs an operator with a ColumnNorms method")

// Scaling chooses the right preconditioner of the least-squares methods.
type Scaling int

const (
	// ScaleAuto uses ScaleColumns when the operator implements ColumnNormer
	// and m ≥ n, and ScaleNone otherwise. For m < n, AᵀA + λ²I has the
	// eigenvalue λ² (0 undamped) n − m times over, a cluster that the Krylov
	// methods resolve in one step and that scaling would spread out; and
	// undamped, scaling would change which of the many minimisers is found
	// (see ScaleColumns), when the wanted one is the minimum-norm solution.
	ScaleAuto Scaling = iota
	// ScaleColumns iterates on z with x = D·z, D = diag(1/√(‖A(:, j)‖₂² +
	// λ²)): the inverse square roots of the diagonal of the normal matrix
	// AᵀA + λ²I, so that the augmented [A; λI]·D has columns of unit norm
	// (Björck 1996, §7.2.1; Paige and Saunders 1982, §5.3 recommend it). It
	// leaves the solution unchanged whenever the problem has one minimiser
	// (full column rank or Damp > 0). When A is rank deficient and Damp = 0
	// the methods return, among the minimisers, the one with least
	// ‖D⁻¹·(x − x0)‖ instead of least ‖x − x0‖, with one exception that
	// costs nothing: zero columns of A, which are left unscaled (D_jj = 1
	// when λ = 0) and reported.
	ScaleColumns
	// ScaleNone iterates on A itself.
	ScaleNone
)

var scalingNames = map[Scaling]string{ScaleAuto: "auto", ScaleColumns: "colscale", ScaleNone: "none"}

// String returns the scaling's stable lower-case name: "auto", "colscale" or
// "none".
func (s Scaling) String() string {
	if n, ok := scalingNames[s]; ok {
		return n
	}
	return fmt.Sprintf("scaling(%d)", int(s))
}

// ParseScaling returns the Scaling named s ("auto", "colscale" or "none",
// the names String gives), or an error listing them.
func ParseScaling(s string) (Scaling, error) {
	for sc, name := range scalingNames {
		if s == name {
			return sc, nil
		}
	}
	return 0, fmt.Errorf("unknown column scaling %q (want auto, colscale or none)", s)
}

// ChooseScaling resolves ScaleAuto for an m×n operator (hasNorms: it
// implements ColumnNormer) by the rule documented on ScaleAuto, and says
// why in words. Any other scaling is returned as it is, "as requested".
func ChooseScaling(sc Scaling, m, n int, hasNorms bool) (Scaling, string) {
	switch {
	case sc != ScaleAuto:
		return sc, "as requested"
	case !hasNorms:
		return ScaleNone, "auto: the operator cannot give its column norms"
	case m >= n:
		return ScaleColumns, fmt.Sprintf("auto: %d rows ≥ %d columns", m, n)
	}
	return ScaleNone, fmt.Sprintf("auto: %d rows < %d columns, where scaling would change the minimum-norm solution", m, n)
}

// columnScale turns the column norms in d, in place, into the scale factors
// D_jj = 1/√(‖A(:, j)‖₂² + λ²): the inverse square roots of the diagonal of
// the damped normal matrix AᵀA + λ²I, i.e. the unit column norms of the
// augmented [A; λI]·D (Jacobi scaling of the normal equations; Björck 1996,
// §7.2.1). It returns the indices of the zero columns of A; their factor is
// 1 when λ = 0 (left unscaled, never divided by zero) and 1/λ otherwise. A
// norm that is negative, NaN or infinite is bad data: the first one's index
// is returned in bad (−1 when there is none) and its entry is left as it was.
func columnScale(d []float64, lam float64) (zero []int, bad int) {
	bad = -1
	lam2 := lam * lam
	for j, c := range d {
		switch {
		case c == 0:
			zero = append(zero, j)
			d[j] = 1
			if lam2 > 0 {
				d[j] = 1 / lam
			}
		case math.IsNaN(c) || math.IsInf(c, 0) || c < 0:
			if bad < 0 {
				bad = j // left as it is, for the error message
			}
		default:
			d[j] = 1 / math.Sqrt(c*c+lam2)
		}
	}
	return zero, bad
}
