package sparse

// Vector sweeps of diagonally preconditioned polynomial smoothers
// (Chebyshev and l1-Jacobi, as a multigrid cycle runs them), fused so that
// each smoothing step streams its vectors once. They run on the worker pool
// like the other vector kernels.

// DiagInit sets d[i] = s·w[i]·r[i] and x[i] = d[i]: the first step of a
// smoother from a zero start, with w the inverted diagonal. Panics if the
// lengths differ.
func DiagInit(x, d, w, r []float64, s float64) {
	checkLen("DiagInit", len(x), d, w, r)
	getPool().vecOp(job{op: opDiagInit, d: x, x: d, w: w, y: r, s: s}, len(x))
}

// DiagStep sets d[i] = c1·d[i] + c2·w[i]·r[i] and then x[i] += d[i]: one
// step of the Chebyshev three-term recurrence (c1 = 0 makes it a damped
// Jacobi step with weights w). Panics if the lengths differ.
func DiagStep(x, d, w, r []float64, c1, c2 float64) {
	checkLen("DiagStep", len(x), d, w, r)
	getPool().vecOp(job{op: opDiagStep, d: x, x: d, w: w, y: r, s: c1, t: c2}, len(x))
}

func diagInitBlock(x, d, w, r []float64, s float64) {
	d = d[:len(x)]
	w = w[:len(x)]
	r = r[:len(x)]
	for i := range x {
		v := s * w[i] * r[i]
		d[i] = v
		x[i] = v
	}
}

func diagStepBlock(x, d, w, r []float64, c1, c2 float64) {
	d = d[:len(x)]
	w = w[:len(x)]
	r = r[:len(x)]
	for i := range x {
		v := c1*d[i] + c2*w[i]*r[i]
		d[i] = v
		x[i] += v
	}
}
