package krylov

import (
	"math"
	"time"

	"github.com/residua/residua/sparse"
)

// CG's checkpoint layout, at the top of an iteration, where x, r and p are
// current (the fused update of x has been applied) and z is not needed (it
// is recomputed from r before it is read):
//
//	Scalars: ρ = rᵀz, best true ‖r‖, tracked ‖r‖, last true ‖r‖, ‖b‖,
//	         the Lanczos α_{j−1} and β_{j−1}, the round-off episode's
//	         reference norm
//	Ints:    stagnation strikes, whether the true ‖r‖ belongs to x (0/1),
//	         rows of the Lanczos tridiagonal, preconditioned (0/1), the
//	         round-off episode's start and next recomputation (−1: none)
//	Vectors: x, r, p, the tridiagonal's diagonal and superdiagonal so far
const (
	cgStateScalars = 8
	cgStateInts    = 6
)

func b2i(v bool) int {
	if v {
		return 1
	}
	return 0
}

// checkpoint fills ck's State with views of the loop's vectors and hands
// it to Save.
func (w *cgWork) checkpoint(ck *checkpointer, x []float64, st *cgState, precond bool, c cgCarry) error {
	if ck.c == nil || ck.c.Save == nil {
		return nil
	}
	n := len(x)
	s := &ck.state
	s.Method, s.Rows, s.Cols = "cg", n, n
	s.Iteration, s.Products, s.Elapsed = st.iter, st.products, time.Since(st.start)
	s.Scalars = append(s.Scalars[:0], c.rho, c.best, st.rnorm, st.trueNorm, st.bnorm, w.lan.prevAlpha, w.lan.prevBeta, c.floorRef)
	s.Ints = append(s.Ints[:0], c.strikes, b2i(st.trueFresh), w.lan.k, b2i(precond), c.floorStart, c.floorNext)
	s.Vectors = append(s.Vectors[:0], x, w.r[:n], w.p[:n], w.lan.diag[:w.lan.k], w.lan.off[:w.lan.k])
	return ck.save()
}

// checkResume refuses a Resume state that does not belong to this solve:
// another method or size, another right-hand side (‖b‖ differs), with or
// without a preconditioner where the solve is not, or a tridiagonal longer
// than this solve keeps. w.lan must be reset for the solve.
func (w *cgWork) checkResume(rs *State, b []float64, precond bool) error {
	n := len(b)
	k := -1
	if len(rs.Ints) == cgStateInts {
		k = rs.Ints[2]
	}
	if err := rs.check("cg", n, n, cgStateScalars, cgStateInts, n, n, n, k, k); err != nil {
		return err
	}
	if k < 0 || k > len(w.lan.diag) {
		return resumeErr("the state's tridiagonal has %d rows, this solve keeps at most %d", k, len(w.lan.diag))
	}
	if bn := math.Sqrt(sparse.Dot(b, b)); bn != rs.Scalars[4] {
		return resumeErr("the right-hand side differs (‖b‖₂ = %.17g in the state, %.17g now)", rs.Scalars[4], bn)
	}
	if got := rs.Ints[3] == 1; got != precond {
		return resumeErr("the state was saved by a solve with preconditioning %v, this one has %v", got, precond)
	}
	return nil
}

// restore loads a checked Resume state into x, w's vectors and st, and
// returns what the loop carries.
func (w *cgWork) restore(rs *State, x []float64, st *cgState) cgCarry {
	n := len(x)
	copy(x, rs.Vectors[0])
	copy(w.r[:n], rs.Vectors[1])
	copy(w.p[:n], rs.Vectors[2])
	k := rs.Ints[2]
	copy(w.lan.diag, rs.Vectors[3])
	copy(w.lan.off, rs.Vectors[4])
	w.lan.k, w.lan.prevAlpha, w.lan.prevBeta = k, rs.Scalars[5], rs.Scalars[6]
	st.iter, st.products = rs.Iteration, rs.Products
	st.rnorm, st.trueNorm, st.trueFresh = rs.Scalars[2], rs.Scalars[3], rs.Ints[1] == 1
	return cgCarry{rho: rs.Scalars[0], best: rs.Scalars[1], strikes: rs.Ints[0],
		floorStart: rs.Ints[4], floorNext: rs.Ints[5], floorRef: rs.Scalars[7]}
}
