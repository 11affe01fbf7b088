package solve

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize/convex/lp"

	"github.com/residua/residua/sparse"
)

// An interior-point method for linear programs in standard form
//
//	min cᵀx  subject to  A·x = b, x ≥ 0,
//
// Mehrotra's predictor-corrector (Nocedal and Wright, Numerical
// Optimization, 2nd ed., §14.2, Algorithm 14.3, with the starting point of
// §14.2, eq. 14.46 ff.), whose every linear solve is a normal-equations
// solve (A·D·Aᵀ)·Δλ = rhs with D = X·S⁻¹ (§14.1, eq. 14.44) done by
// residua: PrepareNormal with the new D, then Setup.Solve.

// ipmLP is a linear program in standard form.
type ipmLP struct {
	name string
	a    *sparse.CSR
	b, c []float64
}

// ipmResult is the interior-point method's answer.
type ipmResult struct {
	x            []float64
	obj          float64
	iterations   int
	solves       int     // normal-equations solves
	worstRelres  float64 // largest true relative residual of those solves
	maxWeightSum float64 // largest max d/min d seen
}

// ipmNormalSolve solves (A·D·Aᵀ)·y = r with residua.
func ipmNormalSolve(t *testing.T, a *sparse.CSR, cache *NormalCache, d, r []float64, res *ipmResult) []float64 {
	t.Helper()
	s, err := PrepareNormal(Matrix{A: a, Name: "A"}, Request{Preconditioner: "jacobi", RelTol: 1e-12, MaxIter: 20 * a.Rows},
		Weights{D: d, Delta: 0}, cache)
	if err != nil {
		t.Fatal(err)
	}
	y := make([]float64, a.Rows)
	sum, err := s.Solve(context.Background(), r, nil, y, nil)
	if err != nil {
		t.Fatalf("normal-equations solve %d: %v (%s)", res.solves+1, err, sum.Headline)
	}
	res.solves++
	res.worstRelres = max(res.worstRelres, float64(sum.RelativeResidual))
	res.maxWeightSum = max(res.maxWeightSum, float64(*sum.WeightRatio))
	return y
}

// ipmSolve runs Mehrotra's predictor-corrector on p.
func ipmSolve(t *testing.T, p ipmLP) ipmResult {
	t.Helper()
	a, b, c := p.a, p.b, p.c
	m, n := a.Rows, a.Cols
	cache := NewNormalCache(a)
	var res ipmResult
	ones := make([]float64, n)
	for j := range ones {
		ones[j] = 1
	}
	mulA := func(dst, v []float64) { a.MulVec(dst, v) }
	mulAT := func(dst, v []float64) { a.MulVecTrans(dst, v) }

	// Starting point (Nocedal and Wright, §14.2): x̃ = Aᵀ(AAᵀ)⁻¹b,
	// λ̃ = (AAᵀ)⁻¹A·c, s̃ = c − Aᵀλ̃, shifted to be positive and balanced.
	x, s := make([]float64, n), make([]float64, n)
	lam := ipmNormalSolve(t, a, cache, ones, b, &res)
	mulAT(x, lam)
	ac := make([]float64, m)
	mulA(ac, c)
	lam = ipmNormalSolve(t, a, cache, ones, ac, &res)
	mulAT(s, lam)
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
	// direction solves the Newton system for complementarity residual rxs:
	// A·D·Aᵀ·Δλ = −r_b + A·(S⁻¹·r_xs − D·r_c), Δs = −r_c − AᵀΔλ,
	// Δx = −S⁻¹·(r_xs + X·Δs) (Nocedal and Wright §14.1, eq. 14.44).
	direction := func(dx, ds, dl []float64) {
		for j := range tmp {
			tmp[j] = rxs[j]/s[j] - d[j]*rc[j]
		}
		mulA(rhs, tmp)
		for i := range rhs {
			rhs[i] -= rb[i]
		}
		copy(dl, ipmNormalSolve(t, a, cache, d, rhs, &res))
		mulAT(ds, dl)
		for j := range ds {
			ds[j] = -rc[j] - ds[j]
			dx[j] = -(rxs[j] + x[j]*ds[j]) / s[j]
		}
	}
	bnorm, cnorm := norm(b), norm(c)
	for res.iterations = 0; res.iterations < 100; res.iterations++ {
		mulA(rb, x)
		for i := range rb {
			rb[i] -= b[i]
		}
		mulAT(rc, lam)
		mu := 0.0
		for j := range rc {
			rc[j] += s[j] - c[j]
			mu += x[j] * s[j]
		}
		mu /= float64(n)
		if norm(rb) <= 1e-10*(1+bnorm) && norm(rc) <= 1e-10*(1+cnorm) && mu <= 1e-12*(1+math.Abs(dot(c, x))) {
			break
		}
		for j := range d {
			d[j] = x[j] / s[j]
			rxs[j] = x[j] * s[j]
		}
		// Predictor (affine scaling) direction.
		direction(dxA, dsA, dlA)
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
		direction(dxC, dsC, dlC)
		const eta = 0.995 // the fraction of the step to the boundary (N&W: η_k ∈ [0.9, 1))
		ap, ad = min(1, eta*stepTo(x, dxC, math.Inf(1))), min(1, eta*stepTo(s, dsC, math.Inf(1)))
		for j := range x {
			x[j] += ap * dxC[j]
			s[j] += ad * dsC[j]
		}
		for i := range lam {
			lam[i] += ad * dlC[i]
		}
	}
	res.x, res.obj = x, dot(c, x)
	return res
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

// bakeryLP is a transportation problem of our own invention: bakeries with
// daily oven capacities ship loaves to cafés with fixed orders at a cost
// per loaf that grows with distance. Variables: the shipments x_ij and one
// slack per bakery (unused capacity). Constraints: Σ_j x_ij + slack_i =
// capacity_i, Σ_i x_ij = order_j. The slack columns and the order rows make
// A full row rank.
func bakeryLP(bakeries, cafes int, seed uint64) ipmLP {
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
		panic(err)
	}
	return ipmLP{name: fmt.Sprintf("bakeries %d × cafés %d", bakeries, cafes), a: a, b: b, c: c}
}

// TestInteriorPointLP: Mehrotra's method, with residua solving every
// normal-equations system, reaches the optimum that gonum's simplex
// (optimize/convex/lp, an outside reference) finds for the same program,
// to 1e-6 relative in the objective, and a feasible x (A·x = b to 1e-8
// relative, x ≥ −1e-9).
func TestInteriorPointLP(t *testing.T) {
	t.Parallel()
	for _, p := range []ipmLP{bakeryLP(3, 4, 1), bakeryLP(8, 25, 2)} {
		res := ipmSolve(t, p)
		ref, _, err := lp.Simplex(p.c, mat.DenseCopyOf(p.a), p.b, 1e-10, nil)
		if err != nil {
			t.Fatalf("%s: gonum simplex: %v", p.name, err)
		}
		if rel := math.Abs(res.obj-ref) / math.Abs(ref); rel > 1e-6 {
			t.Errorf("%s: interior point %.10g, simplex %.10g (relative %g)", p.name, res.obj, ref, rel)
		}
		ax := make([]float64, p.a.Rows)
		p.a.MulVec(ax, res.x)
		for i := range ax {
			ax[i] -= p.b[i]
		}
		if r := norm(ax) / norm(p.b); r > 1e-8 || minOf(res.x) < -1e-9 {
			t.Errorf("%s: ‖Ax − b‖/‖b‖ = %g, min x = %g", p.name, r, minOf(res.x))
		}
		t.Logf("%s: objective %.10g (simplex %.10g) after %d iterations, %d normal-equations solves by residua, worst relres %.2g, max d/min d up to %.2g",
			p.name, res.obj, ref, res.iterations, res.solves, res.worstRelres, res.maxWeightSum)
	}
}
