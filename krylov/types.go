package krylov

import (
	"errors"
	"fmt"
	"time"
)

// Operator is a linear map y = A·x. *sparse.CSR satisfies it, and so can a
// matrix-free operator. MulVec must not keep x or dst, and must give bitwise
// identical results for identical inputs (the solvers' determinism rests on it).
type Operator interface {
	// Dims returns the number of rows and columns of A.
	Dims() (rows, cols int)
	// MulVec sets dst = A·x. len(dst) == rows, len(x) == cols.
	MulVec(dst, x []float64)
}

// TransOperator is an Operator that can also apply its transpose, as the
// least-squares methods need.
type TransOperator interface {
	Operator
	// MulVecTrans sets dst = Aᵀ·x. len(dst) == cols, len(x) == rows.
	MulVecTrans(dst, x []float64)
}

// Preconditioner applies the inverse of an approximation M of A:
// dst = M⁻¹·r. For CG, M must be symmetric positive definite. Precondition
// must not keep r or dst and must not allocate.
type Preconditioner interface {
	Precondition(dst, r []float64)
}

// DotPreconditioner is a Preconditioner that can also return rᵀ·dst from
// the sweep that writes dst = M⁻¹·r, which saves conjugate gradients one
// pass over two vectors per iteration; CG uses PreconditionDot when the
// preconditioner has it. The sum must equal sparse.Dot(r, dst) bit for bit
// (block by block in sparse's fixed blocks), so that the answer does not
// depend on which of the two paths a solve takes.
type DotPreconditioner interface {
	Preconditioner
	PreconditionDot(dst, r []float64) float64
}

// DiagonalPreconditioner is a Preconditioner that is a diagonal matrix,
// M⁻¹ = diag(d) (precond.Jacobi is one). CG detects it and fuses the apply
// z = d∘r into the sweep that updates the residual, with both inner products
// (sparse.AxpyDiagDot): a Jacobi-preconditioned iteration then moves one
// diagonal and one vector more than a plain one, instead of three extra
// passes. InverseDiagonal returns d, of the operator's order, which the
// caller must not modify; its results must equal Precondition's bit for bit
// (z[i] = r[i]·d[i]).
type DiagonalPreconditioner interface {
	Preconditioner
	InverseDiagonal() []float64
}

// Status says how a solve ended. Only Converged means the answer met the
// tolerance. IterationLimit, TimeLimit and Stagnated are normal outcomes that
// come with a nil error; Breakdown always comes with a *BreakdownError saying
// what gave it away; Cancelled comes with the context's error (ctx.Err()) or
// the error the Recorder returned.
type Status int

const (
	// Converged: the true residual met the stopping test.
	Converged Status = iota + 1
	// IterationLimit: the iteration cap was reached first.
	IterationLimit
	// TimeLimit: the wall-time budget ran out first.
	TimeLimit
	// Cancelled: the context was cancelled or its deadline passed, or the
	// Recorder returned an error.
	Cancelled
	// Stagnated: the iterates stopped improving before meeting the test
	// (for example the true residual cannot be pushed below the tolerance in
	// floating point). Each method documents its rule.
	Stagnated
	// Breakdown: a quantity the method divides by, or needs positive, was
	// not (the matrix or preconditioner is not SPD, or a NaN or Inf appeared).
	Breakdown
)

var statusNames = map[Status]string{
	Converged:      "converged",
	IterationLimit: "iteration-limit",
	TimeLimit:      "time-limit",
	Cancelled:      "cancelled",
	Stagnated:      "stagnated",
	Breakdown:      "breakdown",
}

// String returns the status's stable lower-case name, used in JSON output and
// on the wire.
func (s Status) String() string {
	if n, ok := statusNames[s]; ok {
		return n
	}
	return fmt.Sprintf("status(%d)", int(s))
}

// Named reasons for a Breakdown, for errors.Is.
var (
	// ErrNotPositiveDefinite: pᵀA·p ≤ 0, so A is not positive definite.
	ErrNotPositiveDefinite = errors.New("matrix is not positive definite")
	// ErrPreconditionerNotSPD: rᵀM⁻¹r ≤ 0, so the preconditioner is not SPD.
	ErrPreconditionerNotSPD = errors.New("preconditioner is not positive definite")
	// ErrNotFinite: a NaN or Inf appeared in a vector or scalar.
	ErrNotFinite = errors.New("NaN or Inf appeared")
)

// BreakdownError says which quantity broke a method down, its value and at
// which iteration. It wraps one of the named reasons above.
type BreakdownError struct {
	Iteration int
	Quantity  string  // e.g. "pᵀAp", "rᵀz", "residual r, entry 7"
	Value     float64 // the offending value (NaN or ±Inf for ErrNotFinite)
	Err       error
}

func (e *BreakdownError) Error() string {
	return fmt.Sprintf("%v (%s = %.3g at iteration %d)", e.Err, e.Quantity, e.Value, e.Iteration)
}

func (e *BreakdownError) Unwrap() error { return e.Err }

// Progress is one row of a convergence history. It means the same for every
// method: Iteration counts products with the operator inside the loop (0 is
// the initial residual), Elapsed is wall time since the solve started,
// ResidualNorm is ‖b − A·x‖₂ as the method tracks it (recursively between
// true-residual refreshes), RelResidual is ResidualNorm/‖b‖₂ (or ResidualNorm
// itself when b = 0). Least-squares methods also fill NormalResidualNorm,
// ‖Aᵀr‖₂ (zero for CG).
type Progress struct {
	Iteration          int
	Elapsed            time.Duration
	ResidualNorm       float64
	RelResidual        float64
	NormalResidualNorm float64
}

// Recorder receives a solve's progress, whatever the method. Record is
// called at iteration 0 with the initial residual and after every
// iteration; Finish once at the end with the final result (whose LSQ part
// is set for a least-squares solve). An error from Record stops the solve with status
// Cancelled and that error returned.
type Recorder interface {
	Record(p Progress) error
	Finish(r *Result)
}

// Settings control a solve. The zero value works; each field's comment
// gives its default, and Result.Settings echoes the values actually used.
// Negative tolerances, MaxIter or TimeLimit are programmer mistakes: the
// methods panic on them.
//
// The one stopping test is on the unpreconditioned true residual:
//
//	‖b − A·x‖₂ ≤ max(RelTol·‖b‖₂, AbsTol)
type Settings struct {
	// RelTol is the relative tolerance. Default (when 0) 1e-8.
	RelTol float64
	// AbsTol is the absolute tolerance. Default 0.
	AbsTol float64
	// MaxIter caps the iterations. Default (when 0) 10·n.
	MaxIter int
	// TimeLimit is a wall-time budget for the iterations, checked once per
	// iteration. Default 0: none.
	TimeLimit time.Duration
	// X0 is the starting guess; nil means zero. It is never modified.
	X0 []float64
	// RefreshEvery is how often, in iterations, the true residual b − A·x
	// is recomputed (one product with A) to catch the drift of the
	// recursive residual, which it replaces when the drift has grown large
	// enough to matter (CG: a quarter of the tolerance). Default 50; a
	// negative value turns periodic refresh off (the true residual is still
	// computed before convergence is declared).
	RefreshEvery int
	// Recorder receives the progress; nil records nothing.
	Recorder Recorder `json:"-"`
	// Checkpoint, when not nil, is asked for the solve's state from time
	// to time (see Checkpoint). Default nil: no checkpoints.
	Checkpoint *Checkpoint `json:"-"`
	// Resume, when not nil, continues the solve from a State that a
	// Checkpoint of the same solve saved (same operator, preconditioner,
	// right-hand side and settings), instead of starting from X0: the
	// iterates, progress rows and result are then bitwise those of the
	// uninterrupted solve at the same worker count. A state of another
	// method, size or right-hand side is refused with an error wrapping
	// ErrResume, before anything is computed. It is never modified.
	Resume *State `json:"-"`
}

// Result describes a finished solve, by any method: conjugate gradients
// and least squares report in the same shape, so that one Recorder, one
// summary and one wire message serve them all. The fields that only a
// least-squares solve has are in LSQ, which is nil for CG.
type Result struct {
	// Method names the method: "cg" (also when preconditioned), "lsqr" or
	// "cgls". Preconditioner names the preconditioner ("none", "jacobi",
	// "ic0", ...) or, for least squares, the column scaling ("colscale" or
	// "none", which acts as a right preconditioner): CG only sees the
	// Preconditioner interface, so it sets "none" when there is none and
	// leaves the field empty otherwise, for the caller, who chose it, to
	// fill in.
	Method         string
	Preconditioner string
	Status         Status
	// Iterations counts products with A inside the loop (least squares:
	// iterations, each applying A once and Aᵀ once).
	Iterations int
	// Products counts every product with A (and, for least squares, with
	// Aᵀ): Iterations (twice them for least squares), plus the initial
	// residual's product (when a start X0 is given), plus each true-residual
	// recomputation (periodic refreshes, checks before convergence is
	// declared, and the final check that fills TrueResidualNorm).
	Products int
	// ResidualNorm is the method's recursive ‖r‖₂ at the end (least
	// squares: the true one, which it recomputes at the end);
	// TrueResidualNorm is ‖b − A·x‖₂ recomputed from the returned x.
	ResidualNorm     float64
	TrueResidualNorm float64
	// RHSNorm is ‖b‖₂; RelResidual is TrueResidualNorm/RHSNorm (or
	// TrueResidualNorm when b = 0).
	RHSNorm     float64
	RelResidual float64
	// LambdaMin, LambdaMax and Cond estimate the extreme eigenvalues and the
	// condition number of the preconditioned operator M⁻¹A (A itself without
	// a preconditioner) from the Lanczos tridiagonal built from CG's
	// coefficients. They are estimates: λmax and λmin are approached from
	// inside, so Cond is a lower bound. Zero when fewer than two iterations
	// ran. For least squares LambdaMin and LambdaMax stay zero and Cond is
	// LSQR's estimate of the condition number of the scaled, augmented
	// operator (see LSQResult.CondEstimate).
	LambdaMin, LambdaMax, Cond float64
	// Setup is the preconditioner set-up time: the methods cannot know it
	// and leave it zero for the caller to fill in. Solve is the wall time
	// of the whole solve call (initial residual, iterations and final
	// check); PerIteration is Solve/Iterations (zero without iterations).
	Setup, Solve, PerIteration time.Duration
	// Settings are the settings used, defaults filled in, for CG. A
	// least-squares solve leaves them zero: its settings are in
	// LSQ.Settings.
	Settings Settings
	// LSQ holds what only a least-squares solve reports; nil for CG.
	LSQ *LSQResult
	// MINRES holds what only MINRES reports; nil for the other methods.
	MINRES *MINRESResult
	// Stagnation names the rule that ended a CG solve with status
	// Stagnated (StagnationDrift or StagnationRoundoff); "" otherwise.
	Stagnation string
}

// CG's stagnation rules, as reported in Result.Stagnation (see the package
// documentation and the constants beside them in cg.go).
const (
	// StagnationDrift: the recursive residual kept falling while the true
	// one b − A·x stopped following it.
	StagnationDrift = "drift"
	// StagnationRoundoff: the true residual sat at the rounding level of
	// b − A·x without falling further.
	StagnationRoundoff = "roundoff"
)
