package krylov

import (
	"context"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/sparse"
)

// MINRESResult holds what only MINRES reports (Result.MINRES).
type MINRESResult struct {
	// PrecondResidualNorm is the method's own residual estimate at the end:
	// ‖r‖_{M⁻¹} = √(rᵀM⁻¹r) with a preconditioner, ‖r‖₂ without. It is
	// what MINRES minimises over the Krylov space, so it never increases.
	PrecondResidualNorm float64
	// NormalResidualRel is ‖A·r‖₂/(‖A‖₂·‖r‖₂) for the returned x and r =
	// b − A·x (Aᵀr = A·r, A being symmetric), with ‖A‖₂ estimated from
	// below (NormEstimate). It is computed when the true residual stopped
	// improving and at the end of a solve that did not converge; zero
	// otherwise. Small (≤ the tolerance) means x solves the least-squares
	// problem min ‖b − A·x‖₂ although A·x = b has no solution.
	NormalResidualRel float64
	// NormEstimate is the estimate of ‖A‖₂ used above: the largest of a
	// few power-iteration steps with A from b and, without a
	// preconditioner, the largest Ritz value's magnitude. Zero when
	// NormalResidualRel was not computed.
	NormEstimate float64
	// Singular reports that A is singular and b outside its range: the
	// true residual stopped at a nonzero level at which x solves the
	// least-squares problem (NormalResidualRel ≤ max(RelTol, minresSingularFloor)).
	// The status is then Stagnated.
	Singular bool
}

// MINRES rules, our own choice in the manner of CG's (cg.go):
//
//   - minresStrikes: a true-residual check (periodic or before convergence)
//     is a strike when the true residual has not halved the best seen so far
//     while the method's own estimate has (it keeps falling, the true
//     residual no longer follows: the attainable-accuracy floor); that many
//     strikes end the solve with Stagnated.
//   - Every iteration tests the recursive value of ‖A·r‖/(‖A‖‖r‖) (see the
//     loop): at most max(RelTol, minresSingularFloor) means x is a
//     least-squares solution of a singular, inconsistent system (Paige and
//     Saunders 1975, §6; Choi, Paige and Saunders, SIAM J. Sci. Comput.
//     33(4), 2011, on MINRES for singular systems); the floor keeps the test
//     meaningful in floating point. The true value is then recomputed.
//   - Once minresLSChecks checks in a row have not halved the best true
//     residual, each such check also computes ‖A·r‖/(‖A‖‖r‖) explicitly
//     (one product); at most max(RelTol, minresSingularFloor), or at most
//     minresNearSingular after minresStallChecks such checks in a row, the
//     solve ends Stagnated with Singular set: the system is singular to
//     working precision and b outside the range of A. The second threshold
//     is calibrated on the shared matrices: on spaceStation_1 (2-norm
//     condition 4.9e25) with b = 1 the ratio falls to 8e-5 while the
//     residual stays at 0.6·‖b‖; the nonsingular bcsstm10, blckhole and
//     spaceStation_1 with b = A·1 keep it above 4e-4 on their plateaus.
//     Near singularity it is a judgement, and documented as one.
//   - minresNormSteps power-iteration steps estimate ‖A‖₂ for that test
//     (Golub and Van Loan, 4th ed., §8.2.1), once per solve.
//   - The Lanczos vectors' scale factors are renormalised when they leave
//     [2^−minresScaleExp, 2^minresScaleExp], far from overflow.
const (
	minresStrikes       = 3
	minresSingularFloor = 1e-10
	minresNormSteps     = 8
	minresScaleExp      = 300
	minresLSChecks      = 3
	minresStallChecks   = 10
	minresNearSingular  = 1e-4
)

// MINRES solves A·x = b for a symmetric, possibly indefinite or singular A
// by the minimum residual method (C. C. Paige and M. A. Saunders, "Solution
// of sparse indefinite systems of linear equations", SIAM J. Numer. Anal.
// 12(4), 1975), preconditioned by the symmetric positive definite m when m
// is not nil, in the form of Elman, Silvester and Wathen, Finite Elements
// and Fast Iterative Solvers, 2nd ed., 2014, §4.2 (Algorithm 4.1): the
// Lanczos process in the M-inner product, Givens rotations of its
// tridiagonal, and the three-term update of the solution. Each iterate
// minimises ‖b − A·x‖_{M⁻¹} (‖·‖₂ without preconditioner) over the Krylov
// space.
//
// The contract is CG's (Settings, Result, Status, Recorder; see the package
// documentation): the stopping test is on the true residual, recomputed
// before Converged is declared. Without a preconditioner the method's own
// residual is ‖r‖₂; with one it is ‖r‖_{M⁻¹}, and MINRES reports
// ResidualNorm as that value scaled by the ratio ‖r‖₂/‖r‖_{M⁻¹} measured
// at the last true-residual computation, an estimate which decides when
// to compute the true residual. A breakdown is an indefinite
// preconditioner (rᵀM⁻¹r < 0, ErrPreconditionerNotSPD) or a NaN or Inf. A
// singular system with b outside the range of A is reported with status
// Stagnated and Result.MINRES.Singular.
//
// Result.LambdaMin and LambdaMax are the extreme Ritz values of the Lanczos
// tridiagonal of M⁻¹A (signed, approached from inside), and Cond is the
// ratio of the largest Ritz value's magnitude to the smallest one's (the
// two Ritz values nearest zero), an estimate, not a bound, for an
// indefinite matrix.
//
// x receives the solution; it is written, never read. MINRES sets
// Result.Method to "minres" and Result.Preconditioner to "none" when m is
// nil. It panics on the conditions CG panics on.
func MINRES(ctx context.Context, a Operator, b, x []float64, m Preconditioner, s Settings) (Result, error) {
	n := checkSystem("MINRES", a, b, x, s)
	var w minresWork
	w.alloc(n, m != nil, s.cgDefaults(n).MaxIter)
	return w.solve(ctx, a, b, x, m, s)
}

// minresWork holds MINRES's vectors: q = A·z, two Lanczos vectors, the
// preconditioned one z (the current Lanczos vector itself without a
// preconditioner), two update directions, and one spare for the singular
// test. With x and b that makes nine vectors of length n (eight without a
// preconditioner).
type minresWork struct {
	q, v0, v1, z, w0, w1, u []float64
	lan                     lanczos
}

func (w *minresWork) alloc(n int, precond bool, maxIter int) {
	w.q = make([]float64, n)
	w.v0 = make([]float64, n)
	w.v1 = make([]float64, n)
	w.w0 = make([]float64, n)
	w.w1 = make([]float64, n)
	w.u = make([]float64, n)
	if precond {
		w.z = make([]float64, n)
	}
	w.lan.reset(maxIter)
}

// minresDir is one update direction w_j = ω·ŵ, stored as ŵ with its scale
// ω, and the coefficient still to be added to x times ŵ (the update of x
// is applied lazily, in the sweep that overwrites ŵ).
type minresDir struct {
	v       []float64
	omega   float64
	pending float64
}

// flush adds d's pending share to x.
func (d *minresDir) flush(x []float64) {
	if d.pending != 0 {
		sparse.Axpy(x, d.pending, d.v)
		d.pending = 0
	}
}

func (w *minresWork) solve(ctx context.Context, a Operator, b, x []float64, m Preconditioner, s Settings) (Result, error) {
	st := cgState{start: time.Now(), s: s.cgDefaults(len(b))}
	res := Result{Method: "minres", Settings: st.s}
	if m == nil {
		res.Preconditioner = "none"
	}
	w.lan.reset(st.s.MaxIter)
	op := newCGOperator(a)
	var mr MINRESResult
	status, err := w.iterate(ctx, &op, b, x, m, &st, &mr)

	if !st.trueFresh {
		st.products++
		st.trueNorm = math.Sqrt(op.residual(w.q, b, x))
		st.trueFresh = true
	}
	if status != Converged && mr.NormalResidualRel == 0 && st.bnorm > 0 && cgFinite(st.trueNorm) && st.trueNorm > 0 {
		// Say how far x is from a least-squares solution (w.q holds the
		// true residual only when just computed, so recompute it).
		st.products++
		op.residual(w.q, b, x)
		st.products += w.normalResidual(&op, b, m == nil, &mr, st.trueNorm)
	}
	res.Status = status
	res.Iterations = st.iter
	res.Products = st.products
	res.ResidualNorm = st.rnorm
	res.TrueResidualNorm = st.trueNorm
	res.RHSNorm = st.bnorm
	res.RelResidual = st.trueNorm
	if st.bnorm > 0 {
		res.RelResidual = st.trueNorm / st.bnorm
	}
	res.LambdaMin, res.LambdaMax = w.lan.extremes()
	if small := w.lan.smallestMagnitude(); small > 0 {
		res.Cond = max(math.Abs(res.LambdaMin), math.Abs(res.LambdaMax)) / small
	}
	res.Solve = time.Since(st.start)
	if st.iter > 0 {
		res.PerIteration = res.Solve / time.Duration(st.iter)
	}
	res.MINRES = &mr
	if st.s.Recorder != nil {
		st.s.Recorder.Finish(&res)
	}
	return res, err
}

// normalResidual sets mr's NormalResidualRel and NormEstimate for the
// residual t = w.q of norm tnorm, and returns the products it made. It uses
// w.u and overwrites w.q.
func (w *minresWork) normalResidual(op *cgOperator, b []float64, unprecond bool, mr *MINRESResult, tnorm float64) int {
	op.a.MulVec(w.u, w.q)
	atr := math.Sqrt(sparse.Dot(w.u, w.u))
	products := 1
	if mr.NormEstimate == 0 {
		// Power iteration with A from b: ‖A·y‖/‖y‖ ≤ ‖A‖₂ for every y,
		// approaching it (Golub and Van Loan §8.2.1).
		est := 0.0
		if unprecond && w.lan.k >= 2 {
			lo, hi := w.lan.extremes()
			est = max(math.Abs(lo), math.Abs(hi))
		}
		y, ay := w.q, w.u
		copy(y, b)
		ny := math.Sqrt(sparse.Dot(y, y))
		for range minresNormSteps {
			if !(ny > 0) || !cgFinite(ny) {
				break
			}
			op.a.MulVec(ay, y)
			products++
			na := math.Sqrt(sparse.Dot(ay, ay))
			est = max(est, na/ny)
			y, ay = ay, y
			ny = na
		}
		mr.NormEstimate = est
	}
	if mr.NormEstimate > 0 {
		mr.NormalResidualRel = atr / (mr.NormEstimate * tnorm)
	}
	return products
}

// iterate is the MINRES loop (Elman, Silvester and Wathen, Algorithm 4.1).
//
// To save passes over memory, the Lanczos vectors are kept unnormalised:
// v̂_j = τ_j·v_j with v_j the algorithm's vector (of M⁻¹-norm γ_j), so that
// ẑ_j = M⁻¹v̂_j = σ_j·z_j with σ_j = τ_j·γ_j = √(v̂_jᵀẑ_j) and z_j of unit
// M-norm; then τ_{j+1} = σ_j. The update directions are kept the same way,
// w_j = ω_j·ŵ_j, and x += c·η·w_j is added in the sweep that later
// overwrites ŵ_j (sparse.Step3), or before x is needed. Per iteration: one
// product fused with ẑᵀA·ẑ, one sparse.Step3 (x and the direction: six
// vector accesses) and one sparse.TriadDot (the Lanczos vector and its
// norm: four), plus the preconditioner: ten vector accesses besides the
// product against CG's eight (BENCHMARKS.md has the measured ratio).
func (w *minresWork) iterate(ctx context.Context, op *cgOperator, b, x []float64, m Preconditioner, st *cgState, mr *MINRESResult) (Status, error) {
	s := &st.s
	n := len(b)
	q, vPrev, vCur := w.q[:n], w.v0[:n], w.v1[:n]
	dOld := minresDir{v: w.w0[:n]}
	dCur := minresDir{v: w.w1[:n]}
	clear(vPrev)
	clear(dOld.v)
	clear(dCur.v)
	flush := func() { dOld.flush(x); dCur.flush(x) }

	bb := sparse.Dot(b, b)
	st.bnorm = math.Sqrt(bb)
	if !cgFinite(st.bnorm) {
		clear(x)
		st.trueNorm, st.trueFresh = st.bnorm, true
		return Breakdown, cgNotFinite(0, "right-hand side b", b, "‖b‖₂", st.bnorm)
	}
	if st.bnorm == 0 {
		clear(x) // x = 0 solves A·x = 0 whether or not A is singular
		st.trueFresh = true
		if err := st.record(0, 0); err != nil {
			return Cancelled, err
		}
		return Converged, nil
	}
	tol := max(s.RelTol*st.bnorm, s.AbsTol)

	// v̂₁ = r₀ = b − A·x₀ (τ₁ = 1).
	rr, status, done, err := st.begin(op, b, x, vCur, bb, tol)
	if done {
		return status, err
	}
	rnorm := math.Sqrt(rr)

	z := vCur
	rho := rr
	if m != nil {
		z = w.z[:n]
		rho = cgPrecondition(m, z, vCur)
	}
	if err := cgCheckRho(0, rho, z, m != nil); err != nil {
		return Breakdown, err
	}

	tauPrev, tauCur := 1.0, 1.0
	gammaPrev, gammaCur := 1.0, math.Sqrt(rho) // γ₀ (unused: v̂₀ = 0), γ₁
	cPrev, cCur, sPrev, sCur := 1.0, 1.0, 0.0, 0.0
	eta := gammaCur
	mr.PrecondResidualNorm = eta
	ratio := rnorm / eta // ‖r‖₂/‖r‖_{M⁻¹}, recalibrated at each true residual
	best, etaAtCheck := rnorm, eta
	strikes := 0
	tNorm := 0.0 // running estimate of ‖T‖
	stalls := 0  // consecutive checks that did not halve the best true residual

	for {
		if st.iter >= s.MaxIter {
			flush()
			return IterationLimit, nil
		}
		if err := ctx.Err(); err != nil {
			flush()
			return Cancelled, err
		}
		if s.TimeLimit > 0 && time.Since(st.start) >= s.TimeLimit {
			flush()
			return TimeLimit, nil
		}

		sigma := tauCur * gammaCur // ẑ = σ·z
		zaz := op.mulVecDot(q, z)
		st.iter++
		st.products++
		k := st.iter
		st.trueFresh = false
		delta := zaz / (sigma * sigma)
		if !cgFinite(delta) {
			flush()
			if cgFirstNotFinite(q) >= 0 {
				return Breakdown, cgNotFinite(k, "product A·z", q, "", 0)
			}
			return Breakdown, &BreakdownError{Iteration: k, Quantity: "zᵀA·z", Value: zaz, Err: ErrNotFinite}
		}
		w.lan.addEntry(delta)

		// The rotations so far applied to the new column of the
		// tridiagonal (α₀, α₂, α₃ of Algorithm 4.1).
		a0 := cCur*delta - cPrev*sCur*gammaCur
		a2 := sCur*delta + cPrev*cCur*gammaCur
		a3 := sPrev * gammaCur

		// ŵ_{j+1} = ẑ_j − α₃·σ·ω_{j−1}·ŵ_{j−1} − α₂·σ·ω_j·ŵ_j, into ŵ_{j−1}'s
		// storage, adding ŵ_{j−1}'s pending share to x in the same sweep.
		sparse.Step3(x, dOld.v, z, dCur.v, dOld.pending, -a3*sigma*dOld.omega, -a2*sigma*dCur.omega)
		dOld.pending = 0

		// v̂_{j+1} = q − δ·v̂_j − (γ_j·σ_j/σ_{j−1})·v̂_{j−1}, into v̂_{j−1}'s
		// storage (v̂₀ = 0), and ρ = v̂ᵀM⁻¹v̂.
		coef := gammaCur * sigma / (tauPrev * gammaPrev)
		rho = sparse.TriadDot(vPrev, q, vCur, -coef, -delta)
		if m != nil {
			rho = cgPrecondition(m, z, vPrev)
		}
		if !(rho >= 0) || math.IsInf(rho, 1) {
			flush()
			if !cgFinite(rho) {
				if m != nil && cgFirstNotFinite(z) >= 0 {
					return Breakdown, cgNotFinite(k, "preconditioned vector z = M⁻¹·v", z, "", 0)
				}
				return Breakdown, cgNotFinite(k, "Lanczos vector v", vPrev, "vᵀM⁻¹v", rho)
			}
			return Breakdown, &BreakdownError{Iteration: k, Quantity: "vᵀM⁻¹v", Value: rho, Err: ErrPreconditionerNotSPD}
		}
		tauNext := sigma
		gammaNext := math.Sqrt(rho) / tauNext
		w.lan.addOff(gammaNext)

		// ‖A·r_{j−1}‖ = |η_{j−1}|·‖(α₀, c_{j}·γ_{j+1})‖ (the residual of the
		// projected least-squares problem is |η|·Q_{j−1}ᵀe_j, orthogonal
		// to the first j−1 columns of T; M⁻¹-weighted with a
		// preconditioner), relative to |η_{j−1}| times ‖T‖'s running
		// estimate (its largest column, a lower bound on ‖M⁻¹A‖). Small
		// means x_{j−1} solves the least-squares problem (Paige and
		// Saunders 1975; Choi, Paige and Saunders 2011, §3): the system is
		// singular and inconsistent, and further steps only lose accuracy.
		colNorm := math.Hypot(delta, gammaNext)
		if k > 1 {
			colNorm = math.Hypot(colNorm, gammaCur)
		}
		tNorm = max(tNorm, colNorm)
		if ar := math.Hypot(a0, cCur*gammaNext) / tNorm; ar <= max(s.RelTol, minresSingularFloor) && k > 1 {
			dCur.flush(x) // x = x_{j−1}; ŵ_{j−1}'s share went in with the Step
			return w.checkSingular(op, b, x, m, st, mr, tol)
		}

		// The new rotation, the direction's scale and x's share.
		a1 := math.Hypot(a0, gammaNext)
		if !(a1 > 0) || !cgFinite(a1) {
			// The tridiagonal became singular with the Krylov space
			// exhausted: no further progress is possible.
			flush()
			return w.checkSingular(op, b, x, m, st, mr, tol)
		}
		cNext, sNext := a0/a1, gammaNext/a1
		dOld.omega = 1 / (a1 * sigma)
		dOld.pending = cNext * eta * dOld.omega
		eta = -sNext * eta

		dOld, dCur = dCur, dOld
		vPrev, vCur = vCur, vPrev
		tauPrev, tauCur = tauCur, tauNext
		gammaPrev, gammaCur = gammaCur, gammaNext
		cPrev, cCur = cCur, cNext
		sPrev, sCur = sCur, sNext
		if m == nil {
			z = vCur
		}

		mr.PrecondResidualNorm = math.Abs(eta)
		rnorm = math.Abs(eta) * ratio
		st.rnorm = rnorm
		exhausted := gammaNext == 0
		met := rnorm <= tol
		if met || exhausted || (s.RefreshEvery > 0 && k%s.RefreshEvery == 0) {
			flush()
			st.products++
			tnorm := math.Sqrt(op.residual(q, b, x))
			st.trueNorm, st.trueFresh = tnorm, true
			if !cgFinite(tnorm) {
				return Breakdown, cgNotFinite(k, "true residual b − A·x", q, "‖b − A·x‖₂", tnorm)
			}
			if tnorm <= tol {
				if err := st.record(k, tnorm); err != nil {
					return Cancelled, err
				}
				return Converged, nil
			}
			if eta != 0 {
				ratio = tnorm / math.Abs(eta)
			}
			if tnorm >= cgStagnationGain*best {
				stalls++
				if stalls >= minresLSChecks {
					st.products += w.normalResidual(op, b, m == nil, mr, tnorm)
					if mr.NormalResidualRel <= max(s.RelTol, minresSingularFloor) ||
						(stalls >= minresStallChecks && mr.NormalResidualRel <= minresNearSingular) {
						mr.Singular = true
						if err := st.record(k, tnorm); err != nil {
							return Cancelled, err
						}
						return Stagnated, nil
					}
					mr.NormalResidualRel = 0 // stale once the iteration goes on
				}
				if math.Abs(eta) < cgStagnationGain*etaAtCheck {
					strikes++
				}
			} else {
				strikes, stalls = 0, 0
			}
			best = min(best, tnorm)
			etaAtCheck = math.Abs(eta)
			rnorm = tnorm
			st.rnorm = rnorm
			if exhausted {
				if err := st.record(k, rnorm); err != nil {
					return Cancelled, err
				}
				return Stagnated, nil
			}
		}
		if err := st.record(k, rnorm); err != nil {
			flush()
			return Cancelled, err
		}
		if strikes >= minresStrikes {
			flush()
			return Stagnated, nil
		}

		// Keep the scale factors of the stored vectors in range, scaling by
		// powers of two (exact) with the spare vector as a zero: v = 0 + f·v.
		if e := math.Round(math.Log2(tauCur)); math.Abs(e) > minresScaleExp {
			clear(w.u)
			f := math.Ldexp(1, -int(e))
			sparse.Triad(vCur, w.u, vCur, f)
			if m != nil {
				sparse.Triad(z, w.u, z, f)
			}
			tauCur *= f
		}
		if e := math.Round(math.Log2(tauPrev)); math.Abs(e) > minresScaleExp {
			clear(w.u)
			f := math.Ldexp(1, -int(e))
			sparse.Triad(vPrev, w.u, vPrev, f)
			tauPrev *= f
		}
	}
}

// checkSingular handles the end of the Krylov space without convergence: it
// computes the true residual and the least-squares test and returns
// Stagnated (Converged if the residual meets the tolerance after all).
func (w *minresWork) checkSingular(op *cgOperator, b, x []float64, m Preconditioner, st *cgState, mr *MINRESResult, tol float64) (Status, error) {
	st.products++
	tnorm := math.Sqrt(op.residual(w.q, b, x))
	st.trueNorm, st.trueFresh, st.rnorm = tnorm, true, tnorm
	if tnorm <= tol {
		return Converged, st.record(st.iter, tnorm)
	}
	st.products += w.normalResidual(op, b, m == nil, mr, tnorm)
	mr.Singular = mr.NormalResidualRel <= max(st.s.RelTol, minresSingularFloor)
	if err := st.record(st.iter, tnorm); err != nil {
		return Cancelled, err
	}
	return Stagnated, nil
}

// checkSystem panics on a programmer's mistake in the arguments of method
// and returns the dimension.
func checkSystem(method string, a Operator, b, x []float64, s Settings) int {
	rows, cols := a.Dims()
	if rows != cols {
		panic(fmt.Sprintf("krylov: %s needs a square operator, have %d×%d", method, rows, cols))
	}
	return cgCheckSystem(a, b, x, s)
}
