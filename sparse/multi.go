package sparse

import "fmt"

// Kernels that return several sums from one sweep: the fused Jacobi update
// of preconditioned conjugate gradients (two sums), and the kernels on
// blocks of k vectors (one or two sums per column). They run on the same
// pool and fixed blocks as the others (see pool.go): block b writes its
// nsum partial sums to its own slots, and each sum is then the left-to-right
// sum of its block partials, in block order, exactly as for the one-sum
// kernels. Every column's sum of a block kernel is therefore bitwise the
// sum the one-vector kernel gives for that column on its own.

// maxSums is the most sums one call can return: two per column of a block
// of MaxWidth columns.
const maxSums = 2 * MaxWidth

// multiOp runs a kernel with len(out) sums per block over rows rows (matrix
// rows, vector elements, or rows of row-major blocks) and sets out[c] to
// the c-th sum. work is the amount of work that decides between the caller
// alone and the pool (see inlineWork).
func (p *workerPool) multiOp(j job, rows, work int, out []float64) {
	ns := len(out)
	if ns == 0 || ns > maxSums {
		panic(fmt.Sprintf("sparse: internal error: %d sums per block", ns))
	}
	j.nsum = ns
	nb := (rows + p.blk - 1) / p.blk
	clear(out)
	if nb == 0 {
		return
	}
	if work < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		j.multiInline(nb, p.blk, out)
		return
	}
	defer p.mu.Unlock()
	c := p.freeCall()
	if c == nil {
		j.multiInline(nb, p.blk, out)
		return
	}
	if j.a != nil {
		rowPartition(c.bounds, j.a.RowPtr, j.a.Rows, p.blk)
	} else {
		for k := range c.bounds {
			c.bounds[k] = k * nb / p.parts
		}
	}
	j.sums = p.blockSums(nb * ns)
	c.j, c.nb = j, nb
	p.run(c)
	for b := range nb {
		for k, v := range j.sums[b*ns : (b+1)*ns] {
			out[k] += v
		}
	}
}

// multiInline runs every block on the caller, adding each block's sums to
// out in block order as they come: the same additions as the pool's path.
func (j job) multiInline(nb, blk int, out []float64) {
	var tmp [maxSums]float64
	t := tmp[:len(out)]
	for b := range nb {
		j.multiBlock(b, blk, t)
		for k, v := range t {
			out[k] += v
		}
	}
}

// blockVecOp runs a block kernel without sums over rows rows of width
// columns.
func (p *workerPool) blockVecOp(j job, rows int) {
	if rows == 0 {
		return
	}
	// vecOp splits by its length argument and decides by it whether to use
	// the pool; the block kernels' blocks are blk rows of width entries.
	p.vecOpRows(j, rows, rows*j.width)
}

// vecOpRows is vecOp for kernels whose blocks are blk rows of a block
// vector: nb blocks over rows rows, and work elements in all.
func (p *workerPool) vecOpRows(j job, rows, work int) {
	nb := (rows + p.blk - 1) / p.blk
	if work < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		j.inline(nb, p.blk)
		return
	}
	defer p.mu.Unlock()
	c := p.freeCall()
	if c == nil {
		j.inline(nb, p.blk)
		return
	}
	for k := range c.bounds {
		c.bounds[k] = k * nb / p.parts
	}
	j.sums = p.blockSums(nb)
	c.j, c.nb = j, nb
	p.run(c)
}

// multiBlock computes block b of a kernel with several sums and writes the
// block's sums to s.
func (j job) multiBlock(b, blk int, s []float64) {
	lo := b * blk
	switch j.op {
	case opAxpyDiagDot:
		hi := min(lo+blk, len(j.d))
		s[0], s[1] = axpyDiagDotBlock(j.d[lo:hi], j.s, j.x[lo:hi], j.y[lo:hi], j.z[lo:hi])
	case opBlockMulDot:
		hi := min(lo+blk, j.a.Rows)
		k := j.width
		mulRowsBlock(j.a, j.d, j.x, k, lo, hi)
		dotColumns(s, j.x[lo*k:hi*k], j.d[lo*k:hi*k], k)
	case opBlockResidual:
		hi := min(lo+blk, j.a.Rows)
		k := j.width
		mulRowsBlock(j.a, j.d, j.x, k, lo, hi)
		d, y := j.d[lo*k:hi*k], j.y[lo*k:hi*k]
		for i := range d {
			d[i] = y[i] - d[i]
		}
		dotColumns(s, d, d, k)
	case opBlockAxpyDot:
		k := j.width
		hi := min(lo+blk, len(j.d)/k)
		d := j.d[lo*k : hi*k]
		blockAxpy(d, j.cs, j.x[lo*k:hi*k], k)
		dotColumns(s, d, d, k)
	case opBlockAxpyDiagDot:
		k := j.width
		hi := min(lo+blk, len(j.d)/k)
		d, z := j.d[lo*k:hi*k], j.z[lo*k:hi*k]
		blockAxpy(d, j.cs, j.x[lo*k:hi*k], k)
		diag := j.y[lo:hi]
		for i, v := range diag {
			zr := z[i*k : (i+1)*k]
			for c, e := range d[i*k : (i+1)*k] {
				zr[c] = e * v
			}
		}
		dotColumns(s[:k], d, d, k)
		dotColumns(s[k:2*k], d, z, k)
	case opBlockDot:
		k := j.width
		hi := min(lo+blk, len(j.d)/k)
		dotColumns(s, j.d[lo*k:hi*k], j.x[lo*k:hi*k], k)
	default:
		panic(fmt.Sprintf("sparse: internal error: kernel %d has no sums", j.op))
	}
}

// axpyDiagDotBlock sets r[i] += s·q[i] and z[i] = d[i]·r[i], and returns
// rᵀr and rᵀz, each summed exactly as dotBlock sums (four partial sums
// over i mod 4 of the leading multiple of four, the rest added to the
// first, then (s0 + s1) + (s2 + s3)): one sweep doing what AxpyDot and then
// a diagonal scaling with Dot would do in three, with the same bits.
func axpyDiagDotBlock(r []float64, s float64, q, d, z []float64) (rr, rz float64) {
	q, d, z = q[:len(r)], d[:len(r)], z[:len(r)]
	var a0, a1, a2, a3, b0, b1, b2, b3 float64
	i := 0
	for ; i+4 <= len(r); i += 4 {
		r0 := r[i] + s*q[i]
		r1 := r[i+1] + s*q[i+1]
		r2 := r[i+2] + s*q[i+2]
		r3 := r[i+3] + s*q[i+3]
		r[i], r[i+1], r[i+2], r[i+3] = r0, r1, r2, r3
		z0, z1, z2, z3 := r0*d[i], r1*d[i+1], r2*d[i+2], r3*d[i+3]
		z[i], z[i+1], z[i+2], z[i+3] = z0, z1, z2, z3
		a0 += r0 * r0
		a1 += r1 * r1
		a2 += r2 * r2
		a3 += r3 * r3
		b0 += r0 * z0
		b1 += r1 * z1
		b2 += r2 * z2
		b3 += r3 * z3
	}
	for ; i < len(r); i++ {
		ri := r[i] + s*q[i]
		r[i] = ri
		zi := ri * d[i]
		z[i] = zi
		a0 += ri * ri
		b0 += ri * zi
	}
	return (a0 + a1) + (a2 + a3), (b0 + b1) + (b2 + b3)
}

// AxpyDiagDot sets r[i] += alpha·q[i] and z[i] = d[i]·r[i] (with the new
// r[i]) and returns rᵀr and rᵀz, in one sweep: the residual update of
// conjugate gradients preconditioned by a diagonal (Jacobi) preconditioner
// with inverse diagonal d, fused with its application z = D⁻¹·r and the
// two inner products the iteration needs. The sums equal Dot(r, r) and
// Dot(r, z) on the results bit for bit, and r and z those of Axpy followed
// by the elementwise product, so this is the unfused sequence's arithmetic
// in one pass over memory instead of four. z must not overlap r, q or d.
// Panics if the lengths differ.
func AxpyDiagDot(r []float64, alpha float64, q, d, z []float64) (rr, rz float64) {
	checkLen("AxpyDiagDot", len(r), q, d, z)
	var out [2]float64
	getPool().multiOp(job{op: opAxpyDiagDot, d: r, x: q, y: d, z: z, s: alpha}, len(r), len(r), out[:])
	return out[0], out[1]
}

// DiagDot sets z[i] = d[i]·r[i] and returns rᵀz, summed like Dot(r, z): a
// diagonal preconditioner's apply with the inner product conjugate
// gradients needs. z must not overlap r. Panics if the lengths differ.
func DiagDot(z, d, r []float64) float64 {
	checkLen("DiagDot", len(z), d, r)
	return getPool().vecOp(job{op: opDiagDot, d: z, x: d, y: r}, len(z))
}
