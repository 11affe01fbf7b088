package krylov

import (
	"context"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/sparse"
)

// DefaultRelTol is the default of Settings.RelTol.
const DefaultRelTol = 1e-8

// Default settings, as documented on Settings.
const (
	cgDefaultRefreshEvery = 50
	cgDefaultMaxIterPerN  = 10
)

// Stagnation rule for CG. The true residual b − A·x is recomputed at every
// periodic refresh and at every convergence check (when the recursive
// residual meets the stopping test). A recomputation that lowers the
// smallest true residual seen so far (initial residual, refreshes, checks)
// by at least the factor cgStagnationGain clears the strikes. Otherwise it
// is a strike if the recursive residual has run ahead of the true one, below
// it by more than the fraction cgDriftGap (far above the rounding floor the
// two agree to many more digits than that). After cgStagnationStrikes
// strikes without a clearing, the solve stops with status Stagnated: the
// recursive residual keeps falling but the true one no longer follows,
// which is the attainable-accuracy floor of finite precision (Greenbaum,
// Iterative Methods for Solving Linear Systems, 1997, §7.3; van der Vorst
// and Ye, SIAM J. Sci. Comput. 22, 2000). A plateau on which both residuals
// stall together is not a strike: CG may still leave it. The factor, the
// fraction and the count are our own choice.
const (
	cgStagnationStrikes = 3
	cgStagnationGain    = 0.5
	cgDriftGap          = 0.01
)

// Round-off stagnation rule for CG. The drift rule above does not fire when
// the recursive and the true residual stall together at the rounding level
// (a 5×5 system asked for a relative residual of 1e-300 then iterated
// forever at 1e-16). So, at every true-residual recomputation that fails the
// stopping test and either follows a recursive residual that met it or did
// not lower the smallest true residual by the factor cgStagnationGain (and
// at every one during an episode, below), CG compares the true residual
// norm with the level at which it is rounding noise, the bound on the
// rounding error of computing b − A·x, about u·‖(w_i+1)·(|A|·|x| + |b|)_i‖
// with w_i the row's entries and u the unit roundoff (Higham, Accuracy and
// Stability of Numerical Algorithms, 2nd ed., §3.1 and §12.1; by the
// Oettli–Prager theorem, §7.2, such an x is backward stable to a few units
// of roundoff; Greenbaum, Iterative Methods for Solving Linear Systems,
// 1997, §7.3, shows the residual of finite-precision CG settles at this
// order times ‖A‖·‖x‖). At or below the level an episode starts; a
// recomputation every cgFloorWindow iterations follows, whatever
// RefreshEvery says. A recomputation that lowers the norm by cgFloorGain
// below the norm at the episode's start restarts the episode; one above the
// level ends it; when cgFloorWindow iterations pass without either, the
// solve stops with status Stagnated (Result.Stagnation is
// StagnationRoundoff). The window and the factor are our own choice: CG
// halves its residual in far fewer iterations wherever it still converges,
// and the window costs at most one product per cgFloorWindow iterations.
const (
	cgFloorWindow = 20
	cgFloorGain   = 0.5
)

// cgReplaceFraction decides residual replacement. Replacing the recursive
// residual r by the true one t = b − A·x restores the accuracy that rounding
// took from r, but it perturbs the coupled recurrences of CG and, done at
// every refresh, costs up to 40% more iterations on ill-conditioned
// matrices (measured on the shared nos6, plat362, mhd4800b, plat1919). So r
// is replaced only when the drift ‖t − r‖ exceeds this fraction of the
// stopping tolerance, the point from which it could decide the outcome (in
// the spirit of van der Vorst and Ye, 2000, who replace when the drift
// becomes significant; their threshold is relative to ‖r‖, ours to the
// tolerance, because the tolerance is what the answer must meet).
const cgReplaceFraction = 0.25

// CG solves A·x = b by conjugate gradients (Hestenes and Stiefel, J. Res.
// Nat. Bur. Standards 49, 1952; Saad, Iterative Methods for Sparse Linear
// Systems, 2nd ed., §6.7.1, Algorithm 6.18), or by preconditioned conjugate
// gradients when m is not nil (Saad §9.2.1, Algorithm 9.1). A must be
// symmetric positive definite, and so must the preconditioner M.
//
// x receives the solution; it is written, never read (the start is s.X0,
// or zero when s.X0 is nil). b and s.X0 are not modified. See the package
// documentation for the stopping test, the statuses and the errors.
//
// CG sets Result.Method to "cg" and Result.Preconditioner to "none" when m
// is nil; with a preconditioner it leaves Result.Preconditioner and
// Result.Setup for the caller to fill in.
//
// CG panics if A is not square, if len(b), len(x) or a non-nil len(s.X0)
// differs from A's dimension, if x and b are the same slice, or if a
// setting is negative or NaN.
func CG(ctx context.Context, a Operator, b, x []float64, m Preconditioner, s Settings) (Result, error) {
	n := cgCheckSystem(a, b, x, s)
	var w cgWork
	w.alloc(n, m != nil, s.cgDefaults(n).MaxIter)
	return w.solve(ctx, a, b, x, m, s)
}

// CGMulti solves A·xs[i] = bs[i] for every i with CG, one right-hand side
// after the other, sharing the operator, the preconditioner (set up once by
// the caller) and one workspace. Each gets its own Result, in order. s
// applies to every solve; a non-nil s.X0 is the start of each of them.
//
// The first solve that returns an error (cancellation, a Recorder's error,
// a breakdown) stops the sequence: CGMulti returns the results up to and
// including that one, and its error wrapped with the right-hand side's
// index (errors.Is and errors.As see through it).
//
// CGMulti panics if len(bs) != len(xs), or for any pair on the conditions
// CG panics on.
func CGMulti(ctx context.Context, a Operator, bs, xs [][]float64, m Preconditioner, s Settings) ([]Result, error) {
	if len(bs) != len(xs) {
		panic(fmt.Sprintf("krylov: %d right-hand sides but %d solution vectors", len(bs), len(xs)))
	}
	n, _ := a.Dims()
	for i := range bs {
		cgCheckSystem(a, bs[i], xs[i], s)
	}
	var w cgWork
	w.alloc(n, m != nil, s.cgDefaults(n).MaxIter)
	results := make([]Result, 0, len(bs))
	for i := range bs {
		res, err := w.solve(ctx, a, bs[i], xs[i], m, s)
		results = append(results, res)
		if err != nil {
			return results, fmt.Errorf("krylov: right-hand side %d: %w", i, err)
		}
	}
	return results, nil
}

// cgCheckSystem panics on a programmer's mistake in the arguments and returns
// the dimension.
func cgCheckSystem(a Operator, b, x []float64, s Settings) int {
	rows, cols := a.Dims()
	if rows != cols {
		panic(fmt.Sprintf("krylov: CG needs a square operator, have %d×%d", rows, cols))
	}
	n := rows
	if len(b) != n {
		panic(fmt.Sprintf("krylov: len(b) = %d, want %d", len(b), n))
	}
	if len(x) != n {
		panic(fmt.Sprintf("krylov: len(x) = %d, want %d", len(x), n))
	}
	if s.X0 != nil && len(s.X0) != n {
		panic(fmt.Sprintf("krylov: len(Settings.X0) = %d, want %d", len(s.X0), n))
	}
	if n > 0 && &x[0] == &b[0] {
		panic("krylov: x and b are the same slice")
	}
	s.cgDefaults(n) // panics on bad settings
	return n
}

// cgDefaults returns s with every default filled in. It panics on negative
// or NaN values.
func (s Settings) cgDefaults(n int) Settings {
	if !(s.RelTol >= 0) || !(s.AbsTol >= 0) {
		panic(fmt.Sprintf("krylov: tolerances must be non-negative, have RelTol %g, AbsTol %g", s.RelTol, s.AbsTol))
	}
	if s.MaxIter < 0 {
		panic(fmt.Sprintf("krylov: negative MaxIter %d", s.MaxIter))
	}
	if s.TimeLimit < 0 {
		panic(fmt.Sprintf("krylov: negative TimeLimit %v", s.TimeLimit))
	}
	if s.RelTol == 0 {
		s.RelTol = DefaultRelTol
	}
	if s.MaxIter == 0 {
		s.MaxIter = cgDefaultMaxIterPerN * n
	}
	if s.RefreshEvery == 0 {
		s.RefreshEvery = cgDefaultRefreshEvery
	}
	return s
}

// cgWork holds CG's vectors, allocated once and reused across the solves of
// CGMulti. With the caller's x and b that makes six vectors of length n with
// a preconditioner and five without (z is then r itself).
type cgWork struct {
	r, z, p, q []float64
	lan        lanczos
}

func (w *cgWork) alloc(n int, precond bool, maxIter int) {
	w.r = make([]float64, n)
	w.p = make([]float64, n)
	w.q = make([]float64, n)
	if precond {
		w.z = make([]float64, n)
	}
	w.lan.reset(maxIter)
}

// cgState is what one solve's loop reports to its epilogue.
type cgState struct {
	s         Settings
	start     time.Time
	bnorm     float64
	iter      int     // iterations done
	products  int     // products with A
	rnorm     float64 // the last residual norm the loop tracked
	trueNorm  float64 // the last true residual norm computed
	trueFresh bool    // whether trueNorm belongs to the current x
	// stagnation names the stagnation rule that fired, "" if none.
	stagnation string
}

// record sends one progress row to the recorder, if any.
func (st *cgState) record(k int, rnorm float64) error {
	if st.s.Recorder == nil {
		return nil
	}
	rel := rnorm
	if st.bnorm > 0 {
		rel = rnorm / st.bnorm
	}
	return st.s.Recorder.Record(Progress{
		Iteration:    k,
		Elapsed:      time.Since(st.start),
		ResidualNorm: rnorm,
		RelResidual:  rel,
	})
}

// solve runs one CG solve in w's vectors and assembles its Result.
func (w *cgWork) solve(ctx context.Context, a Operator, b, x []float64, m Preconditioner, s Settings) (Result, error) {
	st := cgState{start: time.Now(), s: s.cgDefaults(len(b))}
	res := Result{Method: "cg", Settings: st.s}
	if m == nil {
		res.Preconditioner = "none"
	}
	w.lan.reset(st.s.MaxIter)
	if rs := st.s.Resume; rs != nil {
		if err := w.checkResume(rs, b, m != nil); err != nil {
			res.Solve = time.Since(st.start)
			if st.s.Recorder != nil {
				st.s.Recorder.Finish(&res)
			}
			return res, err
		}
		st.start = st.start.Add(-rs.Elapsed)
	}

	op := newCGOperator(a)
	status, err := w.iterate(ctx, &op, b, x, m, &st)

	if !st.trueFresh {
		// The returned x deserves its true residual whatever the outcome.
		st.products++
		st.trueNorm = math.Sqrt(op.residual(w.r, b, x))
	}
	st.fill(&res, status, &w.lan)
	return res, err
}

// fill completes res from the state of a finished solve and hands it to
// the recorder's Finish.
func (st *cgState) fill(res *Result, status Status, lan *lanczos) {
	res.Status = status
	res.Stagnation = st.stagnation
	res.Iterations = st.iter
	res.Products = st.products
	res.ResidualNorm = st.rnorm
	res.TrueResidualNorm = st.trueNorm
	res.RHSNorm = st.bnorm
	res.RelResidual = st.trueNorm
	if st.bnorm > 0 {
		res.RelResidual = st.trueNorm / st.bnorm
	}
	res.LambdaMin, res.LambdaMax = lan.extremes()
	if res.LambdaMin > 0 {
		res.Cond = res.LambdaMax / res.LambdaMin
	}
	res.Solve = time.Since(st.start)
	if st.iter > 0 {
		res.PerIteration = res.Solve / time.Duration(st.iter)
	}
	if st.s.Recorder != nil {
		st.s.Recorder.Finish(res)
	}
}

// iterate is the CG loop (Saad §9.2.1, Algorithm 9.1, with M = I when m is
// nil). On every return x holds the latest iterate.
//
// Each iteration makes one product with A, fused with pᵀA·p; one sweep
// updates r and computes ‖r‖²; one more updates x and the direction p
// together. The update of x is thus one iteration late (x_{j+1} = x_j + α_j·p_j
// is applied in the sweep that also forms p_{j+1}), and is applied on its own
// whenever the loop needs x current: before a true-residual recomputation and
// before every return.
func (w *cgWork) iterate(ctx context.Context, op *cgOperator, b, x []float64, m Preconditioner, st *cgState) (Status, error) {
	s := &st.s
	n := len(b)
	r, p := w.r[:n], w.p[:n]
	z := r
	if m != nil {
		z = w.z[:n]
	}

	bb := sparse.Dot(b, b)
	st.bnorm = math.Sqrt(bb)
	if !cgFinite(st.bnorm) {
		clear(x) // x is the start, zero: no residual worth computing
		st.trueNorm, st.trueFresh = st.bnorm, true
		return Breakdown, cgNotFinite(0, "right-hand side b", b, "‖b‖₂", st.bnorm)
	}
	if st.bnorm == 0 {
		// A·x = 0 has the solution x = 0 for nonsingular A, whatever the start.
		clear(x)
		st.trueFresh = true
		if err := st.record(0, 0); err != nil {
			return Cancelled, err
		}
		return Converged, nil
	}
	tol := max(s.RelTol*st.bnorm, s.AbsTol)
	if s.Resume != nil {
		return w.loop(ctx, op, b, x, m, st, tol, w.restore(s.Resume, x, st))
	}

	// r₀ = b − A·x₀; its product is not an iteration.
	rr, status, done, err := st.begin(op, b, x, r, bb, tol)
	if done {
		return status, err
	}
	rnorm := math.Sqrt(rr)

	rho := rr
	if m != nil {
		rho = cgPrecondition(m, z, r)
	}
	if err := cgCheckRho(0, rho, z, m != nil); err != nil {
		return Breakdown, err
	}
	copy(p, z)
	return w.loop(ctx, op, b, x, m, st, tol, cgCarry{rho: rho, best: rnorm, floorStart: -1, floorNext: -1})
}

// cgCarry is what CG's loop carries from one iteration to the next besides
// the vectors and the cgState.
type cgCarry struct {
	rho     float64 // rᵀz
	best    float64 // smallest true residual norm so far
	strikes int     // stagnation strikes (see cgStagnationStrikes)
	// The round-off episode (see cgFloorWindow): its start iteration (−1:
	// none), the iteration of the next forced recomputation (−1: none),
	// and the true residual norm at its start.
	floorStart, floorNext int
	floorRef              float64
}

// loop runs CG's iterations from the state at the top of the loop: x, r, p
// current, c carried, and w.lan holding the tridiagonal so far.
func (w *cgWork) loop(ctx context.Context, op *cgOperator, b, x []float64, m Preconditioner, st *cgState, tol float64, c cgCarry) (Status, error) {
	s := &st.s
	n := len(b)
	r, p, q := w.r[:n], w.p[:n], w.q[:n]
	z := r
	if m != nil {
		z = w.z[:n]
	}
	var rr, rnorm float64
	rho, best, strikes := c.rho, c.best, c.strikes
	floorStart, floorNext, floorRef := c.floorStart, c.floorNext, c.floorRef
	carry := func() cgCarry { return cgCarry{rho, best, strikes, floorStart, floorNext, floorRef} }
	ck := newCheckpointer(s.Checkpoint, time.Now())
	// A diagonal preconditioner is applied inside the residual update (see
	// DiagonalPreconditioner); diag is nil otherwise.
	var diag []float64
	if dm, ok := m.(DiagonalPreconditioner); ok && len(dm.InverseDiagonal()) == n {
		diag = dm.InverseDiagonal()
	}
	for {
		if st.iter >= s.MaxIter {
			return IterationLimit, nil
		}
		if err := ctx.Err(); err != nil {
			// A cancelled solve saves its state first: nothing is lost.
			if serr := w.checkpoint(&ck, x, st, m != nil, carry()); serr != nil {
				return Cancelled, serr
			}
			return Cancelled, err
		}
		if s.TimeLimit > 0 && time.Since(st.start) >= s.TimeLimit {
			return TimeLimit, nil
		}
		if ck.due() {
			if err := w.checkpoint(&ck, x, st, m != nil, carry()); err != nil {
				return Cancelled, err
			}
		}

		pq := op.mulVecDot(q, p)
		st.iter++
		st.products++
		k := st.iter
		if !(pq > 0) || math.IsInf(pq, 1) {
			if !cgFinite(pq) {
				if cgFirstNotFinite(p) >= 0 {
					return Breakdown, cgNotFinite(k, "search direction p", p, "", 0)
				}
				return Breakdown, cgNotFinite(k, "product A·p", q, "pᵀAp", pq)
			}
			return Breakdown, &BreakdownError{Iteration: k, Quantity: "pᵀAp", Value: pq, Err: ErrNotPositiveDefinite}
		}
		alpha := rho / pq
		if !cgFinite(alpha) {
			return Breakdown, &BreakdownError{Iteration: k, Quantity: "α = rᵀz/pᵀAp", Value: alpha, Err: ErrNotFinite}
		}
		w.lan.addAlpha(alpha)

		// rz is rᵀz from the fused Jacobi sweep, valid while fused holds
		// (until r is replaced).
		var rz float64
		fused := diag != nil
		if fused {
			rr, rz = sparse.AxpyDiagDot(r, -alpha, q, diag, z)
		} else {
			rr = sparse.AxpyDot(r, -alpha, q)
		}
		rnorm = math.Sqrt(rr)
		st.trueFresh = false
		xDone := false // whether x already holds x_{j+1}
		if !cgFinite(rnorm) {
			sparse.Axpy(x, alpha, p)
			return Breakdown, cgNotFinite(k, "residual r", r, "‖r‖₂", rnorm)
		}

		met := rnorm <= tol
		if met || (s.RefreshEvery > 0 && k%s.RefreshEvery == 0) || k == floorNext {
			// Compute the true residual t = b − A·x (into q, free until the
			// next product): before declaring convergence, and periodically
			// to watch the drift between t and the recursive r.
			sparse.Axpy(x, alpha, p)
			xDone = true
			st.products++
			tnorm := math.Sqrt(op.residual(q, b, x))
			st.trueNorm, st.trueFresh = tnorm, true
			if !cgFinite(tnorm) {
				return Breakdown, cgNotFinite(k, "true residual b − A·x", q, "‖b − A·x‖₂", tnorm)
			}
			if tnorm <= tol {
				st.rnorm = rnorm
				if err := st.record(k, tnorm); err != nil {
					return Cancelled, err
				}
				return Converged, nil
			}
			// q = t − r, the drift. Replace r by t when the drift matters
			// (see cgReplaceFraction).
			drift := math.Sqrt(sparse.AxpyDot(q, -1, r))
			recursive := rnorm
			if drift > cgReplaceFraction*tol {
				rr = sparse.AxpyDot(r, 1, q)
				rnorm = math.Sqrt(rr)
				fused = false // z no longer belongs to r
			}
			progress := tnorm < cgStagnationGain*best
			switch {
			case progress:
				strikes = 0
			case recursive < (1-cgDriftGap)*tnorm:
				strikes++
			}
			best = min(best, tnorm)
			if met || !progress || floorStart >= 0 {
				// One more pass over A, on this rare path only.
				level := op.roundoffLevel(x, b, st.bnorm, tnorm)
				switch {
				case tnorm > level:
					floorStart, floorNext = -1, -1
				case floorStart < 0 || tnorm <= cgFloorGain*floorRef:
					floorStart, floorRef, floorNext = k, tnorm, k+cgFloorWindow
				case k-floorStart >= cgFloorWindow:
					st.stagnation = StagnationRoundoff
				default:
					floorNext = floorStart + cgFloorWindow
				}
			}
		}
		st.rnorm = rnorm
		if err := st.record(k, rnorm); err != nil {
			if !xDone {
				sparse.Axpy(x, alpha, p)
			}
			return Cancelled, err
		}
		if strikes >= cgStagnationStrikes && st.stagnation == "" {
			st.stagnation = StagnationDrift
		}
		if st.stagnation != "" {
			if !xDone {
				sparse.Axpy(x, alpha, p)
			}
			return Stagnated, nil
		}

		rhoNew := rr
		switch {
		case fused:
			rhoNew = rz
		case m != nil:
			rhoNew = cgPrecondition(m, z, r)
		}
		if err := cgCheckRho(k, rhoNew, z, m != nil); err != nil {
			if !xDone {
				sparse.Axpy(x, alpha, p)
			}
			return Breakdown, err
		}
		beta := rhoNew / rho
		rho = rhoNew
		w.lan.addBeta(beta)
		if xDone {
			sparse.Triad(p, z, p, beta)
		} else {
			sparse.Step(x, p, z, alpha, beta)
		}
	}
}

// checkRho checks ρ = rᵀz, which must be positive and finite.
func cgCheckRho(k int, rho float64, z []float64, precond bool) error {
	if rho > 0 && !math.IsInf(rho, 1) {
		return nil
	}
	if !cgFinite(rho) {
		if precond && cgFirstNotFinite(z) >= 0 {
			return cgNotFinite(k, "preconditioned residual z = M⁻¹·r", z, "", 0)
		}
		return &BreakdownError{Iteration: k, Quantity: "rᵀz", Value: rho, Err: ErrNotFinite}
	}
	return &BreakdownError{Iteration: k, Quantity: "rᵀz", Value: rho, Err: ErrPreconditionerNotSPD}
}

func cgFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// firstNotFinite returns the index of v's first NaN or Inf, or −1.
func cgFirstNotFinite(v []float64) int {
	for i, e := range v {
		if !cgFinite(e) {
			return i
		}
	}
	return -1
}

// notFinite builds the ErrNotFinite breakdown naming the first NaN or Inf
// entry of vector v (called name), or, when v has none, the scalar.
func cgNotFinite(k int, name string, v []float64, scalar string, value float64) error {
	if i := cgFirstNotFinite(v); i >= 0 {
		return &BreakdownError{Iteration: k, Quantity: fmt.Sprintf("%s, entry %d", name, i), Value: v[i], Err: ErrNotFinite}
	}
	return &BreakdownError{Iteration: k, Quantity: scalar, Value: value, Err: ErrNotFinite}
}

// begin forms the initial residual r₀ = b − A·x₀ in r (x₀ = Settings.X0,
// copied into x, or zero; its product is not an iteration), records row 0,
// and says whether the solve ended there (done): converged at the start,
// or broken down on a non-finite start or residual. rr is r₀ᵀr₀. CG and
// MINRES begin alike.
func (st *cgState) begin(op *cgOperator, b, x, r []float64, bb, tol float64) (rr float64, status Status, done bool, err error) {
	s := &st.s
	if s.X0 != nil {
		copy(x, s.X0)
		st.products++
		rr = op.residual(r, b, x)
	} else {
		clear(x)
		copy(r, b)
		rr = bb
	}
	rnorm := math.Sqrt(rr)
	st.rnorm, st.trueNorm, st.trueFresh = rnorm, rnorm, true
	if !cgFinite(rnorm) {
		if s.X0 != nil && cgFirstNotFinite(s.X0) >= 0 {
			return rr, Breakdown, true, cgNotFinite(0, "start X0", s.X0, "", 0)
		}
		return rr, Breakdown, true, cgNotFinite(0, "initial residual r", r, "‖r‖₂", rnorm)
	}
	if err := st.record(0, rnorm); err != nil {
		return rr, Cancelled, true, err
	}
	if rnorm <= tol {
		return rr, Converged, true, nil
	}
	return rr, 0, false, nil
}
