// Package ipm is a primal-dual interior-point method for linear programs in
// standard form,
//
//	min cᵀx  subject to  A·x = b, x ≥ 0,
//
// Mehrotra's predictor-corrector (Nocedal and Wright, Numerical
// Optimization, 2nd ed., 2006, §14.2, Algorithm 14.3, with the starting
// point of §14.2), written to show residua doing what interior-point codes
// offload: every linear solve of the method is a normal-equations solve
// (A·D·Aᵀ)·Δλ = rhs with D = X·S⁻¹ (§14.1, eq. 14.44), which it hands to
// package solve (PrepareNormal, then Setup.Solve) with the new D. A's
// transpose and, for IC(0), the pattern of A·Aᵀ are made once per program.
//
// Solve reports the iterations, the normal-equations solves and their
// worst true relative residual, and the spread max d/min d that D reached
// (which grows without bound as the iterates approach the optimum). Bakery
// builds the transportation problem of our own invention that `residua
// demo --scenario bakery` and the tests solve. A must have full row rank;
// the method does not detect infeasible or unbounded programs beyond
// stopping at its iteration cap with an error.
package ipm
