package precond

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse"
)

// Choice is a preconditioner built for one matrix, with what was chosen and
// why. It is built once and reused across solves (M is safe for concurrent
// use).
type Choice struct {
	// Kind is the preconditioner built: KindNone, KindJacobi, KindIC0 or
	// KindAMG, never KindAuto.
	Kind Kind
	// Reason says in words why Kind was built, e.g.
	// "ic0: factorization succeeded with shift 0".
	Reason string
	// Shift and Tries are IC(0)'s shift α and the factorizations attempted
	// (zero unless IC(0) was attempted; under KindAuto they describe the
	// attempt even when another kind was chosen).
	Shift float64
	Tries int
	// Setup is the wall time New spent, attempts that were discarded
	// included.
	Setup time.Duration
	// Bytes is the memory M holds (zero for none).
	Bytes int64
	// M applies the preconditioner; nil for KindNone, so that CG runs
	// unpreconditioned.
	M interface{ Precondition(dst, r []float64) }
	// AMG is the multigrid set-up report (KindAMG only, nil otherwise).
	AMG *amg.Report
}

// Options are the settings of the kinds that have any; the zero value
// gives every default.
type Options struct {
	// AMG configures KindAMG (and AMG when KindAuto chooses it).
	AMG amg.Options
}

// Thresholds of the automatic rule; see the package documentation.
const (
	// AutoMaxShift is the largest IC(0) shift that auto accepts.
	AutoMaxShift = 0.1
	// AutoDominance: rows whose off-diagonal absolute sum is at most this
	// fraction of the diagonal make Jacobi good enough by itself.
	AutoDominance = 0.5
	// AutoFlatDiagonal: a diagonal whose largest entry is at most this
	// multiple of its smallest counts as nearly constant.
	AutoFlatDiagonal = 1e3
	// AutoAMGRows is the order from which auto chooses AMG for a weakly
	// diagonally dominant Z-matrix.
	AutoAMGRows = 1 << 20
)

// New builds the preconditioner of the given kind for the square matrix a,
// which is only read. For KindAuto it chooses by the rule in the package
// documentation. It returns the *DiagonalError of a diagonal entry that is
// missing, zero, negative or not finite for every kind except KindNone
// (such a matrix is not SPD), a *BreakdownError when KindIC0 finds no
// shift, and an error for an unknown kind.
func New(a *sparse.CSR, kind Kind) (*Choice, error) {
	return NewWithOptions(a, kind, Options{})
}

// NewWithOptions is New with the options of the kinds that take them. It
// also returns the errors of amg.New (wrapping amg.ErrNotSPD or
// amg.ErrOptions) for KindAMG.
func NewWithOptions(a *sparse.CSR, kind Kind, opt Options) (*Choice, error) {
	start := time.Now()
	var c *Choice
	var err error
	switch kind {
	case KindNone:
		if a.Rows != a.Cols {
			return nil, fmt.Errorf("precond: %w (%d×%d)", ErrNotSquare, a.Rows, a.Cols)
		}
		c = &Choice{Kind: KindNone, Reason: "none: as requested"}
	case KindJacobi:
		c, err = newJacobiChoice(a, "jacobi: as requested")
	case KindIC0:
		var m *IC0
		m, err = NewIC0(a, IC0Options{})
		if err == nil {
			c = ic0Choice(m, fmt.Sprintf("ic0: as requested; factorization succeeded with shift %g after %d %s", m.Shift(), m.Tries(), plural(m.Tries(), "try", "tries")))
		}
	case KindAMG:
		c, err = amgChoice(a, opt.AMG, "amg: as requested")
	case KindAuto:
		c, err = auto(a, opt)
	case KindBlock:
		if a.Rows == 0 && a.Cols == 0 {
			c = &Choice{Kind: KindBlock, Reason: "block: an empty matrix has nothing to precondition"}
			break
		}
		var bd *BlockDiagonal
		bd, err = NewBlockDiagonal(a, BlockOptions{})
		if err == nil {
			c = &Choice{Kind: KindBlock, M: bd, Bytes: bd.Bytes(), Reason: fmt.Sprintf(
				"block: as requested; saddle-point split %d + %d (zero trailing block), H by %s, Schur complement C + B·diag(H)⁻¹·Bᵀ by %s",
				bd.Split(), a.Rows-bd.Split(), bd.HChoice.Reason, bd.SChoice.Reason)}
		}
	default:
		return nil, fmt.Errorf("precond: unknown preconditioner kind %q (want one of none, jacobi, ic0, amg, auto, block)", string(kind))
	}
	if err != nil {
		return nil, err
	}
	c.Setup = time.Since(start)
	return c, nil
}

func newJacobiChoice(a *sparse.CSR, reason string) (*Choice, error) {
	j, err := NewJacobi(a)
	if err != nil {
		return nil, err
	}
	return &Choice{Kind: KindJacobi, Reason: reason, Bytes: j.Bytes(), M: j}, nil
}

func amgChoice(a *sparse.CSR, opt amg.Options, reason string) (*Choice, error) {
	if err := squareWithDiagonal(a); err != nil {
		return nil, err
	}
	h, err := amg.New(a, opt)
	if err != nil {
		return nil, err
	}
	rep := h.Report()
	return &Choice{Kind: KindAMG, Reason: fmt.Sprintf("%s; %d levels, operator complexity %.2f", reason, len(rep.Levels), rep.OperatorComplexity),
		Bytes: h.Bytes(), M: h, AMG: &rep}, nil
}

// squareWithDiagonal returns the *DiagonalError of the first unusable
// diagonal entry, as the other kinds do, so that every kind refuses a
// matrix that is not SPD by its diagonal in the same words.
func squareWithDiagonal(a *sparse.CSR) error {
	_, err := diagonal(a)
	return err
}

func ic0Choice(m *IC0, reason string) *Choice {
	return &Choice{Kind: KindIC0, Reason: reason, Shift: m.Shift(), Tries: m.Tries(), Bytes: m.Bytes(), M: m}
}

// diagonalSummary describes a's diagonal and row dominance: the extreme
// diagonal entries, the largest ratio of a row's off-diagonal absolute sum
// to its diagonal entry, and whether any off-diagonal entry is stored.
type diagonalSummary struct {
	min, max  float64
	dominance float64 // max_i Σ_{j≠i} |a_ij| / a_ii
	offDiag   bool
	// positiveOff counts off-diagonal entries > 0; deficient counts rows
	// whose sum Σ_j a_ij is below −1e-12·a_ii (not weakly diagonally
	// dominant). Both zero: A is a weakly diagonally dominant Z-matrix,
	// like a scalar diffusion operator.
	positiveOff, deficient int
}

func summarize(a *sparse.CSR) (diagonalSummary, error) {
	s := diagonalSummary{min: math.Inf(1)}
	if a.Rows != a.Cols {
		return s, fmt.Errorf("precond: %w (%d×%d)", ErrNotSquare, a.Rows, a.Cols)
	}
	for i := 0; i < a.Rows; i++ {
		var d, off, sum float64
		present := false
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			v := a.Val[p]
			sum += v
			if int(a.ColIdx[p]) == i {
				d, present = v, true
			} else {
				off += math.Abs(v)
				s.offDiag = true
				if v > 0 {
					s.positiveOff++
				}
			}
		}
		if err := checkDiagonal(i, d, present); err != nil {
			return s, err
		}
		if sum < -1e-12*d {
			s.deficient++
		}
		s.min, s.max = math.Min(s.min, d), math.Max(s.max, d)
		s.dominance = math.Max(s.dominance, off/d)
	}
	return s, nil
}

// auto implements the rule documented in doc.go, step by step.
func auto(a *sparse.CSR, opt Options) (*Choice, error) {
	s, err := summarize(a)
	if err != nil {
		return nil, err
	}
	if a.Rows == 0 {
		return &Choice{Kind: KindNone, Reason: "none: the matrix is empty"}, nil
	}
	if !s.offDiag {
		return newJacobiChoice(a, "jacobi: the matrix is diagonal, so Jacobi is its exact inverse")
	}
	if s.dominance <= AutoDominance {
		return newJacobiChoice(a, fmt.Sprintf("jacobi: every row is diagonally dominant (off-diagonal sum ≤ %.3g × diagonal), so the Jacobi-preconditioned condition number is at most %.3g (Gershgorin) and IC(0) cannot save much",
			s.dominance, (1+s.dominance)/(1-s.dominance)))
	}
	if a.Rows >= AutoAMGRows && s.positiveOff == 0 && s.deficient == 0 {
		c, err := amgChoice(a, opt.AMG, fmt.Sprintf("amg: %d rows (≥ %d) of a weakly diagonally dominant matrix with no positive off-diagonal entry, like a diffusion operator, whose constant vector smoothed aggregation coarsens well: CG's iterations grow with the grid and AMG's do not, which pays for its set-up and its dearer iteration at this size",
			a.Rows, AutoAMGRows))
		if err == nil {
			return c, nil
		}
		// A multigrid set-up that fails (a coarsest level that is not SPD)
		// falls through to the rules below.
	}
	// Shifts 0, 1e-3, 1e-2, 1e-1: stop at AutoMaxShift.
	tries := 1 + int(math.Round(math.Log10(AutoMaxShift/DefaultFirstShift))) + 1
	m, err := NewIC0(a, IC0Options{MaxTries: tries})
	if err == nil {
		const over = "preferred over Jacobi because the rows are not diagonally dominant (max off-diagonal sum %.3g × diagonal > %.3g), " +
			"where IC(0) took 1.5 to 40 times fewer iterations on the shared SPD matrices, more than paying for its costlier iterations (precond/doc.go, rule 4)"
		if m.Shift() == 0 {
			return ic0Choice(m, fmt.Sprintf("ic0: factorization succeeded with shift 0; "+over, s.dominance, AutoDominance)), nil
		}
		return ic0Choice(m, fmt.Sprintf("ic0: factorization needed shift %g (%d tries), small enough to keep; "+over, m.Shift(), m.Tries(), s.dominance, AutoDominance)), nil
	}
	var be *BreakdownError
	if !errors.As(err, &be) {
		return nil, err
	}
	spread := s.max / s.min
	why := fmt.Sprintf("ic0 broke down at every shift up to %g (%d tries; last pivot %.3g at row %d), so it would approximate A poorly", be.Shift, be.Tries, be.Pivot, be.Row+1)
	if spread <= AutoFlatDiagonal {
		return &Choice{Kind: KindNone, Reason: fmt.Sprintf("none: %s, and the diagonal is nearly constant (largest/smallest = %.3g), so Jacobi would only rescale", why, spread), Shift: be.Shift, Tries: be.Tries}, nil
	}
	c, err := newJacobiChoice(a, fmt.Sprintf("jacobi: %s; the diagonal varies (largest/smallest = %.3g), which Jacobi corrects", why, spread))
	if err != nil {
		return nil, err
	}
	c.Shift, c.Tries = be.Shift, be.Tries
	return c, nil
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}
