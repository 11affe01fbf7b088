package krylov

import "math"

// cgls runs CGLS (Björck, Numerical Methods for Least Squares Problems, SIAM
// 1996, §7.4.1, Algorithm 7.4.1, with the damping and the column scaling of
// §7.4.2 and §7.2.1): conjugate gradients on the normal equations
//
//	(D·AᵀA·D + λ²D²)·z = D·(Aᵀb),  x = D·z,
//
// carried out with products by A and Aᵀ only, never forming AᵀA. From a
// warm start it iterates on the correction, with r0 = b − A·x0 and
// s0 = D·(Aᵀr0 − λ²x0).
//
// The recursive residual r is kept (not the normal residual), as Björck
// recommends (§7.4.1): s = D·(Aᵀr − λ²x) is recomputed from it at every
// iteration. One iteration is one product with A, one with Aᵀ, two passes
// over the m-vectors and two over the n-vectors, and it allocates nothing.
//
// The ‖Ā‖ and condition estimates are those of LSQR, obtained from CG's
// coefficients: CGLS is the Lanczos process on ĀᵀĀ in disguise, with
// tridiagonal T_k = B_kᵀB_k whose diagonal is 1/α_k + β_{k−1}/α_{k−1}
// (Saad, Iterative Methods for Sparse Linear Systems, 2nd ed., §6.7.3), so
// ‖B_k‖_F² = trace(T_k) is the sum of those diagonals; and the directions
// are ĀᵀĀ-conjugate, so ‖Ā⁺‖_F² is estimated by Σ ‖p_k‖²/‖Ā·p_k‖².
func (p *lsqProblem) cgls(res Result) (Result, error) {
	m, n := p.m, p.n
	b, x, d := p.b, p.x, p.d
	lam := p.damp
	lam2 := lam * lam
	done := p.ctx.Done()

	r := make([]float64, m)   // recursive b − A·x
	tm := make([]float64, m)  // q = A·t and other m-scratch
	s := make([]float64, n)   // D·(Aᵀr − λ²x)
	dir := make([]float64, n) // the direction p (p names the problem here)
	z := make([]float64, n)   // the iterate, x = D·z
	tn := make([]float64, n)  // t = D·p, then Aᵀr
	p.z = z

	// What the loop carries from one iteration to the next (see
	// cglsSave for the checkpoint layout).
	var gamma, beta, alphaOld, betaOld, anorm2, ddnorm, anorm, cond float64
	var rr, xx, zz, gg float64
	first := 1 // the first iteration to run
	if rs := p.s.Resume; rs != nil {
		if err := rs.check("cgls", m, n, cglsStateScalars, cglsStateInts, m, n, n, n); err != nil {
			return p.refuse(res, err)
		}
		if err := p.checkResume(rs, cglsStateScalars-3); err != nil {
			return p.refuse(res, err)
		}
		for i, v := range [][]float64{r, s, dir, z} {
			copy(v, rs.Vectors[i])
		}
		c := rs.Scalars
		gamma, beta, alphaOld, betaOld, anorm2, ddnorm, anorm, cond = c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]
		rr, xx, zz, gg = c[8], c[9], c[10], c[11]
		first = rs.Iteration + 1
	} else {
		p.bnorm = math.Sqrt(lsqNorm2(b))
		if p.x0 != nil {
			p.mulVec(tm, p.x0)
			for i, bi := range b {
				r[i] = bi - tm[i]
			}
			for j, xj := range p.x0 {
				z[j] = xj / d[j]
				zz += z[j] * z[j]
				xx += xj * xj
			}
		} else {
			copy(r, b)
		}
		writeX(x, d, z)
		rr = lsqNorm2(r)
		if !lsqFinite(rr) {
			return p.breakdown(res, 0, "‖b − A·x0‖", math.Sqrt(rr), tm, tn, 0, 0)
		}
		if rr+lam2*xx == 0 {
			return p.endAtStart(res, tm, tn)
		}
		p.mulVecTrans(tn, r)
		for j, xj := range x {
			g := tn[j] - lam2*xj
			gg += g * g
			sj := d[j] * g
			s[j] = sj
			gamma += sj * sj
		}
		if err := p.record(0, math.Sqrt(rr), math.Sqrt(gg)); err != nil {
			return p.end(res, Cancelled, err, 0, 0, 0, tm, tn)
		}
		if !lsqFinite(gamma) {
			return p.breakdown(res, 0, "‖Aᵀr0‖", math.Sqrt(gamma), tm, tn, 0, 0)
		}
		if gamma == 0 {
			return p.endAtStart(res, tm, tn)
		}
	}
	for it := first; it <= p.s.MaxIter; it++ {
		if st, err := p.interrupted(done); st != 0 {
			if st == Cancelled {
				// A cancelled solve saves its state first: nothing is lost.
				if serr := p.cglsSave(it-1, [cglsStateScalars - 3]float64{gamma, beta, alphaOld, betaOld, anorm2, ddnorm, anorm, cond, rr, xx, zz, gg}, r, s, dir, z); serr != nil {
					err = serr
				}
			}
			return p.end(res, st, err, it-1, anorm, cond, tm, tn)
		}
		if p.ck.due() {
			if err := p.cglsSave(it-1, [cglsStateScalars - 3]float64{gamma, beta, alphaOld, betaOld, anorm2, ddnorm, anorm, cond, rr, xx, zz, gg}, r, s, dir, z); err != nil {
				return p.end(res, Cancelled, err, it-1, anorm, cond, tm, tn)
			}
		}
		// p = s + β·p and t = D·p (β = 0 at the first iteration).
		var tt, pp float64
		for j, sj := range s {
			pj := sj + beta*dir[j]
			dir[j] = pj
			pp += pj * pj
			tj := d[j] * pj
			tn[j] = tj
			tt += tj * tj
		}
		// q = A·t; δ = ‖Ā·p‖² = ‖q‖² + λ²‖t‖².
		p.mulVec(tm, tn)
		delta := lsqNorm2(tm) + lam2*tt
		if !lsqFinite(delta) {
			return p.breakdown(res, it, "‖Ā·p‖²", delta, tm, tn, anorm, cond)
		}
		exhausted := delta == 0
		var alpha float64
		if !exhausted {
			alpha = gamma / delta
			// r −= α·q.
			rr = 0
			for i, qi := range tm {
				ri := r[i] - alpha*qi
				r[i] = ri
				rr += ri * ri
			}
			// z += α·p and s = D·(Aᵀr − λ²x), x = D·z.
			p.mulVecTrans(tn, r)
			var ss float64
			xx, zz, gg = 0, 0, 0
			for j, tj := range tn {
				zj := z[j] + alpha*dir[j]
				z[j] = zj
				dj := d[j]
				xj := dj * zj // x itself is written when needed (see recompute)
				xx += xj * xj
				zz += zj * zj
				g := tj - lam2*xj
				gg += g * g
				sj := dj * g
				s[j] = sj
				ss += sj * sj
			}
			if !lsqFinite(ss) {
				return p.breakdown(res, it, "‖Āᵀr̄‖²", ss, tm, tn, anorm, cond)
			}
			beta = ss / gamma
			gamma = ss
			// trace(T_k) grows by 1/α_k + β_{k−1}/α_{k−1}.
			anorm2 += 1 / alpha
			if it > 1 {
				anorm2 += betaOld / alphaOld
			}
			anorm = math.Sqrt(anorm2)
			ddnorm += pp / delta
			cond = anorm * math.Sqrt(ddnorm)
			alphaOld, betaOld = alpha, beta
			exhausted = gamma == 0
		}

		rbar, arbar, znorm := math.Sqrt(rr+lam2*xx), math.Sqrt(gamma), math.Sqrt(zz)
		floor := p.atFloor(rbar, arbar, anorm, znorm)
		if exhausted || floor || (p.passes(rbar, arbar, anorm, znorm) != "" && it >= p.nextCheck) {
			t, rule, out := p.verify(it, anorm, floor, tm, tn)
			if exhausted && out == verifyContinue {
				out = verifyStagnated
			}
			if err := p.record(it, t.rnorm, t.gnorm); err != nil {
				return p.endWith(res, Cancelled, err, it, anorm, cond, t, "")
			}
			switch out {
			case verifyConverged:
				return p.endWith(res, Converged, nil, it, anorm, cond, t, rule)
			case verifyStagnated:
				return p.endWith(res, Stagnated, nil, it, anorm, cond, t, "")
			}
			// The recursive residual has drifted from the true one, which
			// the check left in tm (and Aᵀr in tn): replace r and s by them
			// and go on with the same direction (residual replacement, as
			// CG does it; common practice).
			// β = γ_k/γ_{k−1} takes the new γ_k.
			copy(r, tm)
			rec := gamma
			gamma = 0
			for j, tj := range tn {
				sj := d[j] * (tj - lam2*x[j])
				s[j] = sj
				gamma += sj * sj
			}
			beta *= gamma / rec
			continue
		}
		if err := p.record(it, math.Sqrt(rr), math.Sqrt(gg)); err != nil {
			return p.end(res, Cancelled, err, it, anorm, cond, tm, tn)
		}
	}
	return p.end(res, IterationLimit, nil, p.s.MaxIter, anorm, cond, tm, tn)
}
