package solve

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
)

// indefiniteSign returns, for a square a, the first row whose diagonal
// entry is zero, missing or negative, which shows that a symmetric a is
// not positive definite (a positive definite matrix has eᵢᵀA·eᵢ > 0:
// Golub and Van Loan, 4th ed., §4.2.1), and a description; -1 when every
// diagonal entry is positive.
func indefiniteSign(a *sparse.CSR) (int, string) {
	d := a.Diagonal(nil)
	for i, v := range d {
		if !(v > 0) {
			return i, fmt.Sprintf("a(%d,%d) = %s ≤ 0", i+1, i+1, ShortFloat(v))
		}
	}
	return -1, ""
}

// zeroRows counts the rows of a that store no nonzero value: such a row
// makes A singular whatever its other entries (for MINRES, whose matrices
// may have zero diagonal entries in nonzero rows, the count replaces
// zeroDiagonal's as the sign of singularity).
func zeroRows(a *sparse.CSR) int {
	n := 0
	for i := range a.Rows {
		empty := true
		for _, v := range a.Val[a.RowPtr[i]:a.RowPtr[i+1]] {
			if v != 0 {
				empty = false
				break
			}
		}
		if empty {
			n++
		}
	}
	return n
}

// minresChoice builds MINRES's preconditioner, which must be SPD although
// A is not: "jacobi" is Jacobi on |diag(A)|, "block" the saddle-point
// block-diagonal one, "ic0" IC(0) (which fails on most indefinite
// matrices), and "auto" the block preconditioner when A has a zero trailing
// block, else Jacobi on |diag(A)| when no diagonal entry is zero, else none.
func minresChoice(a *sparse.CSR, kind precond.Kind) (*precond.Choice, error) {
	start := time.Now()
	var c *precond.Choice
	switch kind {
	case precond.KindNone, precond.KindIC0, precond.KindBlock:
		return precond.New(a, kind)
	case precond.KindJacobi:
		j, err := precond.NewAbsJacobi(a)
		if err != nil {
			if sp := precond.ZeroBlockSplit(a); sp < a.Rows {
				return nil, fmt.Errorf("%w; rows %d…%d form a zero (2,2) block, which the block preconditioner (block) is for", err, sp+1, a.Rows)
			}
			return nil, err
		}
		c = &precond.Choice{Kind: precond.KindJacobi, M: j, Bytes: j.Bytes(), Reason: "jacobi: as requested, on |diag(A)| (MINRES needs a positive definite preconditioner)"}
	case precond.KindAuto:
		if s := precond.ZeroBlockSplit(a); s < a.Rows {
			bd, err := precond.NewBlockDiagonal(a, precond.BlockOptions{Split: s})
			if err == nil {
				c = &precond.Choice{Kind: precond.KindBlock, M: bd, Bytes: bd.Bytes(), Reason: fmt.Sprintf(
					"block: rows %d…%d form a zero (2,2) block, a saddle-point matrix; diag(H̃, S̃) with H̃ by %s and S̃ of C + B·diag(H)⁻¹·Bᵀ by %s",
					s+1, a.Rows, bd.HChoice.Reason, bd.SChoice.Reason)}
				break
			}
			c = &precond.Choice{Kind: precond.KindNone, Reason: "none: A has a zero (2,2) block but the block preconditioner failed (" + trimPackage(err).Error() + ")"}
			break
		}
		j, err := precond.NewAbsJacobi(a)
		if err != nil {
			c = &precond.Choice{Kind: precond.KindNone, Reason: "none: Jacobi on |diag(A)| refused (" + trimPackage(err).Error() + ")"}
			break
		}
		c = &precond.Choice{Kind: precond.KindJacobi, M: j, Bytes: j.Bytes(), Reason: "jacobi: on |diag(A)|, positive definite whatever the signs of A's diagonal"}
	default:
		return nil, fmt.Errorf("unknown preconditioner kind %q", kind)
	}
	c.Setup = time.Since(start)
	return c, nil
}

// prepareSystem builds a system's preconditioner, choosing MINRES over CG
// for the automatic method when A's diagonal shows it is not positive
// definite.
func (s *Setup) prepareSystem(kind precond.Kind) error {
	a := s.Matrix.A
	if s.Request.auto && s.Request.Method == CG {
		if i, why := indefiniteSign(a); i >= 0 {
			s.Request.Method = MINRES
			s.MethodReason = "minres: A is symmetric but not positive definite (" + why + "), so conjugate gradients would break down"
		} else {
			s.MethodReason = "cg: A is symmetric with a positive diagonal; MINRES takes over if conjugate gradients breaks down"
		}
	}
	s.zeroRows = zeroRows(a)
	var c *precond.Choice
	var err error
	if s.Request.Method == MINRES {
		c, err = minresChoice(a, kind)
	} else {
		c, err = precond.NewWithOptions(a, kind, precond.Options{AMG: s.Request.AMG.options()})
	}
	if err != nil {
		return &SetupError{Preconditioner: s.Request.Preconditioner, Err: err}
	}
	s.Choice = c
	return nil
}

// solveSystem runs CG or MINRES as the set-up says. Under the automatic
// method, a CG breakdown with ErrNotPositiveDefinite hands over to MINRES
// with the same (SPD) preconditioner; the progress continues, numbered on
// from CG's iterations, and the summary's method is minres with the reason.
//
// Checkpoints and resume (d) apply to conjugate gradients: MINRES has no
// saved state, so it runs without them.
func (s *Setup) solveSystem(ctx context.Context, b, x0, x []float64, rec krylov.Recorder, sum *Summary, d Durable) (krylov.Result, error) {
	var a krylov.Operator = s.Matrix.A
	if s.op != nil {
		a = s.op
	}
	req := s.Request
	var m krylov.Preconditioner
	if s.Choice.M != nil {
		m = s.Choice.M
	}
	set := krylov.Settings{
		RelTol: req.RelTol, AbsTol: req.AbsTol, MaxIter: req.MaxIter, TimeLimit: req.TimeLimit,
		RefreshEvery: req.RefreshEvery, X0: x0, Recorder: rec,
	}
	if req.Method == MINRES {
		return krylov.MINRES(ctx, a, b, x, m, set)
	}
	set.Checkpoint, set.Resume = d.Checkpoint, d.Resume
	if !req.auto {
		return krylov.CG(ctx, a, b, x, m, set)
	}
	var hold *heldRecorder
	if rec != nil {
		hold = &heldRecorder{next: rec}
		set.Recorder = hold
	}
	res, err := krylov.CG(ctx, a, b, x, m, set)
	var be *krylov.BreakdownError
	if !errors.Is(err, krylov.ErrNotPositiveDefinite) || !errors.As(err, &be) {
		if hold != nil {
			rec.Finish(&res)
		}
		return res, err
	}
	cgTime, cgIters := res.Solve, res.Iterations
	sum.Method = string(MINRES)
	sum.MethodReason = fmt.Sprintf("minres: conjugate gradients broke down after %d iterations (%s = %s ≤ 0), so A is not positive definite; MINRES restarted from x₀", cgIters, be.Quantity, Sci(be.Value))
	if hold != nil {
		hold.offset, hold.skipZero = cgIters, true
	}
	set.Checkpoint, set.Resume = nil, nil
	// The time budget counts CG's attempt too.
	if set.TimeLimit > 0 {
		set.TimeLimit = max(set.TimeLimit-cgTime, time.Nanosecond)
	}
	res, err = krylov.MINRES(ctx, a, b, x, m, set)
	res.Iterations += cgIters
	res.Solve += cgTime
	if res.Iterations > 0 {
		res.PerIteration = res.Solve / time.Duration(res.Iterations)
	}
	if hold != nil {
		rec.Finish(&res)
	}
	return res, err
}

// heldRecorder passes progress on, numbered from offset and without the
// repeated iteration 0 of a restart (skipZero), and holds Finish back for
// the caller, who knows when the solve as a whole has ended.
type heldRecorder struct {
	next     krylov.Recorder
	offset   int
	skipZero bool
}

func (h *heldRecorder) Record(p krylov.Progress) error {
	if h.skipZero && p.Iteration == 0 {
		return nil
	}
	p.Iteration += h.offset
	return h.next.Record(p)
}

func (h *heldRecorder) Finish(*krylov.Result) {}

// fillMINRES copies what only MINRES reports into the summary.
func fillMINRES(sum *Summary, r *krylov.Result) {
	mr := r.MINRES
	if mr == nil {
		return
	}
	if mr.NormEstimate > 0 {
		sum.NormEstimate = NumPtr(mr.NormEstimate)
		sum.NormalResidualNorm = NumPtr(mr.NormalResidualRel * mr.NormEstimate * r.TrueResidualNorm)
	}
	if mr.Singular {
		sum.warn(WarnSingular, fmt.Sprintf("A is singular to working precision and b is not in its range: the residual stopped at %s of ‖b‖ with ‖A·r‖/(‖A‖·‖r‖) = %s, so x is (close to) a least-squares solution, one of many; check the model for a missing constraint or an inconsistent load",
			Sci(r.RelResidual), Sci(mr.NormalResidualRel)))
	}
}
