package sparse

// Fused vector sweeps of MINRES (package krylov), on the worker pool like
// the conjugate-gradient kernels in vec.go: the three-term Lanczos update
// with its norm, and the update of the solution together with the
// three-term update of the search direction, each one pass over memory.

// TriadDot sets d[i] = x[i] + s·d[i] + t·y[i] and returns the new dᵀd in
// the same sweep (summed as Dot, block by block, so the sum equals
// Dot(d, d) on the result bit for bit): the Lanczos recurrence
// v_{j+1} = A·z_j − γ·v_{j−1} − δ·v_j with d = v_{j−1}, x = A·z_j. Panics
// if the lengths differ.
func TriadDot(d, x, y []float64, s, t float64) float64 {
	checkLen("TriadDot", len(d), x, y)
	return getPool().vecOp(job{op: opTriadDot, d: d, x: x, y: y, s: s, t: t}, len(d))
}

// Step3 sets x[i] += alpha·p[i] and then p[i] = z[i] + beta·p[i] +
// gamma·w[i] with the old p[i], in one sweep: MINRES's solution update
// (lagging by a step) with the three-term recurrence of its directions.
// Panics if the lengths differ.
func Step3(x, p, z, w []float64, alpha, beta, gamma float64) {
	checkLen("Step3", len(x), p, z, w)
	getPool().vecOp(job{op: opStep3, d: x, x: p, y: z, w: w, s: alpha, t: beta, u: gamma}, len(x))
}

// triadDotBlock sets d[i] = x[i] + s·d[i] + t·y[i].
func triadDotBlock(d, x, y []float64, s, t float64) {
	x, y = x[:len(d)], y[:len(d)]
	for i := range d {
		d[i] = x[i] + s*d[i] + t*y[i]
	}
}

// step3Block sets x[i] += α·p[i], then p[i] = z[i] + β·p[i] + γ·w[i].
func step3Block(x, p, z, w []float64, alpha, beta, gamma float64) {
	p, z, w = p[:len(x)], z[:len(x)], w[:len(x)]
	for i := range x {
		pi := p[i]
		x[i] += alpha * pi
		p[i] = z[i] + beta*pi + gamma*w[i]
	}
}
