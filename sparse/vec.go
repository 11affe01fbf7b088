package sparse

import "fmt"

// Vector kernels for the iterative methods, on the same worker pool as the
// matrix products. Each pass reads and writes every element once; the fused
// ones (AxpyDot, Step) save whole passes over memory, which is what a
// conjugate gradient iteration on a large matrix is limited by. Sums are
// formed block by block and the block sums added in block order (see
// pool.go), so every result is bitwise reproducible at any worker count.
//
// Aliasing: an output may be the same slice as an input of the same call
// (each element is read before it is written at the same index); partially
// overlapping slices are not allowed.

func checkLen(op string, n int, vs ...[]float64) {
	for _, v := range vs {
		if len(v) != n {
			panic(fmt.Sprintf("sparse: %s: vector length %d, want %d", op, len(v), n))
		}
	}
}

// Dot returns xᵀy. Panics if the lengths differ.
func Dot(x, y []float64) float64 {
	checkLen("Dot", len(x), y)
	return getPool().vecOp(job{op: opDot, d: x, x: y}, len(x))
}

// Axpy sets dst[i] += alpha·x[i]. Panics if the lengths differ.
func Axpy(dst []float64, alpha float64, x []float64) {
	checkLen("Axpy", len(dst), x)
	getPool().vecOp(job{op: opAxpy, d: dst, x: x, s: alpha}, len(dst))
}

// AxpyDot sets dst[i] += alpha·x[i] and returns the new dstᵀdst in the same
// sweep: the residual update r −= α·q of conjugate gradients together with
// the norm it needs (call it with alpha = −α). The sum equals
// Dot(dst, dst) on the result, bit for bit. Panics if the lengths differ.
func AxpyDot(dst []float64, alpha float64, x []float64) float64 {
	checkLen("AxpyDot", len(dst), x)
	return getPool().vecOp(job{op: opAxpyDot, d: dst, x: x, s: alpha}, len(dst))
}

// Triad sets a[i] = b[i] + s·c[i]: the STREAM triad (McCalpin, "Memory
// bandwidth and machine balance in current high performance computers",
// 1995), our reference for the bandwidth the machine gives a kernel that
// streams three vectors. Triad(p, z, p, β) is the direction update
// p = z + β·p. Panics if the lengths differ.
func Triad(a, b, c []float64, s float64) {
	checkLen("Triad", len(a), b, c)
	getPool().vecOp(job{op: opTriad, d: a, x: b, y: c, s: s}, len(a))
}

// Step sets x[i] += alpha·p[i] and then p[i] = z[i] + beta·p[i] with the
// old p[i], in one sweep: the solution and direction updates of
// (preconditioned) conjugate gradients, where z is the preconditioned
// residual (the residual itself without a preconditioner). Panics if the
// lengths differ.
func Step(x, p, z []float64, alpha, beta float64) {
	checkLen("Step", len(x), p, z)
	getPool().vecOp(job{op: opStep, d: x, x: p, y: z, s: alpha, t: beta}, len(x))
}
