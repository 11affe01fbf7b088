package krylov

import "github.com/residua/residua/sparse"

// The vector sweeps of conjugate gradients run on sparse's fused kernels
// (sparse/vec.go), which split each vector into fixed blocks over sparse's
// worker pool and add the block sums in block order: every result is bitwise
// identical run to run, at any worker count. Each call below is one pass over
// memory:
//
//	q = A·p and pᵀq            (*sparse.CSR).MulVecDot, or MulVec then Dot
//	r −= α·q and rᵀr            sparse.AxpyDot
//	r −= α·q, z = d∘r, rᵀr, rᵀz sparse.AxpyDiagDot (a DiagonalPreconditioner)
//	x += α·p, p = z + β·p       sparse.Step
//	r = b − A·x and rᵀr         (*sparse.CSR).Residual, or MulVec, Triad, Dot
//	z = M⁻¹·r and rᵀz           PreconditionDot, or Precondition then Dot

// mulVecDotter is an operator that can form y = A·x and xᵀy in one sweep,
// as *sparse.CSR does.
type mulVecDotter interface {
	MulVecDot(dst, x []float64) float64
}

// residualer is an operator that can form r = b − A·x and rᵀr in one sweep,
// as *sparse.CSR does.
type residualer interface {
	Residual(dst, b, x []float64) float64
}

// residualBounder is an operator that can bound the rounding error of its
// computed residual b − A·x, as *sparse.CSR does (CSR.ResidualBound).
type residualBounder interface {
	ResidualBound(x, b []float64) float64
}

// cgOperator is A with the fused forms it offers looked up once per solve.
type cgOperator struct {
	a   Operator
	mvd mulVecDotter    // nil when A has no fused product
	res residualer      // nil when A has no fused residual
	rb  residualBounder // nil when A cannot bound its residual's rounding
}

func newCGOperator(a Operator) cgOperator {
	op := cgOperator{a: a}
	op.mvd, _ = a.(mulVecDotter)
	op.res, _ = a.(residualer)
	op.rb, _ = a.(residualBounder)
	return op
}

// roundoffLevel returns the level below which the true residual norm of x
// is rounding noise: a bound on the rounding error of computing b − A·x
// (see CSR.ResidualBound, after Higham, Accuracy and Stability of Numerical
// Algorithms, 2nd ed., §3.1 and §12.1). An operator that cannot give the
// bound, which needs |A|·|x|, gets (n + 1)·u·(‖b‖₂ + ‖A·x‖₂), the normwise
// form of the same bound for a dense row of n entries with ‖A·x‖ standing
// in for ‖|A|·|x|‖ (it is no larger) and bounded by ‖b‖₂ + ‖b − A·x‖₂.
// bnorm is ‖b‖₂ and tnorm ‖b − A·x‖₂.
func (op *cgOperator) roundoffLevel(x, b []float64, bnorm, tnorm float64) float64 {
	if op.rb != nil {
		return op.rb.ResidualBound(x, b)
	}
	n := float64(len(b))
	return (n + 1) * 0x1p-53 * (2*bnorm + tnorm)
}

// mulVecDot sets q = A·p and returns pᵀq.
func (op *cgOperator) mulVecDot(q, p []float64) float64 {
	if op.mvd != nil {
		return op.mvd.MulVecDot(q, p)
	}
	op.a.MulVec(q, p)
	return sparse.Dot(p, q)
}

// residual sets r = b − A·x and returns rᵀr. Both paths do the same
// arithmetic (b − y, summed like sparse.Dot), so they agree bit for bit.
func (op *cgOperator) residual(r, b, x []float64) float64 {
	if op.res != nil {
		return op.res.Residual(r, b, x)
	}
	op.a.MulVec(r, x)
	sparse.Triad(r, b, r, -1) // b + (−1)·y is exactly b − y
	return sparse.Dot(r, r)
}

// cgPrecondition sets z = M⁻¹·r and returns rᵀz.
func cgPrecondition(m Preconditioner, z, r []float64) float64 {
	if f, ok := m.(DotPreconditioner); ok {
		return f.PreconditionDot(z, r)
	}
	m.Precondition(z, r)
	return sparse.Dot(r, z)
}
