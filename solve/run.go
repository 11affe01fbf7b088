package solve

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
)

// Setup is what a solve needs before it iterates: the validated request,
// the preconditioner built for the matrix (a system) or the column scaling
// chosen (least squares), and why. It is read-only once made, so a server
// may cache it and share it between concurrent solves on the same matrix.
type Setup struct {
	// Request is the validated request (see Request.Validate).
	Request Request
	// Choice is a system's preconditioner (nil for least squares); its
	// Setup field is the set-up time.
	Choice *precond.Choice
	// Scaling is least squares' column scaling, resolved (never
	// ScaleAuto), and ScalingReason says why.
	Scaling       krylov.Scaling
	ScalingReason string
	// Matrix is the matrix the set-up is for.
	Matrix Matrix
	// MethodReason says why the automatic method chose what it did (empty
	// when the method was asked for).
	MethodReason string

	zeroDiag int // a system's zero diagonal entries (see zeroDiagonal)
	zeroRows int // a system's rows without a nonzero value (see zeroRows)

	// A normal-equations set-up (PrepareNormal): the operator that
	// replaces Matrix.A, and what the summary reports of it.
	op     krylov.Operator
	normal *normalInfo
}

// SetupError is a preconditioner that could not be built. It wraps the
// preconditioner's own error (*precond.DiagonalError, *precond.BreakdownError).
type SetupError struct {
	Preconditioner string // the kind asked for
	Err            error
}

func (e *SetupError) Error() string {
	return fmt.Sprintf("%v (preconditioner %s)", trimPackage(e.Err), e.Preconditioner)
}
func (e *SetupError) Unwrap() error { return e.Err }

// Prepare validates req, checks that its method applies to m (errors
// wrapping ErrNotSquare or ErrNotSymmetric otherwise), and builds the
// preconditioner or chooses the scaling. A preconditioner that cannot be
// built is a *SetupError.
func Prepare(m Matrix, req Request) (*Setup, error) {
	req, err := req.Validate()
	if err != nil {
		return nil, err
	}
	if err := req.Applies(m); err != nil {
		return nil, err
	}
	s := &Setup{Request: req, Matrix: m}
	if req.LeastSquares {
		sc, _ := krylov.ParseScaling(req.Preconditioner) // Validate checked it
		// *sparse.CSR gives its column norms.
		s.Scaling, s.ScalingReason = krylov.ChooseScaling(sc, m.A.Rows, m.A.Cols, true)
		return s, nil
	}
	s.zeroDiag = zeroDiagonal(m.A)
	kind, _ := precond.ParseKind(req.Preconditioner)
	if nn := req.AMG.NearNull; nn != nil && len(nn.Values) != m.A.Rows*nn.K {
		return nil, fieldErr("near_null", "%d rows of %d vectors for a matrix of %d rows", len(nn.Values)/nn.K, nn.K, m.A.Rows)
	}
	if err := s.prepareSystem(kind); err != nil {
		return nil, err
	}
	return s, nil
}

// For returns the set-up as another request on the same matrix with the
// same preconditioner would have it: a copy that shares the preconditioner
// (read only) and takes req's tolerances, limits and method settings, so
// that a cached set-up serves each solve with that solve's own settings.
// req must be the result of Validate.
func (s *Setup) For(req Request) *Setup {
	c := *s
	c.Request = req
	return &c
}

// Bytes returns the memory the set-up holds (the preconditioner's).
func (s *Setup) Bytes() int64 {
	if s.Choice == nil {
		return 0
	}
	return s.Choice.Bytes
}

// Solve runs the method on b from x0 (nil: zero), writing x, with rec
// receiving the progress (nil: none). It returns the summary of the solve
// and the method's error (a breakdown, a cancellation, a recorder's
// failure), which the summary also states. It panics on vectors of the
// wrong length.
func (s *Setup) Solve(ctx context.Context, b, x0, x []float64, rec krylov.Recorder) (Summary, error) {
	return s.SolveDurable(ctx, b, x0, x, rec, Durable{})
}

// SolveDurable is Solve with checkpoints and resume (see Durable).
func (s *Setup) SolveDurable(ctx context.Context, b, x0, x []float64, rec krylov.Recorder, d Durable) (Summary, error) {
	a, req := s.Matrix.A, s.Request
	sum := s.Summary()
	var res krylov.Result
	var err error
	if req.LeastSquares {
		method := krylov.LSQR
		if req.Method == CGLS {
			method = krylov.CGLS
		}
		res, err = krylov.LSQ(ctx, a, b, x, krylov.LSQSettings{
			Damp: req.Damp, ATol: req.ATol, BTol: req.BTol, MaxIter: req.MaxIter, TimeLimit: req.TimeLimit,
			X0: x0, Scaling: s.Scaling, Method: method, Recorder: rec,
			Checkpoint: d.Checkpoint, Resume: d.Resume,
		})
	} else {
		res, err = s.solveSystem(ctx, b, x0, x, rec, &sum, d)
	}
	zeroDiag := s.zeroDiag
	if Method(sum.Method) == MINRES && s.normal == nil {
		// A zero diagonal entry is no sign of singularity for an
		// indefinite A (a saddle point has many); a zero row is.
		zeroDiag = s.zeroRows
	}
	fill(&sum, &res, err, zeroDiag)
	if Method(sum.Method) == MINRES && sum.ForwardErrorEstimate != nil {
		sum.ForwardErrorNote = "κ·‖r‖/‖b‖ with κ = max |θ|/min |θ| over MINRES's Ritz values θ (of the preconditioned operator when there is a preconditioner): for an indefinite matrix an estimate of the condition number, not a bound, so the error may exceed this estimate"
	}
	if d.Resume != nil && !errors.Is(err, krylov.ErrResume) {
		it := d.Resume.Iteration
		sum.ResumedFrom = &it
	}
	return sum, err
}

// Summary returns the part of a solve's summary that the set-up decides:
// the matrix, the method, the preconditioner (or scaling) and why, its
// shift, memory and set-up time. A server announces it before iterating.
func (s *Setup) Summary() Summary {
	a := s.Matrix.A
	sum := Summary{Matrix: s.Matrix.Name, Rows: a.Rows, Cols: a.Cols, Nonzeros: a.NNZ(), Method: string(s.Request.Method), MethodReason: s.MethodReason}
	if s.normal != nil {
		s.normal.describe(&sum)
	}
	if s.Request.LeastSquares {
		sum.Preconditioner = s.Scaling.String()
		sum.PreconditionerReason = s.Scaling.String() + ": " + s.ScalingReason
		return sum
	}
	c := s.Choice
	sum.Preconditioner, sum.PreconditionerReason = string(c.Kind), c.Reason
	sum.Shift, sum.ShiftTries = NumPtr(c.Shift), c.Tries
	bytes := c.Bytes
	sum.PreconditionerBytes = &bytes
	sum.SetupSeconds = Seconds(c.Setup)
	sum.Multigrid = c.AMG
	return sum
}

// fill copies a method's result into the summary and says how far x can be
// trusted.
func fill(sum *Summary, r *krylov.Result, err error, zeroDiag int) {
	sum.Iterations = r.Iterations
	sum.RelativeResidual, sum.TrueResidualNorm, sum.RHSNorm = Num(r.RelResidual), Num(r.TrueResidualNorm), Num(r.RHSNorm)
	sum.SolveSeconds, sum.SecondsPerIteration = Seconds(r.Solve), Seconds(r.PerIteration)
	sum.CondEstimate = Num(r.Cond)
	if l := r.LSQ; l != nil {
		sum.ResidualNorm, sum.NormalResidualNorm = NumPtr(r.TrueResidualNorm), NumPtr(l.NormalResidualNorm)
		sum.XNorm, sum.NormEstimate = NumPtr(l.XNorm), NumPtr(l.ANormEstimate)
		sum.StoppedBy, sum.ZeroColumns = l.StoppedBy, l.ZeroColumns
		sum.AbsTol, sum.BTol, sum.Damp = Num(l.Settings.ATol), NumPtr(l.Settings.BTol), NumPtr(l.Settings.Damp)
		sum.MaxIter, sum.TimeLimitSeconds = l.Settings.MaxIter, Seconds(l.Settings.TimeLimit)
	} else {
		sum.RecursiveResidualNorm = NumPtr(r.ResidualNorm)
		sum.RecursiveRelativeResidual = NumPtr(r.ResidualNorm)
		if r.RHSNorm > 0 {
			sum.RecursiveRelativeResidual = NumPtr(r.ResidualNorm / r.RHSNorm)
		}
		sum.LambdaMin, sum.LambdaMax = NumPtr(r.LambdaMin), NumPtr(r.LambdaMax)
		sum.StoppedBy = r.Stagnation
		st := r.Settings
		sum.RelTol, sum.AbsTol = NumPtr(st.RelTol), Num(st.AbsTol)
		sum.MaxIter, sum.TimeLimitSeconds, sum.RefreshEvery = st.MaxIter, Seconds(st.TimeLimit), st.RefreshEvery
	}
	fillMINRES(sum, r)
	if err != nil && r.Status != krylov.Cancelled {
		sum.Error = trimPackage(err).Error()
		sum.Advice = Advice(err)
	}
	sum.Status = string(OutcomeOf(r.Status))
	sum.assessTrust(zeroDiag)
	sum.SetOutcome(OutcomeOf(r.Status))
}

// Failure describes a solve that ended before its method ran: a request
// or a matrix refused (outcome Refused), or a set-up that failed (outcome
// SetupFailed) — whatever is known, so that every way a solve
// ends has a summary.
func Failure(m Matrix, req Request, err error) Summary {
	sum := Summary{Matrix: m.Name, Method: string(req.Method), Preconditioner: req.Preconditioner, Error: trimPackage(err).Error(), Advice: Advice(err)}
	if m.A != nil {
		sum.Rows, sum.Cols, sum.Nonzeros = m.A.Rows, m.A.Cols, m.A.NNZ()
	}
	if r, verr := req.Validate(); verr == nil {
		sum.Method, sum.Preconditioner = string(r.Method), r.Preconditioner
	}
	o := Failed
	var se *SetupError
	switch {
	case errors.As(err, &se):
		o = SetupFailed
	case errors.Is(err, ErrNotSymmetric), errors.Is(err, ErrNotSquare), errors.Is(err, ErrInvalid):
		o = Refused
	case errors.Is(err, context.Canceled):
		o = Cancelled
	}
	sum.SetOutcome(o)
	return sum
}

// Run is Prepare followed by Setup.Solve: the one call of a front end that
// solves one right-hand side. When the set-up fails, the summary is
// Failure's and x is left as it was. The summary's SetupSeconds includes
// the set-up.
func Run(ctx context.Context, m Matrix, req Request, b, x0, x []float64, rec krylov.Recorder) (Summary, *Setup, error) {
	start := time.Now()
	s, err := Prepare(m, req)
	if err != nil {
		sum := Failure(m, req, err)
		sum.SetupSeconds = Seconds(time.Since(start))
		sum.Unstarted(m.A, b, x0)
		return sum, nil, err
	}
	sum, err := s.Solve(ctx, b, x0, x, rec)
	return sum, s, err
}

// Unstarted fills the residual figures of a summary whose solve ended
// before its method ran (Failure's): x is still the starting guess x0
// (nil: zero), so its true residual is ‖b − A·x0‖, relative to ‖b‖ (1 for
// a zero start). Vectors of the wrong length leave the figures unset.
func (s *Summary) Unstarted(a *sparse.CSR, b, x0 []float64) {
	if a == nil || len(b) != a.Rows || (x0 != nil && len(x0) != a.Cols) {
		return
	}
	r := make([]float64, a.Rows)
	if x0 != nil {
		a.MulVec(r, x0)
	}
	rn, bn := 0.0, 0.0
	for i, bi := range b {
		d := bi - r[i]
		rn += d * d
		bn += bi * bi
	}
	rn, bn = math.Sqrt(rn), math.Sqrt(bn)
	s.TrueResidualNorm, s.RHSNorm = Num(rn), Num(bn)
	s.RelativeResidual = Num(rn)
	if bn > 0 {
		s.RelativeResidual = Num(rn / bn)
	}
}
