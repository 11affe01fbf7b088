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

// cgOperator is A with the fused forms it offers looked up once per solve.
type cgOperator struct {
	a   Operator
	mvd mulVecDotter // nil when A has no fused product
	res residualer   // nil when A has no fused residual
}

func newCGOperator(a Operator) cgOperator {
	op := cgOperator{a: a}
	op.mvd, _ = a.(mulVecDotter)
	op.res, _ = a.(residualer)
	return op
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
