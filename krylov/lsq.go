package krylov

import (
	"context"
	"fmt"
	"math"
	"time"
)

// LSQMethod chooses the least-squares iteration.
type LSQMethod int

const (
	// LSQAuto picks LSQR, always: it is mathematically equivalent to CGLS,
	// costs the same two products per iteration and a few more vector passes,
	// and is the more reliable of the two in floating point when A is
	// ill-conditioned (Paige and Saunders 1982, §7 and §8).
	LSQAuto LSQMethod = iota
	// LSQR is the Golub–Kahan bidiagonalization method of Paige and Saunders
	// (ACM TOMS 8(1), 1982, §4).
	LSQR
	// CGLS is conjugate gradients applied to the normal equations without
	// forming them (Björck, Numerical Methods for Least Squares Problems,
	// SIAM 1996, §7.4.1).
	CGLS
)

var lsqMethodNames = map[LSQMethod]string{LSQAuto: "auto", LSQR: "lsqr", CGLS: "cgls"}

// DefaultLSQTol is the default of LSQSettings.ATol and BTol.
const DefaultLSQTol = 1e-8

// String returns the method's stable lower-case name: "auto", "lsqr" or
// "cgls".
func (m LSQMethod) String() string {
	if n, ok := lsqMethodNames[m]; ok {
		return n
	}
	return fmt.Sprintf("lsqmethod(%d)", int(m))
}

// Stopping rules, as reported in LSQResult.StoppedBy.
const (
	// RuleResidual: ‖r̄‖ ≤ BTol·‖b‖ + ATol·‖Ā‖·‖x̄‖, the test for a
	// compatible system.
	RuleResidual = "residual"
	// RuleNormalResidual: ‖Āᵀr̄‖ ≤ ATol·‖Ā‖·‖r̄‖, the test for an
	// incompatible (least-squares) system.
	RuleNormalResidual = "normal-residual"
)

// LSQSettings control a least-squares solve. The zero value works; each
// field's comment gives its default, and LSQResult.Settings echoes the values
// actually used.
type LSQSettings struct {
	// Damp is λ ≥ 0 in min ‖A·x − b‖² + λ²‖x‖². Default 0.
	Damp float64
	// ATol and BTol are the relative tolerances of the stopping rules (see
	// the package documentation): ATol bounds the relative error allowed
	// in A, BTol that in b. Default 1e-8 each; zero means the default.
	ATol, BTol float64
	// MaxIter caps the iterations. Default 10·min(m, n) when Damp = 0 and
	// 10·n when Damp > 0: in exact arithmetic both methods end in at most
	// rank(Ā) iterations, which min(m, n) (undamped) or n (damped, Ā =
	// [A; λI]) bounds, and the factor 10 leaves room for the loss of
	// orthogonality on ill-conditioned problems (the same convention as CG's
	// 10·n).
	MaxIter int
	// TimeLimit is a wall-time budget for the iterations. Default 0: none.
	TimeLimit time.Duration
	// X0 is the starting guess; nil means zero. It is never modified. The
	// methods solve for the correction from r0 = b − A·x0.
	X0 []float64
	// Scaling is the column scaling. Default ScaleAuto.
	Scaling Scaling
	// Method is the iteration. Default LSQAuto, which is LSQR.
	Method LSQMethod
	// Recorder receives the progress; nil records nothing.
	Recorder Recorder `json:"-"`
	// Checkpoint and Resume work as in Settings: states of the iteration
	// asked for from time to time, and a saved state to continue from
	// (X0 is then ignored).
	Checkpoint *Checkpoint `json:"-"`
	Resume     *State      `json:"-"`
}

// LSQResult is the part of a Result that only a least-squares solve has
// (Result.LSQ). The figures common to every method (status, iterations,
// products, ‖b − A·x‖ as ResidualNorm and TrueResidualNorm, ‖b‖, the
// relative residual, the times, and the condition estimate as Cond) are in
// the Result itself.
type LSQResult struct {
	// Scaling is "colscale" or "none" (also Result.Preconditioner).
	Scaling string
	// StoppedBy names the rule that was met when Status is Converged
	// (RuleResidual or RuleNormalResidual), "" otherwise.
	StoppedBy string
	// NormalResidualNorm is ‖Aᵀ·r − λ²x‖₂ (the gradient of the damped
	// objective up to a factor −2, zero at the minimiser), recomputed from
	// the returned x at the end. XNorm is ‖x‖₂.
	NormalResidualNorm float64
	XNorm              float64
	// ANormEstimate is the Frobenius-norm estimate ‖B_k‖_F of the operator
	// the iteration saw (Ā = [A·D; λD], with D the column scaling or I);
	// CondEstimate estimates Ā's condition number ‖Ā‖_F·‖Ā⁺‖_F from the same
	// recurrences (Paige and Saunders 1982, §5.1 and §5.3), and is copied to
	// Result.Cond. In exact arithmetic both grow towards their targets from
	// below; in floating point, once the bidiagonalization loses
	// orthogonality, they can pass them. Zero when no iteration ran.
	ANormEstimate, CondEstimate float64
	// ZeroColumns lists, 0-based and ascending, the columns of A that are
	// zero (A is then rank deficient). They are known only when the operator
	// implements ColumnNormer; nil otherwise or when there are none.
	ZeroColumns []int
	// Settings are the settings used, defaults filled in and Scaling and
	// Method resolved (never ScaleAuto or LSQAuto).
	Settings LSQSettings
}

// LSQ solves the damped linear least-squares problem
//
//	min ‖A·x − b‖₂² + λ²‖x‖₂²,  λ = s.Damp,
//
// for A with m rows and n columns, m ≥ n or m < n, writing the solution into
// x. See the package documentation for the methods, the stopping rules and
// the scaling.
//
// x must not share memory with b; it may be s.X0 itself. LSQ returns a
// non-nil error only when the context is done or the Recorder failed (status
// Cancelled; the error is ctx.Err() or the Recorder's), when a NaN or Inf
// appeared (status Breakdown, a *BreakdownError wrapping ErrNotFinite), or
// when ScaleColumns was asked of an operator without ColumnNorms
// (ErrNoColumnNorms; nothing is solved and x is untouched). Not converging is
// a Status, not an error. Otherwise x holds the last iterate. The Recorder,
// if any, gets Finish once on every path that returns.
//
// LSQ panics if len(b) != m, len(x) != n, x and b are the same slice,
// s.X0 != nil and len(s.X0) != n, s.Damp, s.ATol, s.BTol or s.MaxIter is
// negative or NaN, or s.Method or s.Scaling is not one of the constants.
func LSQ(ctx context.Context, a TransOperator, b, x []float64, s LSQSettings) (Result, error) {
	start := time.Now()
	m, n := a.Dims()
	if len(b) != m {
		panic(fmt.Sprintf("krylov: len(b) = %d, want %d rows", len(b), m))
	}
	if len(x) != n {
		panic(fmt.Sprintf("krylov: len(x) = %d, want %d columns", len(x), n))
	}
	if m > 0 && n > 0 && &b[0] == &x[0] {
		panic("krylov: x and b are the same slice")
	}
	if s.X0 != nil && len(s.X0) != n {
		panic(fmt.Sprintf("krylov: len(X0) = %d, want %d columns", len(s.X0), n))
	}
	if !(s.Damp >= 0) || !(s.ATol >= 0) || !(s.BTol >= 0) || s.MaxIter < 0 {
		panic(fmt.Sprintf("krylov: negative or NaN least-squares setting (Damp %g, ATol %g, BTol %g, MaxIter %d)",
			s.Damp, s.ATol, s.BTol, s.MaxIter))
	}
	if s.ATol == 0 {
		s.ATol = DefaultLSQTol
	}
	if s.BTol == 0 {
		s.BTol = DefaultLSQTol
	}
	if s.MaxIter == 0 {
		if s.Damp == 0 {
			s.MaxIter = 10 * min(m, n)
		} else {
			s.MaxIter = 10 * n
		}
		s.MaxIter = max(s.MaxIter, 1)
	}
	if s.Method == LSQAuto {
		s.Method = LSQR
	}
	if s.Method != LSQR && s.Method != CGLS {
		panic(fmt.Sprintf("krylov: unknown least-squares method %v", s.Method))
	}
	if s.Scaling != ScaleAuto && s.Scaling != ScaleColumns && s.Scaling != ScaleNone {
		panic(fmt.Sprintf("krylov: unknown scaling %v", s.Scaling))
	}

	p := &lsqProblem{
		ctx: ctx, start: start, a: a, m: m, n: n, b: b, x: x, x0: s.X0,
		damp: s.Damp, atol: s.ATol, btol: s.BTol, s: s,
	}
	p.ck = newCheckpointer(s.Checkpoint, start)
	res := Result{LSQ: &LSQResult{}}

	// Column norms: asked of the operator whenever it can give them, so
	// that zero columns are reported even without scaling.
	cn, hasNorms := a.(ColumnNormer)
	var d []float64
	if hasNorms {
		d = make([]float64, n)
		cn.ColumnNorms(d)
		zero, bad := columnScale(d, s.Damp)
		res.LSQ.ZeroColumns = zero
		if bad >= 0 {
			res.LSQ.Settings = p.s
			return p.fail(res, &BreakdownError{Quantity: fmt.Sprintf("‖A(:, %d)‖", bad), Value: d[bad], Err: ErrNotFinite})
		}
	}
	if s.Scaling == ScaleAuto {
		s.Scaling, _ = ChooseScaling(s.Scaling, m, n, hasNorms)
	}
	if s.Scaling == ScaleColumns && !hasNorms {
		res.LSQ.Settings, res.Method = s, s.Method.String()
		res.Preconditioner, res.LSQ.Scaling = s.Scaling.String(), s.Scaling.String()
		res.Solve = time.Since(start)
		if rec := s.Recorder; rec != nil {
			rec.Finish(&res)
		}
		return res, ErrNoColumnNorms
	}
	if s.Scaling == ScaleColumns {
		p.d = d
	} else {
		// D = I keeps one code path; the extra stream is an n-vector, small
		// beside the products.
		p.d = make([]float64, n)
		for j := range p.d {
			p.d[j] = 1
		}
	}
	p.s = s
	res.LSQ.Settings = s
	res.Method = s.Method.String()
	res.Preconditioner = s.Scaling.String()
	res.LSQ.Scaling = s.Scaling.String()

	if s.Method == CGLS {
		return p.cgls(res)
	}
	return p.lsqr(res)
}

// lsqProblem carries what the two methods share: the problem, the settings
// and the bookkeeping of the stopping rules, the true-residual check and the
// recorder.
type lsqProblem struct {
	ctx   context.Context
	start time.Time
	a     TransOperator
	m, n  int
	b, x  []float64
	x0    []float64 // nil means zero
	d     []float64 // column scale factors; all ones without scaling
	z     []float64 // the method's iterate, x = D·z; nil before it starts
	damp  float64
	atol  float64
	btol  float64
	bnorm float64
	s     LSQSettings

	products int // products with A or Aᵀ so far

	ck checkpointer // the checkpoints asked for by s.Checkpoint

	// Stagnation bookkeeping for the true check (see verify).
	checks    int     // failed true checks in a row without progress
	lastCheck float64 // true scaled normal residual at the last failed check
	nextCheck int     // first iteration at which another check may run
}

// mulVec and mulVecTrans apply A and Aᵀ, counting the products.
func (p *lsqProblem) mulVec(dst, x []float64) {
	p.a.MulVec(dst, x)
	p.products++
}

func (p *lsqProblem) mulVecTrans(dst, x []float64) {
	p.a.MulVecTrans(dst, x)
	p.products++
}

// interrupted reports, by a nonzero status, whether the context is done or
// the time budget has run out; the error is the context's. It allocates
// nothing.
func (p *lsqProblem) interrupted(done <-chan struct{}) (Status, error) {
	select {
	case <-done:
		return Cancelled, p.ctx.Err()
	default:
	}
	if p.s.TimeLimit > 0 && time.Since(p.start) > p.s.TimeLimit {
		return TimeLimit, nil
	}
	return 0, nil
}

// record sends one row of progress to the recorder, if any.
func (p *lsqProblem) record(it int, rnorm, gnorm float64) error {
	if p.s.Recorder == nil {
		return nil
	}
	rel := rnorm
	if p.bnorm > 0 {
		rel = rnorm / p.bnorm
	}
	return p.s.Recorder.Record(Progress{
		Iteration: it, Elapsed: time.Since(p.start),
		ResidualNorm: rnorm, RelResidual: rel, NormalResidualNorm: gnorm,
	})
}

// passes applies the stopping rules of Paige and Saunders (1982, §6) to the
// scaled, augmented problem Ā·ȳ ≈ b̄ with Ā = [A·D; λD]:
//
//	rule 1 (compatible):   ‖r̄‖ ≤ btol·‖b‖ + atol·‖Ā‖·‖D⁻¹x‖
//	rule 2 (least squares): ‖Āᵀr̄‖ ≤ atol·‖Ā‖·‖r̄‖
//
// where r̄ = [b − A·x; −λx], so ‖r̄‖² = ‖r‖² + λ²‖x‖² and Āᵀr̄ = D·(Aᵀr − λ²x).
// Rule 1 says x solves a system within relative distance atol of A and btol
// of b; rule 2 says x is the exact least-squares solution for an A perturbed
// by atol relatively (Paige and Saunders 1982, §6.1–6.2). It returns the
// rule's name, or "".
func (p *lsqProblem) passes(rbar, arbar, anorm, znorm float64) string {
	switch {
	case rbar <= p.btol*p.bnorm+p.atol*anorm*znorm:
		return RuleResidual
	case arbar <= p.atol*anorm*rbar:
		return RuleNormalResidual
	}
	return ""
}

// atFloor reports whether the relative quantities of the two rules have
// fallen to the unit roundoff, below which no tolerance can be met (Paige
// and Saunders 1982, §6, their tests with 1 + test ≤ 1): when the true
// state then fails the rules, the solve has stagnated.
func (p *lsqProblem) atFloor(rbar, arbar, anorm, znorm float64) bool {
	const u = 0x1p-53
	return rbar <= u*(p.bnorm+anorm*znorm) || arbar <= u*anorm*rbar
}

// trueState is the state recomputed from x: r = b − A·x and g = Aᵀr − λ²x.
type trueState struct {
	rnorm  float64 // ‖r‖
	gnorm  float64 // ‖g‖
	xnorm  float64 // ‖x‖
	rbar   float64 // ‖[r; −λx]‖
	arbar  float64 // ‖D·g‖
	znorm  float64 // ‖D⁻¹x‖
	finite bool
}

// recompute writes x = D·z (the methods iterate on z and write x only
// here, which every way out of a solve passes through) and computes the
// true residual and normal residual of x, using tm
// (length m) and tn (length n) as scratch. It costs one product with A and
// one with Aᵀ, which are not counted as iterations.
func (p *lsqProblem) recompute(tm, tn []float64) trueState {
	x, b, d, lam := p.x, p.b, p.d, p.damp
	if p.z != nil {
		writeX(x, d, p.z)
	}
	p.mulVec(tm, x)
	var rr float64
	for i, bi := range b {
		r := bi - tm[i]
		tm[i] = r
		rr += r * r
	}
	p.mulVecTrans(tn, tm)
	lam2 := lam * lam
	var gg, dgg, xx, zz float64
	for j, xj := range x {
		g := tn[j] - lam2*xj
		gg += g * g
		dg := d[j] * g
		dgg += dg * dg
		xx += xj * xj
		z := xj / d[j]
		zz += z * z
	}
	t := trueState{
		rnorm: math.Sqrt(rr), gnorm: math.Sqrt(gg), xnorm: math.Sqrt(xx),
		rbar: math.Sqrt(rr + lam2*xx), arbar: math.Sqrt(dgg), znorm: math.Sqrt(zz),
	}
	t.finite = !math.IsNaN(rr+gg+xx) && !math.IsInf(rr+gg+xx, 0)
	return t
}

// verifyOutcome says what a true check decided.
type verifyOutcome int

const (
	verifyContinue verifyOutcome = iota // the rules fail on the true state; keep iterating
	verifyConverged
	verifyStagnated // the true state has failed repeatedly without progress
)

// verify runs when the recursive estimates pass a stopping rule at
// iteration it: it recomputes the true state of x (which the caller has
// written) and applies the rules to it. The recursive ‖r̄‖ and ‖Āᵀr̄‖ drift
// from the true ones in floating point, most on ill-conditioned problems, so
// convergence is declared on the true state only. When the estimates are at
// the rounding floor (atFloor) a failed check ends the solve as Stagnated.
// Otherwise, after a failed check the
// next one waits max(10, it/10) iterations; three failed checks in a row in
// which the true ‖Āᵀr̄‖ did not halve end the solve as Stagnated: the
// iterates have reached the accuracy that rounding allows.
func (p *lsqProblem) verify(it int, anorm float64, floor bool, tm, tn []float64) (trueState, string, verifyOutcome) {
	t := p.recompute(tm, tn)
	if !t.finite {
		return t, "", verifyStagnated
	}
	if rule := p.passes(t.rbar, t.arbar, anorm, t.znorm); rule != "" {
		return t, rule, verifyConverged
	}
	if floor {
		return t, "", verifyStagnated
	}
	if p.checks > 0 && t.arbar > 0.5*p.lastCheck {
		p.checks++
	} else {
		p.checks = 1
	}
	p.lastCheck = t.arbar
	if p.checks >= 3 {
		return t, "", verifyStagnated
	}
	p.nextCheck = it + max(10, it/10)
	return t, "", verifyContinue
}

// finish fills the result's figures from the true state of x, times the
// solve and tells the recorder.
func (p *lsqProblem) finish(res Result, t trueState, it int, anorm, cond float64) Result {
	res.Iterations = it
	res.Products = p.products
	res.ResidualNorm = t.rnorm
	res.TrueResidualNorm = t.rnorm
	res.LSQ.NormalResidualNorm = t.gnorm
	res.LSQ.XNorm = t.xnorm
	res.LSQ.ANormEstimate = anorm
	res.LSQ.CondEstimate = cond
	res.Cond = cond
	res.RHSNorm = p.bnorm
	res.RelResidual = t.rnorm
	if p.bnorm > 0 {
		res.RelResidual = t.rnorm / p.bnorm
	}
	res.Solve = time.Since(p.start)
	if it > 0 {
		res.PerIteration = res.Solve / time.Duration(it)
	}
	if rec := p.s.Recorder; rec != nil {
		rec.Finish(&res)
	}
	return res
}

// fail ends a solve before any iteration with a breakdown in the set-up.
// x is set to x0.
func (p *lsqProblem) fail(res Result, err error) (Result, error) {
	if p.x0 != nil {
		copy(p.x, p.x0)
	} else {
		clear(p.x)
	}
	res.Status = Breakdown
	res.Method = p.s.Method.String()
	res.Preconditioner = p.s.Scaling.String()
	res.LSQ.Scaling = p.s.Scaling.String()
	res.Solve = time.Since(p.start)
	if rec := p.s.Recorder; rec != nil {
		rec.Finish(&res)
	}
	return res, err
}

// lsqNorm2 returns ‖v‖₂² by a plain loop, summed in index order.
func lsqNorm2(v []float64) float64 {
	var s float64
	for _, e := range v {
		s += e * e
	}
	return s
}

// lsqFinite reports whether v is neither NaN nor infinite.
func lsqFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
