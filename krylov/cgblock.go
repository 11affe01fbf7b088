package krylov

import (
	"context"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/sparse"
)

// BlockOperator is an operator that can multiply a block of k vectors at
// once, reading A once for all of them, as *sparse.CSR does. The blocks are
// row-major n×k (see the sparse package), and column c of each result must
// be bitwise what the one-vector products (MulVecDot, Residual) give on
// column c alone.
type BlockOperator interface {
	Operator
	// MulBlockDot sets dst = A·x and dots[c] = x_cᵀ(A·x)_c.
	MulBlockDot(dst, x []float64, k int, dots []float64)
	// ResidualBlock sets dst = b − A·x and norms[c] = ‖dst_c‖².
	ResidualBlock(dst, b, x []float64, k int, norms []float64)
}

// BlockPreconditioner is a Preconditioner that can apply M⁻¹ to a row-major
// n×k block in one sweep (precond.IC0 does, k columns per triangular
// sweep). Column c of dst must be bitwise Precondition's on column c of r.
type BlockPreconditioner interface {
	Preconditioner
	PreconditionBlock(dst, r []float64, k int)
}

// CGBlock solves A·xs[i] = bs[i] for every i by conjugate gradients run on
// all the right-hand sides at once: every iteration makes one block
// product with A (sparse.CSR.MulBlockDot), which reads A once for up to
// sparse.MaxWidth right-hand sides, and the vector sweeps run on the block
// too. Each right-hand side keeps its own scalars (α, β, ρ), its own
// stopping test, refreshes, stagnation rules and limits, from its own
// Settings ss[i] (X0, Recorder, tolerances, MaxIter, TimeLimit,
// RefreshEvery): right-hand side i takes exactly the steps that
// CG(ctx, a, bs[i], xs[i], m, ss[i]) takes, with bitwise the same iterates,
// residual history and Result apart from the timings (every block kernel
// gives each column the one-vector kernel's bits; TestCGBlockMatchesCG
// checks it). A right-hand side that stops (converged, a limit, stagnated,
// broken down, its Recorder's error) is dropped from the block, which
// narrows; x holds its last iterate and its Result is complete. More than
// sparse.MaxWidth right-hand sides are solved in groups of that many, one
// group after another.
//
// The preconditioner is applied to the block: a DiagonalPreconditioner
// (precond.Jacobi) inside the residual update, as CG does; a
// BlockPreconditioner (precond.IC0) on the whole block; any other one
// column by column. The Results' Solve time is the wall time of the group
// the right-hand side belongs to, up to its stop.
//
// The block saves the matrix's memory traffic, not the vectors': 8
// right-hand sides on Poisson3D 160³ with Jacobi ran 1.79× faster than one
// after another on the 2-core reference machine (BENCHMARKS.md), near the
// ceiling that traffic model sets.
//
// An operator that is not a BlockOperator is solved one right-hand side
// after the other (CGMulti's way, each with its own Settings). The
// returned error is nil when no right-hand side returned one; otherwise it
// is a *BlockError holding each right-hand side's error (the one CG would
// return for it); the context's cancellation stops every right-hand side. CGBlock panics on the
// conditions CG panics on, for any i, and if len(bs), len(xs) and len(ss)
// differ.
func CGBlock(ctx context.Context, a Operator, bs, xs [][]float64, m Preconditioner, ss []Settings) ([]Result, error) {
	if len(bs) != len(xs) || len(ss) != len(bs) {
		panic(fmt.Sprintf("krylov: %d right-hand sides, %d solution vectors and %d settings", len(bs), len(xs), len(ss)))
	}
	for i := range bs {
		cgCheckSystem(a, bs[i], xs[i], ss[i])
	}
	results := make([]Result, len(bs))
	errs := make([]error, len(bs))
	bo, ok := a.(BlockOperator)
	if !ok {
		n, _ := a.Dims()
		var w cgWork
		w.alloc(n, m != nil, 0)
		for i := range bs {
			w.lan.reset(ss[i].cgDefaults(n).MaxIter)
			results[i], errs[i] = w.solve(ctx, a, bs[i], xs[i], m, ss[i])
		}
		return results, cgBlockError(errs)
	}
	n, _ := a.Dims()
	width := min(len(bs), sparse.MaxWidth)
	var w cgBlockWork
	w.alloc(n, width, m != nil)
	for lo := 0; lo < len(bs); lo += width {
		hi := min(lo+width, len(bs))
		w.solve(ctx, bo, m, bs[lo:hi], xs[lo:hi], ss[lo:hi], results[lo:hi], errs[lo:hi])
	}
	return results, cgBlockError(errs)
}

func cgBlockError(errs []error) error {
	for _, err := range errs {
		if err != nil {
			return &BlockError{Errs: errs}
		}
	}
	return nil
}

// BlockError carries the errors of a CGBlock call, one per right-hand side
// (Errs[i] is nil when right-hand side i ended without one). Its message
// names the first; errors.Is and errors.As see through to every one.
type BlockError struct {
	Errs []error
}

func (e *BlockError) Error() string {
	first, more := -1, 0
	for i, err := range e.Errs {
		if err != nil {
			if first < 0 {
				first = i
			} else {
				more++
			}
		}
	}
	if first < 0 {
		return "krylov: no error"
	}
	msg := fmt.Sprintf("krylov: right-hand side %d: %v", first, e.Errs[first])
	if more > 0 {
		msg += fmt.Sprintf(" (and %d more right-hand sides with errors)", more)
	}
	return msg
}

// Unwrap returns the right-hand sides' errors that are not nil.
func (e *BlockError) Unwrap() []error {
	var out []error
	for _, err := range e.Errs {
		if err != nil {
			out = append(out, err)
		}
	}
	return out
}

// cgBlockWork holds the blocks of CGBlock, allocated once for the widest
// group: B (the right-hand sides), X, R, P, Q and Z (with a
// preconditioner), each n×k row-major, and two vectors of length n for the
// rare column-by-column work (gathering a column that broke down, the final
// true residual, the round-off level).
type cgBlockWork struct {
	b, x, r, p, q, z []float64
	u, v             []float64
	// Per-column scalars and sums for the kernels (kept here because the
	// kernels hand them to sparse's pool, so they live on the heap: once).
	s1, s2, al, be, dm, e, zero [sparse.MaxWidth]float64
}

func (w *cgBlockWork) alloc(n, k int, precond bool) {
	w.b = make([]float64, n*k)
	w.x = make([]float64, n*k)
	w.r = make([]float64, n*k)
	w.p = make([]float64, n*k)
	w.q = make([]float64, n*k)
	if precond {
		w.z = make([]float64, n*k)
	}
	w.u = make([]float64, n)
	w.v = make([]float64, n)
}

// cgColumn is one right-hand side's state in the block loop: what CG's loop
// keeps in local variables, per column.
type cgColumn struct {
	idx        int // index in the group
	st         cgState
	lan        lanczos
	tol        float64
	rho, alpha float64
	rr, rz     float64 // the last rᵀr, and rᵀz from the fused Jacobi sweep
	fused      bool    // whether rz belongs to the current r
	xDone      bool    // whether x already holds x_{j+1}
	check      bool    // whether this iteration recomputes the true residual
	best       float64
	strikes    int
	floorStart int
	floorNext  int
	floorRef   float64

	met     bool    // whether the recursive residual met the test
	tnorm   float64 // the true residual norm of this iteration's check
	beta    float64
	done    bool
	needFix bool // stopped before x took α·p: apply it before retiring
	status  Status
	err     error
	result  Result
}

// stop ends the column's solve; fix says whether x must still take α·p.
func (col *cgColumn) stop(status Status, err error, fix bool) {
	col.done, col.status, col.err, col.needFix = true, status, err, fix
}

// column copies column c of the n×k block v into dst.
func column(dst, v []float64, k, c int) {
	for i := range dst {
		dst[i] = v[i*k+c]
	}
}

// setColumn copies src into column c of the n×k block v.
func setColumn(v []float64, k, c int, src []float64) {
	for i, e := range src {
		v[i*k+c] = e
	}
}

// solve runs one group of at most sparse.MaxWidth right-hand sides. Each
// step below names the lines of CG's loop (cgWork.iterate) it repeats, per
// column.
func (w *cgBlockWork) solve(ctx context.Context, a BlockOperator, m Preconditioner, bs, xs [][]float64, ss []Settings, results []Result, errs []error) {
	n := len(bs[0])
	k := len(bs)
	start := time.Now()
	op := newCGOperator(a)
	var diag []float64
	if dm, ok := m.(DiagonalPreconditioner); ok && len(dm.InverseDiagonal()) == n {
		diag = dm.InverseDiagonal()
	}
	cols := make([]*cgColumn, k)
	for c := range cols {
		col := &cgColumn{idx: c, floorStart: -1, floorNext: -1}
		col.st = cgState{start: start, s: ss[c].cgDefaults(n)}
		col.lan.reset(col.st.s.MaxIter)
		cols[c] = col
	}
	// Per-position scalars and sums, reused every iteration.
	s1, s2, al, be := &w.s1, &w.s2, &w.al, &w.be

	// Gather B and X0 into the blocks.
	bb, x, r := w.b[:n*k], w.x[:n*k], w.r[:n*k]
	for c := range k {
		setColumn(bb, k, c, bs[c])
		if x0 := ss[c].X0; x0 != nil {
			setColumn(x, k, c, x0)
		} else {
			for i := range n {
				x[i*k+c] = 0
			}
		}
	}
	sparse.DotBlock(bb, bb, k, s1[:k])
	// r₀ = b − A·x₀ for the whole block. Where x₀ = 0 this is b bit for bit
	// (each row of A·0 sums to +0, and b − 0 = b) and its norm bᵀb as CG
	// takes it; only the columns with a start count the product.
	a.ResidualBlock(r, bb, x, k, s2[:k])
	for c, col := range cols {
		st := &col.st
		s := &st.s
		st.bnorm = math.Sqrt(s1[c])
		if !cgFinite(st.bnorm) {
			column(w.u, bb, k, c)
			for i := range n {
				x[i*k+c] = 0
			}
			st.trueNorm, st.trueFresh = st.bnorm, true
			col.stop(Breakdown, cgNotFinite(0, "right-hand side b", w.u, "‖b‖₂", st.bnorm), false)
			continue
		}
		if st.bnorm == 0 {
			for i := range n {
				x[i*k+c] = 0
			}
			st.trueFresh = true
			if err := st.record(0, 0); err != nil {
				col.stop(Cancelled, err, false)
			} else {
				col.stop(Converged, nil, false)
			}
			continue
		}
		col.tol = max(s.RelTol*st.bnorm, s.AbsTol)
		if s.X0 != nil {
			st.products++
		}
		col.rr = s2[c]
		rnorm := math.Sqrt(col.rr)
		st.rnorm, st.trueNorm, st.trueFresh = rnorm, rnorm, true
		if !cgFinite(rnorm) {
			if s.X0 != nil && cgFirstNotFinite(s.X0) >= 0 {
				col.stop(Breakdown, cgNotFinite(0, "start X0", s.X0, "", 0), false)
			} else {
				column(w.u, r, k, c)
				col.stop(Breakdown, cgNotFinite(0, "initial residual r", w.u, "‖r‖₂", rnorm), false)
			}
			continue
		}
		if err := st.record(0, rnorm); err != nil {
			col.stop(Cancelled, err, false)
			continue
		}
		if rnorm <= col.tol {
			col.stop(Converged, nil, false)
			continue
		}
		col.rho = col.rr
		col.best = rnorm
	}
	z := r
	if m != nil {
		z = w.z[:n*k]
		w.precondition(m, diag, z, r, k, s1[:k])
	}
	for c, col := range cols {
		if col.done {
			continue
		}
		if m != nil {
			col.rho = s1[c]
		}
		if err := w.checkRho(0, col.rho, z, k, c, m != nil); err != nil {
			col.stop(Breakdown, err, false)
		}
	}
	copy(w.p[:n*k], z)

	// active[j] is the column at block position j; k is the block's width.
	active := make([]*cgColumn, len(cols))
	copy(active, cols)
	k = w.retire(&active, k, n, bs, xs, &op, m == nil)
	for k > 0 {
		x, r, p, q := w.x[:n*k], w.r[:n*k], w.p[:n*k], w.q[:n*k]
		z := r
		if m != nil {
			z = w.z[:n*k]
		}
		// The limits and the context, before every iteration.
		ctxErr := ctx.Err()
		for _, col := range active {
			st := &col.st
			switch {
			case st.iter >= st.s.MaxIter:
				col.stop(IterationLimit, nil, false)
			case ctxErr != nil:
				col.stop(Cancelled, ctxErr, false)
			case st.s.TimeLimit > 0 && time.Since(st.start) >= st.s.TimeLimit:
				col.stop(TimeLimit, nil, false)
			}
		}
		if kk := w.retire(&active, k, n, bs, xs, &op, m == nil); kk != k {
			k = kk
			continue
		}

		// q = A·p and pᵀq; α.
		a.MulBlockDot(q, p, k, s1[:k])
		for j, col := range active {
			st := &col.st
			st.iter++
			st.products++
			it := st.iter
			pq := s1[j]
			col.alpha, col.xDone, col.check = 0, false, false
			if !(pq > 0) || math.IsInf(pq, 1) {
				if !cgFinite(pq) {
					column(w.u, p, k, j)
					if cgFirstNotFinite(w.u) >= 0 {
						col.stop(Breakdown, cgNotFinite(it, "search direction p", w.u, "", 0), false)
						continue
					}
					column(w.u, q, k, j)
					col.stop(Breakdown, cgNotFinite(it, "product A·p", w.u, "pᵀAp", pq), false)
					continue
				}
				col.stop(Breakdown, &BreakdownError{Iteration: it, Quantity: "pᵀAp", Value: pq, Err: ErrNotPositiveDefinite}, false)
				continue
			}
			alpha := col.rho / pq
			if !cgFinite(alpha) {
				col.stop(Breakdown, &BreakdownError{Iteration: it, Quantity: "α = rᵀz/pᵀAp", Value: alpha, Err: ErrNotFinite}, false)
				continue
			}
			col.alpha = alpha
			col.lan.addAlpha(alpha)
		}

		// r −= α·q and rᵀr (with z = d∘r and rᵀz for Jacobi); the stopped
		// columns have α = 0 and are left as they are.
		for j, col := range active {
			al[j] = -col.alpha
		}
		if diag != nil {
			sparse.AxpyDiagDotBlock(r, al[:k], q, diag, z, k, s1[:k], s2[:k])
		} else {
			sparse.AxpyDotBlock(r, al[:k], q, k, s1[:k])
		}
		anyCheck := false
		for j, col := range active {
			al[j] = 0
			if col.done {
				continue
			}
			st := &col.st
			col.rr, col.rz, col.fused = s1[j], s2[j], diag != nil
			rnorm := math.Sqrt(col.rr)
			st.rnorm, st.trueFresh = rnorm, false
			if !cgFinite(rnorm) {
				column(w.u, r, k, j)
				col.stop(Breakdown, cgNotFinite(st.iter, "residual r", w.u, "‖r‖₂", rnorm), true)
				continue
			}
			it := st.iter
			met := rnorm <= col.tol
			col.met = met
			if met || (st.s.RefreshEvery > 0 && it%st.s.RefreshEvery == 0) || it == col.floorNext {
				col.check, col.xDone, anyCheck = true, true, true
				al[j] = col.alpha
			}
		}
		if anyCheck {
			w.check(&op, a, active, k, n, al[:k])
		}

		// Record, then the stagnation verdicts.
		for _, col := range active {
			if col.done {
				continue
			}
			st := &col.st
			if err := st.record(st.iter, st.rnorm); err != nil {
				col.stop(Cancelled, err, !col.xDone)
				continue
			}
			if col.strikes >= cgStagnationStrikes && st.stagnation == "" {
				st.stagnation = StagnationDrift
			}
			if st.stagnation != "" {
				col.stop(Stagnated, nil, !col.xDone)
			}
		}

		// ρ = rᵀz: from the fused sweep, or z = M⁻¹·r afresh for the whole
		// block when some active column needs it (its z then comes out the
		// same as the fused sweep's for the others).
		recompute := false
		for _, col := range active {
			if !col.done && m != nil && !col.fused {
				recompute = true
			}
		}
		if recompute {
			w.precondition(m, diag, z, r, k, s2[:k])
		}
		for j, col := range active {
			if col.done {
				continue
			}
			rhoNew := col.rr
			switch {
			case col.fused:
				rhoNew = col.rz
			case m != nil:
				rhoNew = s2[j]
			}
			if err := w.checkRho(col.st.iter, rhoNew, z, k, j, m != nil); err != nil {
				col.stop(Breakdown, err, !col.xDone)
				continue
			}
			beta := rhoNew / col.rho
			col.rho = rhoNew
			col.lan.addBeta(beta)
			col.beta = beta
		}

		// The columns that stopped take their deferred x += α·p and leave.
		fix := false
		for j, col := range active {
			al[j] = 0
			if col.done && col.needFix {
				al[j], fix = col.alpha, true
			}
		}
		if fix {
			sparse.AxpyBlock(x, al[:k], p, k)
		}
		if kk := w.retire(&active, k, n, bs, xs, &op, m == nil); kk != k {
			k = kk
			x, p = w.x[:n*k], w.p[:n*k]
			z = w.r[:n*k]
			if m != nil {
				z = w.z[:n*k]
			}
		}
		if k == 0 {
			break
		}
		// x += α·p (unless the check did it) and p = z + β·p.
		for j, col := range active {
			al[j], be[j] = col.alpha, col.beta
			if col.xDone {
				al[j] = 0
			}
		}
		sparse.StepBlock(x, p, z, al[:k], be[:k], k)
	}
	for _, col := range cols {
		results[col.idx], errs[col.idx] = col.result, col.err
	}
}

// check recomputes the true residual t = b − A·x for the columns with
// col.check set (al holds their α, zero elsewhere; x takes α·p first), and
// applies CG's verdicts to each: convergence, the drift and the replacement
// of r by t, the drift strikes and the round-off rule.
func (w *cgBlockWork) check(op *cgOperator, a BlockOperator, active []*cgColumn, k, n int, al []float64) {
	b, x, r, p, q := w.b[:n*k], w.x[:n*k], w.r[:n*k], w.p[:n*k], w.q[:n*k]
	s1, s2, dm, e := &w.s1, &w.s2, &w.dm, &w.e
	clear(dm[:])
	clear(e[:])
	sparse.AxpyBlock(x, al, p, k)
	a.ResidualBlock(q, b, x, k, s1[:k])
	anyDrift := false
	for j, col := range active {
		if !col.check || col.done {
			continue
		}
		st := &col.st
		st.products++
		tnorm := math.Sqrt(s1[j])
		st.trueNorm, st.trueFresh, col.tnorm = tnorm, true, tnorm
		if !cgFinite(tnorm) {
			column(w.u, q, k, j)
			col.stop(Breakdown, cgNotFinite(st.iter, "true residual b − A·x", w.u, "‖b − A·x‖₂", tnorm), false)
			continue
		}
		if tnorm <= col.tol {
			if err := st.record(st.iter, tnorm); err != nil {
				col.stop(Cancelled, err, false)
			} else {
				col.stop(Converged, nil, false)
			}
			continue
		}
		dm[j], anyDrift = -1, true
	}
	if !anyDrift {
		return
	}
	// q = t − r, the drift; r = t where it matters (cgReplaceFraction).
	sparse.AxpyDotBlock(q, dm[:k], r, k, s1[:k])
	replace := false
	for j, col := range active {
		if dm[j] != 0 && math.Sqrt(s1[j]) > cgReplaceFraction*col.tol {
			e[j], replace = 1, true
		}
	}
	if replace {
		sparse.AxpyDotBlock(r, e[:k], q, k, s2[:k])
	}
	for j, col := range active {
		if dm[j] == 0 {
			continue
		}
		st := &col.st
		recursive := st.rnorm
		if e[j] != 0 {
			col.rr = s2[j]
			st.rnorm = math.Sqrt(col.rr)
			col.fused = false
		}
		tnorm := col.tnorm
		progress := tnorm < cgStagnationGain*col.best
		switch {
		case progress:
			col.strikes = 0
		case recursive < (1-cgDriftGap)*tnorm:
			col.strikes++
		}
		col.best = min(col.best, tnorm)
		if col.met || !progress || col.floorStart >= 0 {
			column(w.u, x, k, j)
			column(w.v, b, k, j)
			level := op.roundoffLevel(w.u, w.v, st.bnorm, tnorm)
			it := st.iter
			switch {
			case tnorm > level:
				col.floorStart, col.floorNext = -1, -1
			case col.floorStart < 0 || tnorm <= cgFloorGain*col.floorRef:
				col.floorStart, col.floorRef, col.floorNext = it, tnorm, it+cgFloorWindow
			case it-col.floorStart >= cgFloorWindow:
				st.stagnation = StagnationRoundoff
			default:
				col.floorNext = col.floorStart + cgFloorWindow
			}
		}
	}
}

// precondition sets z = M⁻¹·r for the whole n×k block and rz[c] = r_cᵀz_c,
// each column bitwise what CG's cgPrecondition gives on it.
func (w *cgBlockWork) precondition(m Preconditioner, diag, z, r []float64, k int, rz []float64) {
	bm, isBlock := m.(BlockPreconditioner)
	switch {
	case diag != nil:
		// With α = 0 the sweep leaves r alone and forms z = d∘r and rᵀz, as
		// sparse.DiagDot (Jacobi's PreconditionDot) does.
		sparse.AxpyDiagDotBlock(r, w.zero[:k], r, diag, z, k, w.dm[:k], rz)
	case isBlock:
		bm.PreconditionBlock(z, r, k)
		sparse.DotBlock(r, z, k, rz)
	default:
		for c := range k {
			column(w.u, r, k, c)
			m.Precondition(w.v, w.u)
			setColumn(z, k, c, w.v)
		}
		sparse.DotBlock(r, z, k, rz)
	}
}

// checkRho is cgCheckRho for column c of the block z.
func (w *cgBlockWork) checkRho(it int, rho float64, z []float64, k, c int, precond bool) error {
	if err := cgCheckRho(it, rho, nil, false); err == nil {
		return nil
	}
	if precond {
		column(w.u, z, k, c)
	}
	return cgCheckRho(it, rho, w.u, precond)
}

// retire finishes the columns of active that are done (x copied out, the
// true residual of the returned x, the Result), drops them from the block
// by moving the remaining columns left, row by row, in X, R, Z, P and B,
// and returns the new width. The moves go forward in memory (each element
// moves to an index no larger than its own), so they are done in place.
func (w *cgBlockWork) retire(active *[]*cgColumn, k, n int, bs, xs [][]float64, op *cgOperator, none bool) int {
	var keep [sparse.MaxWidth]*cgColumn
	var src [sparse.MaxWidth]int
	nk := 0
	for j, col := range *active {
		if !col.done {
			src[nk], keep[nk] = j, col
			nk++
			continue
		}
		x := xs[col.idx]
		column(x, w.x[:n*k], k, j)
		st := &col.st
		if !st.trueFresh {
			st.products++
			st.trueNorm = math.Sqrt(op.residual(w.u, bs[col.idx], x))
		}
		res := Result{Method: "cg", Settings: st.s}
		if none {
			res.Preconditioner = "none"
		}
		st.fill(&res, col.status, &col.lan)
		col.result = res
	}
	if nk == k {
		return k
	}
	if nk > 0 {
		for _, v := range [][]float64{w.x, w.r, w.z, w.p, w.b} {
			if v == nil {
				continue
			}
			for i := range n {
				for jj := range nk {
					v[i*nk+jj] = v[i*k+src[jj]]
				}
			}
		}
	}
	*active = append((*active)[:0], keep[:nk]...)
	return nk
}
