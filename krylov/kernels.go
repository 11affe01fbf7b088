package krylov

// The vector sweeps conjugate gradients needs, each fusing what one pass over
// memory can do. They run sequentially, one loop each, so their sums are added
// in index order and are bitwise reproducible.

// dot returns xᵀy.
func cgDot(x, y []float64) float64 {
	y = y[:len(x)]
	var s float64
	for i, v := range x {
		s += v * y[i]
	}
	return s
}

// mulVecDot sets q = A·p and returns pᵀq.
func cgMulVecDot(a Operator, q, p []float64) float64 {
	a.MulVec(q, p)
	return cgDot(p, q)
}

// residualUpdate sets r −= α·q and returns the new rᵀr.
func cgResidualUpdate(r, q []float64, alpha float64) float64 {
	q = q[:len(r)]
	var s float64
	for i := range r {
		v := r[i] - alpha*q[i]
		r[i] = v
		s += v * v
	}
	return s
}

// residualFrom sets r = b − q (q holding A·x) and returns rᵀr.
func cgResidualFrom(r, b, q []float64) float64 {
	b, q = b[:len(r)], q[:len(r)]
	var s float64
	for i := range r {
		v := b[i] - q[i]
		r[i] = v
		s += v * v
	}
	return s
}

// stepUpdate sets x += α·p, then p = z + β·p, in one sweep.
func cgStepUpdate(x, p, z []float64, alpha, beta float64) {
	p, z = p[:len(x)], z[:len(x)]
	for i := range x {
		pi := p[i]
		x[i] += alpha * pi
		p[i] = z[i] + beta*pi
	}
}

// directionUpdate sets p = z + β·p.
func cgDirectionUpdate(p, z []float64, beta float64) {
	z = z[:len(p)]
	for i := range p {
		p[i] = z[i] + beta*p[i]
	}
}

// axpy sets y += α·x.
func cgAxpy(y []float64, alpha float64, x []float64) {
	x = x[:len(y)]
	for i := range y {
		y[i] += alpha * x[i]
	}
}
