package krylov

import "math"

// lsqr runs LSQR (Paige and Saunders, ACM TOMS 8(1), 1982, §4.1, the
// algorithm "LSQR") on the scaled, augmented problem
//
//	Ā·z ≈ b̄,  Ā = [A·D; λD],  b̄ = [b; 0],  x = D·z,
//
// which has the same minimiser as min ‖A·x − b‖² + λ²‖x‖². Starting from
// z0 = D⁻¹x0 it solves for the correction from r̄0 = b̄ − Ā·z0 =
// [b − A·x0; −λx0]. The damping rows are carried explicitly (an n-vector u2
// beside u) rather than by the extra rotation of §4.2, because with a warm
// start the lower block of r̄0 is not zero.
//
// Vectors are kept unnormalised where that saves a pass: u (and u2) hold
// β·u and v̂ holds α·D⁻¹v; the scalars su = 1/β and sv = 1/α apply the
// normalisation where the vectors are next read. One iteration is one
// product with A, one with Aᵀ, one pass over the m-vectors and two over the
// n-vectors, and it allocates nothing.
func (p *lsqProblem) lsqr(res Result) (Result, error) {
	m, n := p.m, p.n
	b, x, d := p.b, p.x, p.d
	lam := p.damp
	damped := lam != 0
	done := p.ctx.Done()

	u := make([]float64, m)  // β·u, upper block
	tm := make([]float64, m) // A·(D·v) and other m-scratch
	vh := make([]float64, n) // α·D⁻¹v
	w := make([]float64, n)  // the search direction in z
	z := make([]float64, n)  // the iterate, x = D·z
	tn := make([]float64, n) // D·v, then Aᵀ·u
	var u2 []float64         // β·u, lower block (damping rows)
	if damped {
		u2 = make([]float64, n)
	}
	p.z = z

	// What the loop carries from one iteration to the next (see
	// lsqrSave for the checkpoint layout).
	var alpha, beta, su, sv, phibar, rhobar, anorm2, ddnorm, anorm, cond float64
	var a2, g2, xx float64
	first := 1 // the first iteration to run
	if rs := p.s.Resume; rs != nil {
		if err := rs.check("lsqr", m, n, lsqrStateScalars, lsqrStateInts, m, n, n, n, n, -1); err != nil {
			return p.refuse(res, err)
		}
		if err := p.checkResume(rs, lsqrStateScalars-3); err != nil {
			return p.refuse(res, err)
		}
		if len(rs.Vectors[5]) != len(u2) {
			return p.refuse(res, resumeErr("lsqr state damping rows of length %d, want %d", len(rs.Vectors[5]), len(u2)))
		}
		for i, v := range [][]float64{u, vh, w, z, tn, u2} {
			copy(v, rs.Vectors[i])
		}
		c := rs.Scalars
		alpha, su, sv, phibar, rhobar, anorm2, ddnorm, anorm, cond = c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7], c[8]
		first = rs.Iteration + 1
	} else {
		// Iteration 0: r0 = b − A·x0 and β1·u1 = r̄0.
		p.bnorm = math.Sqrt(lsqNorm2(b))
		if p.x0 != nil {
			p.mulVec(tm, p.x0)
			for i, bi := range b {
				u[i] = bi - tm[i]
			}
			for j, xj := range p.x0 {
				z[j] = xj / d[j]
			}
		} else {
			copy(u, b)
		}
		rr := lsqNorm2(u)
		if p.x0 != nil {
			xx = lsqNorm2(p.x0)
		}
		if damped && p.x0 != nil {
			for j, xj := range p.x0 {
				u2[j] = -lam * xj
			}
		}
		beta = math.Sqrt(rr + lam*lam*xx)
		writeX(x, d, z)
		if !lsqFinite(beta) {
			return p.breakdown(res, 0, "‖b − A·x0‖", beta, tm, tn, 0, 0)
		}
		if beta == 0 {
			// b̄ = Ā·z0: x0 solves the problem exactly (b = 0 and x0 = 0 in
			// particular). No iteration is needed.
			return p.endAtStart(res, tm, tn)
		}
		su = 1 / beta

		// α1·v1 = Āᵀu1 = D·(Aᵀu + λu2)/β1, kept as v̂ = α1·D⁻¹v1.
		p.mulVecTrans(tn, u)
		for j := range vh {
			e := tn[j]
			if damped {
				e += lam * u2[j]
			}
			e *= su
			vh[j] = e
			g2 += e * e
			de := d[j] * e
			a2 += de * de
		}
		alpha = math.Sqrt(a2)
		// ‖Aᵀr0 − λ²x0‖ = β1·‖D⁻¹·(α1v1)‖.
		if err := p.record(0, math.Sqrt(rr), beta*math.Sqrt(g2)); err != nil {
			return p.end(res, Cancelled, err, 0, 0, 0, tm, tn)
		}
		if !lsqFinite(alpha) {
			return p.breakdown(res, 0, "‖Aᵀr0‖", alpha, tm, tn, 0, 0)
		}
		if alpha == 0 {
			// Āᵀr̄0 = 0: x0 is already a minimiser.
			return p.endAtStart(res, tm, tn)
		}
		sv = 1 / alpha

		// w1 = v1, and the first product's input tn = D·v1.
		for j := range w {
			v := sv * d[j] * vh[j]
			w[j] = v
			tn[j] = d[j] * v
			if damped {
				u2[j] = lam*tn[j] - alpha*su*u2[j]
			}
		}
		phibar, rhobar = beta, alpha
	}

	for it := first; it <= p.s.MaxIter; it++ {
		if st, err := p.interrupted(done); st != 0 {
			if st == Cancelled {
				// A cancelled solve saves its state first: nothing is lost.
				if serr := p.lsqrSave(it-1, [lsqrStateScalars - 3]float64{alpha, su, sv, phibar, rhobar, anorm2, ddnorm, anorm, cond}, u, vh, w, z, tn, u2); serr != nil {
					err = serr
				}
			}
			return p.end(res, st, err, it-1, anorm, cond, tm, tn)
		}
		if p.ck.due() {
			if err := p.lsqrSave(it-1, [lsqrStateScalars - 3]float64{alpha, su, sv, phibar, rhobar, anorm2, ddnorm, anorm, cond}, u, vh, w, z, tn, u2); err != nil {
				return p.end(res, Cancelled, err, it-1, anorm, cond, tm, tn)
			}
		}
		// β_{i+1}·u_{i+1} = Ā·v_i − α_i·u_i (PS 1982, eq. (3.2)). The lower
		// block was updated at the end of the previous iteration.
		p.mulVec(tm, tn)
		f := alpha * su
		var s1 float64
		for i, ti := range tm {
			ui := ti - f*u[i]
			u[i] = ui
			s1 += ui * ui
		}
		s2 := 0.0
		if damped {
			s2 = lsqNorm2(u2)
		}
		alphaOld := alpha
		beta = math.Sqrt(s1 + s2)
		if !lsqFinite(beta) {
			return p.breakdown(res, it, "β (‖Ā·v − α·u‖)", beta, tm, tn, anorm, cond)
		}
		// α_{i+1}·v_{i+1} = Āᵀu_{i+1} − β_{i+1}·v_i.
		a2, g2 = 0, 0
		if beta > 0 {
			su = 1 / beta
			p.mulVecTrans(tn, u)
			f := beta * sv
			for j := range vh {
				e := tn[j]
				if damped {
					e += lam * u2[j]
				}
				e = e*su - f*vh[j]
				vh[j] = e
				g2 += e * e
				de := d[j] * e
				a2 += de * de
			}
		} else {
			su = 0
			clear(vh)
		}
		alpha = math.Sqrt(a2)
		if !lsqFinite(alpha) {
			return p.breakdown(res, it, "α (‖Āᵀu − β·v‖)", alpha, tm, tn, anorm, cond)
		}
		sv = 0
		if alpha > 0 {
			sv = 1 / alpha
		}
		// ‖B_i‖_F² grows by α_i² + β_{i+1}² (PS 1982, §5.3).
		anorm2 += alphaOld*alphaOld + beta*beta
		anorm = math.Sqrt(anorm2)

		// The plane rotation that eliminates β_{i+1} (PS 1982, §4.1).
		rho := math.Hypot(rhobar, beta)
		c, s := rhobar/rho, beta/rho
		theta := s * alpha
		rhobar = -c * alpha
		phi := c * phibar
		phibar = s * phibar

		// z += (φ/ρ)·w; w = v − (θ/ρ)·w; ‖D·z‖; and, for the next
		// iteration, tn = D·v and the damping rows u2 = λ·D·v − α·u2.
		t1, t2 := phi/rho, -theta/rho
		var ww, zz float64
		xx = 0
		g := alpha * su
		for j, wj := range w {
			ww += wj * wj
			zj := z[j] + t1*wj
			z[j] = zj
			dj := d[j]
			xj := dj * zj // x itself is written when needed (see recompute)
			xx += xj * xj
			zz += zj * zj
			v := sv * dj * vh[j]
			w[j] = v + t2*wj
			tn[j] = dj * v
			if damped {
				u2[j] = lam*tn[j] - g*u2[j]
			}
		}
		// ‖D_i‖_F² = Σ ‖w_k/ρ_k‖² estimates ‖Ā⁺‖_F² (PS 1982, §5.1).
		ddnorm += ww / (rho * rho)
		cond = anorm * math.Sqrt(ddnorm)

		// Recursive estimates (PS 1982, §5.1): ‖r̄_i‖ = φ̄_{i+1},
		// ‖Āᵀr̄_i‖ = φ̄_{i+1}·α_{i+1}·|c_i|, and Āᵀr̄_i = D·(Aᵀr − λ²x) points
		// along v_{i+1}, so ‖Aᵀr − λ²x‖ = φ̄_{i+1}·|c_i|·‖v̂‖.
		rbar := phibar
		arbar := phibar * alpha * math.Abs(c)
		rnorm := math.Sqrt(max(0, rbar*rbar-lam*lam*xx))
		gnorm := phibar * math.Abs(c) * math.Sqrt(g2)
		exhausted := alpha == 0 || beta == 0
		znorm := math.Sqrt(zz)
		floor := p.atFloor(rbar, arbar, anorm, znorm)

		if exhausted || floor || (p.passes(rbar, arbar, anorm, znorm) != "" && it >= p.nextCheck) {
			t, rule, out := p.verify(it, anorm, floor, tm, tn)
			if exhausted && out == verifyContinue {
				// The bidiagonalization has ended; nothing more can be
				// gained.
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
			// recompute used tn as scratch: rebuild D·v_{i+1}.
			for j := range tn {
				tn[j] = d[j] * sv * d[j] * vh[j]
			}
			continue
		}
		if err := p.record(it, rnorm, gnorm); err != nil {
			return p.end(res, Cancelled, err, it, anorm, cond, tm, tn)
		}
	}
	return p.end(res, IterationLimit, nil, p.s.MaxIter, anorm, cond, tm, tn)
}

// writeX sets x = D·z.
func writeX(x, d, z []float64) {
	for j, zj := range z {
		x[j] = d[j] * zj
	}
}

// endAtStart ends a solve at iteration 0 because x0 is already a solution;
// the true check decides the status.
func (p *lsqProblem) endAtStart(res Result, tm, tn []float64) (Result, error) {
	t := p.recompute(tm, tn)
	st, rule := Stagnated, ""
	if t.finite {
		if rule = p.passes(t.rbar, t.arbar, 0, t.znorm); rule != "" {
			st = Converged
		}
	}
	if err := p.record(0, t.rnorm, t.gnorm); err != nil {
		return p.endWith(res, Cancelled, err, 0, 0, 0, t, "")
	}
	return p.endWith(res, st, nil, 0, 0, 0, t, rule)
}

// end recomputes the true state of x (already written) and ends the solve.
func (p *lsqProblem) end(res Result, st Status, err error, it int, anorm, cond float64, tm, tn []float64) (Result, error) {
	return p.endWith(res, st, err, it, anorm, cond, p.recompute(tm, tn), "")
}

// endWith ends the solve with a known true state.
func (p *lsqProblem) endWith(res Result, st Status, err error, it int, anorm, cond float64, t trueState, rule string) (Result, error) {
	res.Status = st
	res.LSQ.StoppedBy = rule
	return p.finish(res, t, it, anorm, cond), err
}

// breakdown ends the solve because a NaN or Inf appeared in quantity q.
func (p *lsqProblem) breakdown(res Result, it int, q string, v float64, tm, tn []float64, anorm, cond float64) (Result, error) {
	err := &BreakdownError{Iteration: it, Quantity: q, Value: v, Err: ErrNotFinite}
	return p.end(res, Breakdown, err, it, anorm, cond, tm, tn)
}
