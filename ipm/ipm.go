package ipm

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

// LP is a linear program in standard form: min cᵀx subject to A·x = b,
// x ≥ 0. A must have full row rank.
type LP struct {
	Name string
	A    *sparse.CSR
	B, C []float64
}

// Options control Solve. The zero value works.
type Options struct {
	// Tol is the stopping tolerance on the scaled primal and dual
	// residuals and the duality measure μ (see Solve). Default 1e-10.
	Tol float64
	// MaxIter caps the interior-point iterations. Default 100.
	MaxIter int
	// Preconditioner is the normal-equations preconditioner: "jacobi" (the
	// default), "ic0" or "none".
	Preconditioner string
	// RelTol is the normal-equations solves' tolerance. Default 1e-12.
	RelTol float64
	// Step is the fraction η of the step to the boundary. Default 0.995
	// (Nocedal and Wright take η ∈ [0.9, 1.0)).
	Step float64
}

// Result is Solve's answer.
type Result struct {
	X           []float64 // the primal solution
	Lambda, S   []float64 // the dual solution: multipliers and reduced costs
	Objective   float64   // cᵀx
	Iterations  int
	Solves      int     // normal-equations solves done by package solve
	WorstRelRes float64 // the largest true relative residual of those solves
	WeightRatio float64 // the largest max d/min d of D = X·S⁻¹ seen
}

// ErrNotConverged: the iteration cap was reached first.
var ErrNotConverged = errors.New("ipm: the interior-point iteration did not converge")

// Solve runs Mehrotra's predictor-corrector on p. It stops when
// ‖A·x − b‖ ≤ Tol·(1 + ‖b‖), ‖Aᵀλ + s − c‖ ≤ Tol·(1 + ‖c‖) and
// μ = xᵀs/n ≤ 0.01·Tol·(1 + |cᵀx|). A normal-equations solve that fails
// (set-up error, breakdown) ends it with that error.
func Solve(ctx context.Context, p LP, opt Options) (Result, error) {
	if opt.Tol == 0 {
		opt.Tol = 1e-10
	}
	if opt.MaxIter == 0 {
		opt.MaxIter = 100
	}
	if opt.Preconditioner == "" {
		opt.Preconditioner = "jacobi"
	}
	if opt.RelTol == 0 {
		opt.RelTol = 1e-12
	}
	if opt.Step == 0 {
		opt.Step = 0.995
	}
	a, b, c := p.A, p.B, p.C
	m, n := a.Rows, a.Cols
	if len(b) != m || len(c) != n {
		return Result{}, fmt.Errorf("ipm: A is %d×%d but len(b) = %d, len(c) = %d", m, n, len(b), len(c))
	}
	w := &worker{a: a, cache: solve.NewNormalCache(a), opt: opt}
	var res Result
	ones := make([]float64, n)
	for j := range ones {
		ones[j] = 1
	}

	// Starting point (Nocedal and Wright, §14.2): x̃ = Aᵀ(AAᵀ)⁻¹b,
	// λ̃ = (AAᵀ)⁻¹A·c, s̃ = c − Aᵀλ̃, shifted to be positive and balanced.
	x, s := make([]float64, n), make([]float64, n)
	lam := make([]float64, m)
	if err := w.normal(ctx, ones, b, lam, &res); err != nil {
		return res, err
	}
	a.MulVecTrans(x, lam)
	ac := make([]float64, m)
	a.MulVec(ac, c)
	if err := w.normal(ctx, ones, ac, lam, &res); err != nil {
		return res, err
	}
	a.MulVecTrans(s, lam)
	for j := range s {
		s[j] = c[j] - s[j]
	}
	dx, ds := max(-1.5*minOf(x), 0), max(-1.5*minOf(s), 0)
	for j := range x {
		x[j] += dx
		s[j] += ds
	}
	xs, sumX, sumS := 0.0, 0.0, 0.0
	for j := range x {
		xs += x[j] * s[j]
		sumX += x[j]
		sumS += s[j]
	}
	for j := range x {
		x[j] += 0.5 * xs / sumS
		s[j] += 0.5 * xs / sumX
	}

	rb, rc := make([]float64, m), make([]float64, n)
	d, rxs := make([]float64, n), make([]float64, n)
	dxA, dsA, dlA := make([]float64, n), make([]float64, n), make([]float64, m)
	dxC, dsC, dlC := make([]float64, n), make([]float64, n), make([]float64, m)
	tmp, rhs := make([]float64, n), make([]float64, m)
	// direction solves the Newton system for the complementarity residual
	// rxs (Nocedal and Wright §14.1, eq. 14.44):
	// A·D·Aᵀ·Δλ = −r_b + A·(S⁻¹·r_xs − D·r_c), Δs = −r_c − AᵀΔλ,
	// Δx = −S⁻¹·(r_xs + X·Δs).
	direction := func(dx, ds, dl []float64) error {
		for j := range tmp {
			tmp[j] = rxs[j]/s[j] - d[j]*rc[j]
		}
		a.MulVec(rhs, tmp)
		for i := range rhs {
			rhs[i] -= rb[i]
		}
		if err := w.normal(ctx, d, rhs, dl, &res); err != nil {
			return err
		}
		a.MulVecTrans(ds, dl)
		for j := range ds {
			ds[j] = -rc[j] - ds[j]
			dx[j] = -(rxs[j] + x[j]*ds[j]) / s[j]
		}
		return nil
	}
	bnorm, cnorm := norm(b), norm(c)
	for res.Iterations = 0; ; res.Iterations++ {
		a.MulVec(rb, x)
		for i := range rb {
			rb[i] -= b[i]
		}
		a.MulVecTrans(rc, lam)
		mu := 0.0
		for j := range rc {
			rc[j] += s[j] - c[j]
			mu += x[j] * s[j]
		}
		mu /= float64(n)
		if norm(rb) <= opt.Tol*(1+bnorm) && norm(rc) <= opt.Tol*(1+cnorm) && mu <= 0.01*opt.Tol*(1+math.Abs(dot(c, x))) {
			break
		}
		if res.Iterations == opt.MaxIter {
			res.X, res.Lambda, res.S, res.Objective = x, lam, s, dot(c, x)
			return res, fmt.Errorf("%w in %d iterations (‖A·x − b‖ = %.3g, μ = %.3g)", ErrNotConverged, opt.MaxIter, norm(rb), mu)
		}
		if err := ctx.Err(); err != nil {
			return res, err
		}
		for j := range d {
			d[j] = x[j] / s[j]
			rxs[j] = x[j] * s[j]
		}
		// Predictor (affine scaling) direction.
		if err := direction(dxA, dsA, dlA); err != nil {
			return res, err
		}
		ap, ad := stepTo(x, dxA, 1), stepTo(s, dsA, 1)
		muAff := 0.0
		for j := range x {
			muAff += (x[j] + ap*dxA[j]) * (s[j] + ad*dsA[j])
		}
		muAff /= float64(n)
		sigma := math.Pow(muAff/mu, 3)
		// Corrector: r_xs = X·S·e + ΔX_aff·ΔS_aff·e − σμe.
		for j := range rxs {
			rxs[j] = x[j]*s[j] + dxA[j]*dsA[j] - sigma*mu
		}
		if err := direction(dxC, dsC, dlC); err != nil {
			return res, err
		}
		ap = min(1, opt.Step*stepTo(x, dxC, math.Inf(1)))
		ad = min(1, opt.Step*stepTo(s, dsC, math.Inf(1)))
		for j := range x {
			x[j] += ap * dxC[j]
			s[j] += ad * dsC[j]
		}
		for i := range lam {
			lam[i] += ad * dlC[i]
		}
	}
	res.X, res.Lambda, res.S, res.Objective = x, lam, s, dot(c, x)
	return res, nil
}

// worker does the normal-equations solves of one program.
type worker struct {
	a     *sparse.CSR
	cache *solve.NormalCache
	opt   Options
}

// normal solves (A·diag(d)·Aᵀ)·y = r with package solve.
func (w *worker) normal(ctx context.Context, d, r, y []float64, res *Result) error {
	s, err := solve.PrepareNormal(solve.Matrix{A: w.a, Name: "A"},
		solve.Request{Preconditioner: w.opt.Preconditioner, RelTol: w.opt.RelTol, MaxIter: 20 * w.a.Rows},
		solve.Weights{D: d}, w.cache)
	if err != nil {
		return fmt.Errorf("ipm: normal-equations solve %d: %w", res.Solves+1, err)
	}
	sum, err := s.Solve(ctx, r, nil, y, nil)
	if err != nil {
		return fmt.Errorf("ipm: normal-equations solve %d: %w (%s)", res.Solves+1, err, sum.Headline)
	}
	res.Solves++
	res.WorstRelRes = max(res.WorstRelRes, float64(sum.RelativeResidual))
	if sum.WeightRatio != nil {
		res.WeightRatio = max(res.WeightRatio, float64(*sum.WeightRatio))
	}
	return nil
}

// stepTo returns the largest α ≤ cap with v + α·dv ≥ 0.
func stepTo(v, dv []float64, cap float64) float64 {
	alpha := cap
	for j := range v {
		if dv[j] < 0 {
			alpha = min(alpha, -v[j]/dv[j])
		}
	}
	return alpha
}

func minOf(v []float64) float64 {
	m := math.Inf(1)
	for _, x := range v {
		m = min(m, x)
	}
	return m
}

func dot(x, y []float64) float64 {
	var s float64
	for i := range x {
		s += x[i] * y[i]
	}
	return s
}

func norm(v []float64) float64 { return math.Sqrt(dot(v, v)) }

// Bakery is a transportation problem of our own invention: bakeries with
// daily oven capacities ship loaves to cafés with fixed orders, at a cost
// per loaf that grows with the distance on a made-up town map (random
// positions from seed). Variables: the shipments x_ij (bakery i to café j,
// column i·cafes + j) and one slack per bakery (unused capacity, column
// bakeries·cafes + i). Constraints: Σ_j x_ij + slack_i = capacity_i (rows
// 0…bakeries−1) and Σ_i x_ij = order_j (the next cafes rows). The slack
// columns and the order rows make A full row rank; the total capacity is
// about 1.3 times the total order, so the program is feasible. It panics
// if bakeries or cafes is below 1.
func Bakery(bakeries, cafes int, seed uint64) LP {
	if bakeries < 1 || cafes < 1 {
		panic(fmt.Sprintf("ipm: Bakery(%d, %d): want at least one bakery and one café", bakeries, cafes))
	}
	rng := rand.New(rand.NewPCG(seed, 77))
	orders := make([]float64, cafes)
	total := 0.0
	for j := range orders {
		orders[j] = float64(20 + rng.IntN(80))
		total += orders[j]
	}
	n := bakeries*cafes + bakeries
	m := bakeries + cafes
	var ii, jj []int32
	var vv []float64
	c := make([]float64, n)
	b := make([]float64, m)
	for i := range bakeries {
		b[i] = math.Round(1.3 * total / float64(bakeries) * (0.6 + 0.8*rng.Float64()))
		bx, by := rng.Float64(), rng.Float64()
		for j := range cafes {
			col := i*cafes + j
			cx, cy := float64(j%5)/4, float64(j/5)/float64(max(1, cafes/5))
			c[col] = 0.2 + math.Hypot(bx-cx, by-cy) // cost per loaf
			ii, jj, vv = append(ii, int32(i), int32(bakeries+j)), append(jj, int32(col), int32(col)), append(vv, 1, 1)
		}
		ii, jj, vv = append(ii, int32(i)), append(jj, int32(bakeries*cafes+i)), append(vv, 1)
	}
	copy(b[bakeries:], orders)
	a, _, err := sparse.FromTriplets(m, n, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		panic("ipm: " + err.Error()) // cannot happen: the indices are in range
	}
	return LP{Name: fmt.Sprintf("bakeries %d × cafés %d", bakeries, cafes), A: a, B: b, C: c}
}
