package sparse

import (
	"fmt"
	"testing"
)

// column returns column c of the n×k row-major block v.
func column(v []float64, k, c int) []float64 {
	out := make([]float64, len(v)/k)
	for i := range out {
		out[i] = v[i*k+c]
	}
	return out
}

// TestBlockKernels runs every block kernel, on every test pool and on the
// package pool, against the one-vector kernel applied to each column on the
// same pool: bit for bit, as the package documents (products sum each row in
// column order, sums are dotBlock's per fixed block, added in block order).
// The one-vector kernels are themselves checked against the plain reference
// loops in TestConformance.
func TestBlockKernels(t *testing.T) {
	cases := conformanceCases()
	cases = append(cases, conformanceCase{"banded-3000", randBanded(3000, 3, 77)})
	pools := append([]*workerPool{}, testPools...)
	pools = append(pools, newPool(2, blockLen, 0), newPool(3, 8, 1<<30)) // real blocks; always inline
	for _, tc := range cases {
		a := tc.a
		if a.Rows != a.Cols {
			continue
		}
		for _, k := range []int{1, 2, 3, 4, 5, 8, 16} {
			t.Run(fmt.Sprintf("%s/k=%d", tc.name, k), func(t *testing.T) {
				n := a.Rows
				x := randVec(n*k, 31)
				b := randVec(n*k, 32)
				dg := randVec(n, 33)
				alpha, beta := randVec(k, 34), randVec(k, 35)
				for pi, p := range pools {
					what := fmt.Sprintf("pool %d (parts=%d)", pi, p.parts)
					y := randVec(n*k, 36)
					p.matOpWork(job{op: opBlockMul, a: a, d: y, x: x, width: k})
					yd := randVec(n*k, 37)
					dots := make([]float64, k)
					p.multiOp(job{op: opBlockMulDot, a: a, d: yd, x: x, width: k}, n, (a.NNZ()+n)*k, dots)
					rb := randVec(n*k, 38)
					norms := make([]float64, k)
					p.multiOp(job{op: opBlockResidual, a: a, d: rb, x: x, y: b, width: k}, n, (a.NNZ()+n)*k, norms)
					r := append([]float64(nil), b...)
					q := randVec(n*k, 39)
					z := make([]float64, n*k)
					var s2 [maxSums]float64
					p.multiOp(job{op: opBlockAxpyDiagDot, d: r, x: q, y: dg, z: z, cs: alpha, width: k}, n, n*k, s2[:2*k])
					r2 := append([]float64(nil), b...)
					s1 := make([]float64, k)
					p.multiOp(job{op: opBlockAxpyDot, d: r2, x: q, cs: alpha, width: k}, n, n*k, s1)
					bd := make([]float64, k)
					p.multiOp(job{op: opBlockDot, d: x, x: b, width: k}, n, n*k, bd)
					xs, ps := append([]float64(nil), x...), append([]float64(nil), b...)
					p.blockVecOp(job{op: opBlockStep, d: xs, x: ps, y: q, cs: alpha, ct: beta, width: k}, n)
					pt := append([]float64(nil), b...)
					p.blockVecOp(job{op: opBlockTriad, d: pt, x: q, ct: beta, width: k}, n)
					xa := append([]float64(nil), x...)
					p.blockVecOp(job{op: opBlockAxpy, d: xa, x: q, cs: alpha, width: k}, n)

					for c := range k {
						xc, bc, qc := column(x, k, c), column(b, k, c), column(q, k, c)
						w := fmt.Sprintf("%s column %d", what, c)
						y1 := make([]float64, n)
						p.matOp(job{op: opMulVec, a: a, d: y1, x: xc})
						sameBits(t, w+" MulBlock", column(y, k, c), y1)
						s := p.matOp(job{op: opMulVecDot, a: a, d: y1, x: xc})
						sameBits(t, w+" MulBlockDot block", column(yd, k, c), y1)
						sameBit(t, w+" MulBlockDot sum", dots[c], s)
						r1 := make([]float64, n)
						s = p.matOp(job{op: opResidual, a: a, d: r1, x: xc, y: bc})
						sameBits(t, w+" ResidualBlock block", column(rb, k, c), r1)
						sameBit(t, w+" ResidualBlock norm", norms[c], s)
						rc := append([]float64(nil), bc...)
						zc := make([]float64, n)
						var o [2]float64
						p.multiOp(job{op: opAxpyDiagDot, d: rc, x: qc, y: dg, z: zc, s: alpha[c]}, n, n, o[:])
						sameBits(t, w+" AxpyDiagDotBlock r", column(r, k, c), rc)
						sameBits(t, w+" AxpyDiagDotBlock z", column(z, k, c), zc)
						sameBit(t, w+" AxpyDiagDotBlock rr", s2[c], o[0])
						sameBit(t, w+" AxpyDiagDotBlock rz", s2[k+c], o[1])
						rc = append([]float64(nil), bc...)
						s = p.vecOp(job{op: opAxpyDot, d: rc, x: qc, s: alpha[c]}, n)
						sameBits(t, w+" AxpyDotBlock", column(r2, k, c), rc)
						sameBit(t, w+" AxpyDotBlock norm", s1[c], s)
						sameBit(t, w+" DotBlock", bd[c], p.vecOp(job{op: opDot, d: xc, x: bc}, n))
						xc2, pc := append([]float64(nil), xc...), append([]float64(nil), bc...)
						p.vecOp(job{op: opStep, d: xc2, x: pc, y: qc, s: alpha[c], t: beta[c]}, n)
						sameBits(t, w+" StepBlock x", column(xs, k, c), xc2)
						sameBits(t, w+" StepBlock p", column(ps, k, c), pc)
						pc = append([]float64(nil), bc...)
						p.vecOp(job{op: opTriad, d: pc, x: qc, y: pc, s: beta[c]}, n)
						sameBits(t, w+" TriadBlock", column(pt, k, c), pc)
						xc2 = append([]float64(nil), xc...)
						p.vecOp(job{op: opAxpy, d: xc2, x: qc, s: alpha[c]}, n)
						sameBits(t, w+" AxpyBlock", column(xa, k, c), xc2)
					}
				}
				// The exported functions on the package pool.
				y := make([]float64, n*k)
				a.MulBlock(y, x, k)
				dots := make([]float64, k)
				yd := make([]float64, n*k)
				a.MulBlockDot(yd, x, k, dots)
				for c := range k {
					y1 := make([]float64, n)
					s := a.MulVecDot(y1, column(x, k, c))
					sameBits(t, "MulBlock", column(y, k, c), y1)
					sameBit(t, "MulBlockDot", dots[c], s)
				}
			})
		}
	}
}

// TestAxpyDiagDot checks the fused Jacobi update against the unfused
// sequence it replaces (AxpyDot, the elementwise product, Dot), bit for
// bit, across block and partition boundaries on every test pool.
func TestAxpyDiagDot(t *testing.T) {
	for _, n := range []int{0, 1, 3, 4, 5, 17, 33, blockLen + 3, 3*blockLen + 1} {
		q, d := randVec(n, 41), randVec(n, 42)
		for _, p := range append(append([]*workerPool{}, testPools...), getPool()) {
			r1, r2 := randVec(n, 43), randVec(n, 43)
			z1, z2 := make([]float64, n), make([]float64, n)
			var o [2]float64
			p.multiOp(job{op: opAxpyDiagDot, d: r1, x: q, y: d, z: z1, s: -0.75}, n, n, o[:])
			rr := p.vecOp(job{op: opAxpyDot, d: r2, x: q, s: -0.75}, n)
			for i := range z2 {
				z2[i] = r2[i] * d[i]
			}
			rz := p.vecOp(job{op: opDot, d: r2, x: z2}, n)
			what := fmt.Sprintf("n=%d parts=%d", n, p.parts)
			sameBits(t, what+" r", r1, r2)
			sameBits(t, what+" z", z1, z2)
			sameBit(t, what+" rᵀr", o[0], rr)
			sameBit(t, what+" rᵀz", o[1], rz)
			z3 := make([]float64, n)
			sameBit(t, what+" DiagDot", p.vecOp(job{op: opDiagDot, d: z3, x: d, y: r2}, n), rz)
			sameBits(t, what+" DiagDot z", z3, z2)
		}
	}
}

// TestBlockNoAllocs: the block kernels allocate nothing.
func TestBlockNoAllocs(t *testing.T) {
	a := randBanded(40000, 3, 1)
	for _, k := range []int{3, 4, 8} {
		n := a.Rows
		x, y, b := randVec(n*k, 1), make([]float64, n*k), randVec(n*k, 2)
		d := randVec(n, 3)
		z := make([]float64, n*k)
		al, be := randVec(k, 4), randVec(k, 5)
		s1, s2 := make([]float64, k), make([]float64, k)
		for name, f := range map[string]func(){
			"MulBlock":         func() { a.MulBlock(y, x, k) },
			"MulBlockDot":      func() { a.MulBlockDot(y, x, k, s1) },
			"ResidualBlock":    func() { a.ResidualBlock(y, b, x, k, s1) },
			"AxpyDotBlock":     func() { AxpyDotBlock(y, al, x, k, s1) },
			"AxpyDiagDotBlock": func() { AxpyDiagDotBlock(y, al, x, d, z, k, s1, s2) },
			"DotBlock":         func() { DotBlock(x, b, k, s1) },
			"AxpyBlock":        func() { AxpyBlock(y, al, x, k) },
			"TriadBlock":       func() { TriadBlock(y, x, be, k) },
			"StepBlock":        func() { StepBlock(y, b, x, al, be, k) },
			"AxpyDiagDot":      func() { AxpyDiagDot(y[:n], 0.5, x[:n], d, z[:n]) },
			"DiagDot":          func() { DiagDot(z[:n], d, x[:n]) },
		} {
			if got := testing.AllocsPerRun(10, f); got != 0 {
				t.Errorf("k=%d %s: %v allocations per call", k, name, got)
			}
		}
	}
}
