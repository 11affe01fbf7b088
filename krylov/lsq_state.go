package krylov

import (
	"math"
	"time"
)

// The least-squares checkpoint layouts, at the top of an iteration. The
// last three scalars and the two ints are common to both methods:
//
//	Scalars (common): ‖b‖, the true ‖Āᵀr̄‖ at the last failed check, λ
//	Ints (common):    failed checks in a row, first iteration of the next check
//
// LSQR (see lsqr.go for the names):
//
//	Scalars: α, 1/β, 1/α, φ̄, ρ̄, ‖B‖_F², ‖D‖_F², ‖Ā‖ and cond estimates
//	Vectors: β·u, v̂, w, z, D·v, the damping rows (empty when λ = 0)
//
// CGLS (see lsq_cgls.go):
//
//	Scalars: γ, β, α and β of the previous iteration, trace(T), ‖D‖_F²,
//	         ‖Ā‖ and cond estimates, ‖r‖², ‖x‖², ‖z‖², ‖Aᵀr − λ²x‖²
//	Vectors: r, s, p, z
const (
	lsqrStateScalars = 9 + 3
	lsqrStateInts    = 2
	cglsStateScalars = 12 + 3
	cglsStateInts    = 2
)

// refuse ends a solve whose Resume state does not fit: nothing is solved
// and x is untouched.
func (p *lsqProblem) refuse(res Result, err error) (Result, error) {
	res.Solve = time.Since(p.start)
	if rec := p.s.Recorder; rec != nil {
		rec.Finish(&res)
	}
	return res, err
}

// checkResume checks the common part of a Resume state, whose common
// scalars start at index k, against this solve (‖b‖ and λ must be bitwise
// the same), and loads it into p.
func (p *lsqProblem) checkResume(rs *State, k int) error {
	c := rs.Scalars[k:]
	if bn := math.Sqrt(lsqNorm2(p.b)); bn != c[0] {
		return resumeErr("the right-hand side differs (‖b‖₂ = %.17g in the state, %.17g now)", c[0], bn)
	}
	if c[2] != p.damp {
		return resumeErr("the state's damping is %g, this solve's %g", c[2], p.damp)
	}
	p.bnorm, p.lastCheck = c[0], c[1]
	p.checks, p.nextCheck = rs.Ints[0], rs.Ints[1]
	p.products = rs.Products
	p.start = p.start.Add(-rs.Elapsed)
	return nil
}

// save fills the common part of p's checkpoint State and hands it to
// Save; method and vecs are the method's own part.
func (p *lsqProblem) save(method string, it int, scalars []float64, vecs ...[]float64) error {
	if p.ck.c == nil || p.ck.c.Save == nil {
		return nil
	}
	s := &p.ck.state
	s.Method, s.Rows, s.Cols = method, p.m, p.n
	s.Iteration, s.Products, s.Elapsed = it, p.products, time.Since(p.start)
	s.Scalars = append(append(s.Scalars[:0], scalars...), p.bnorm, p.lastCheck, p.damp)
	s.Ints = append(s.Ints[:0], p.checks, p.nextCheck)
	s.Vectors = append(s.Vectors[:0], vecs...)
	return p.ck.save()
}

// lsqrSave saves LSQR's state after it iterations.
func (p *lsqProblem) lsqrSave(it int, c [lsqrStateScalars - 3]float64, u, vh, w, z, tn, u2 []float64) error {
	return p.save("lsqr", it, c[:], u, vh, w, z, tn, u2)
}

// cglsSave saves CGLS's state after it iterations.
func (p *lsqProblem) cglsSave(it int, c [cglsStateScalars - 3]float64, r, s, dir, z []float64) error {
	return p.save("cgls", it, c[:], r, s, dir, z)
}
