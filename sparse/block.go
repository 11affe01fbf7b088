package sparse

import (
	"fmt"
	"unsafe"
)

// Blocks of vectors. A block of k vectors of length n is one []float64 of
// n·k elements in row-major order: element i of column c is at i·k + c, so
// that the k entries a matrix row meets in a product lie side by side. The
// block kernels read A once for all k columns; that is the point of them,
// since a sparse product is limited by the memory traffic of A (12 bytes per
// entry against 8 per vector element). Column c of every block kernel's
// result is bitwise what the one-vector kernel gives on column c alone
// (products sum each row in column order; sums are formed per fixed block
// of rows with dotBlock's four partial sums and added in block order), so a
// method run on a block takes the same steps, bit for bit, as the same
// method run on each column by itself.
//
// The per-column scalars (alpha, beta) of the vector kernels are slices of
// k values; the per-column sums are written to a caller's slice of k (or
// 2·k) values. In AxpyBlock, AxpyDotBlock and AxpyDiagDotBlock a column
// whose alpha is zero is left untouched rather than given d + 0·x (equal
// for finite x, but a NaN or Inf in x would spoil d): a method parks the
// columns it is done with that way. Nothing is allocated.

// MaxWidth is the largest number of columns a block kernel takes. Wider
// problems are cut into blocks of at most MaxWidth columns by the caller:
// beyond 16 columns the product is no longer limited by A's traffic but by
// the vectors', so wider blocks gain little (our own choice).
const MaxWidth = 16

func checkWidth(op string, k int) {
	if k < 1 || k > MaxWidth {
		panic(fmt.Sprintf("sparse: %s: block width %d outside [1, %d]", op, k, MaxWidth))
	}
}

func checkBlock(op string, n, k int, vs ...[]float64) {
	for _, v := range vs {
		if len(v) != n*k {
			panic(fmt.Sprintf("sparse: %s: block of %d elements, want %d×%d = %d", op, len(v), n, k, n*k))
		}
	}
}

// MulBlock sets dst = A·x for row-major blocks x (Cols×k) and dst (Rows×k),
// reading A once. Column c of dst is bitwise A·(column c of x) as MulVec
// forms it. dst must not overlap x. Panics if k is outside [1, MaxWidth], a
// block has the wrong length, or the arrays fail Validate.
func (a *CSR) MulBlock(dst, x []float64, k int) {
	checkWidth("MulBlock", k)
	checkBlock("MulBlock", a.Rows, k, dst)
	checkBlock("MulBlock", a.Cols, k, x)
	a.trust("MulBlock")
	getPool().matOpWork(job{op: opBlockMul, a: a, d: dst, x: x, width: k})
}

// MulBlockDot sets dst = A·x for n×k blocks (A square) and dots[c] to the
// inner product of column c of x with column c of dst, bitwise
// MulVecDot's on that column. len(dots) must be k.
func (a *CSR) MulBlockDot(dst, x []float64, k int, dots []float64) {
	checkWidth("MulBlockDot", k)
	if a.Rows != a.Cols {
		panic(fmt.Sprintf("sparse: MulBlockDot: matrix is %d×%d, not square", a.Rows, a.Cols))
	}
	checkBlock("MulBlockDot", a.Rows, k, dst, x)
	checkLen("MulBlockDot", k, dots)
	a.trust("MulBlockDot")
	getPool().multiOp(job{op: opBlockMulDot, a: a, d: dst, x: x, width: k}, a.Rows, (a.NNZ()+a.Rows)*k, dots)
}

// ResidualBlock sets dst = b − A·x for n×k blocks and norms[c] to the
// squared norm of column c of dst, bitwise Residual's on that column. dst
// may be b but must not overlap x. len(norms) must be k.
func (a *CSR) ResidualBlock(dst, b, x []float64, k int, norms []float64) {
	checkWidth("ResidualBlock", k)
	checkBlock("ResidualBlock", a.Rows, k, dst, b)
	checkBlock("ResidualBlock", a.Cols, k, x)
	checkLen("ResidualBlock", k, norms)
	a.trust("ResidualBlock")
	getPool().multiOp(job{op: opBlockResidual, a: a, d: dst, x: x, y: b, width: k}, a.Rows, (a.NNZ()+a.Rows)*k, norms)
}

// AxpyDotBlock sets column c of the n×k block d to d_c + alpha[c]·x_c and
// norms[c] to its new squared norm: AxpyDot column by column, bit for bit.
func AxpyDotBlock(d []float64, alpha, x []float64, k int, norms []float64) {
	checkWidth("AxpyDotBlock", k)
	n := len(d) / k
	checkBlock("AxpyDotBlock", n, k, d, x)
	checkLen("AxpyDotBlock", k, alpha, norms)
	getPool().multiOp(job{op: opBlockAxpyDot, d: d, x: x, cs: alpha, width: k}, n, n*k, norms)
}

// AxpyDiagDotBlock is AxpyDiagDot column by column on n×k blocks r, q and
// z with one diagonal dg of length n: r_c += alpha[c]·q_c, z_c = dg∘r_c,
// rr[c] = r_cᵀr_c and rz[c] = r_cᵀz_c, bitwise AxpyDiagDot's per column.
func AxpyDiagDotBlock(r []float64, alpha, q, dg, z []float64, k int, rr, rz []float64) {
	checkWidth("AxpyDiagDotBlock", k)
	n := len(dg)
	checkBlock("AxpyDiagDotBlock", n, k, r, q, z)
	checkLen("AxpyDiagDotBlock", k, alpha, rr, rz)
	var out [maxSums]float64
	getPool().multiOp(job{op: opBlockAxpyDiagDot, d: r, x: q, y: dg, z: z, cs: alpha, width: k}, n, n*k, out[:2*k])
	copy(rr, out[:k])
	copy(rz, out[k:2*k])
}

// DotBlock sets dots[c] to the inner product of column c of the n×k blocks
// x and y, bitwise Dot's on that column.
func DotBlock(x, y []float64, k int, dots []float64) {
	checkWidth("DotBlock", k)
	n := len(x) / k
	checkBlock("DotBlock", n, k, x, y)
	checkLen("DotBlock", k, dots)
	getPool().multiOp(job{op: opBlockDot, d: x, x: y, width: k}, n, n*k, dots)
}

// AxpyBlock sets column c of d to d_c + alpha[c]·x_c (Axpy per column).
func AxpyBlock(d []float64, alpha, x []float64, k int) {
	checkWidth("AxpyBlock", k)
	n := len(d) / k
	checkBlock("AxpyBlock", n, k, d, x)
	checkLen("AxpyBlock", k, alpha)
	getPool().blockVecOp(job{op: opBlockAxpy, d: d, x: x, cs: alpha, width: k}, n)
}

// TriadBlock sets column c of p to z_c + beta[c]·p_c (Triad(p, z, p, β)
// per column: the direction update).
func TriadBlock(p, z []float64, beta []float64, k int) {
	checkWidth("TriadBlock", k)
	n := len(p) / k
	checkBlock("TriadBlock", n, k, p, z)
	checkLen("TriadBlock", k, beta)
	getPool().blockVecOp(job{op: opBlockTriad, d: p, x: z, ct: beta, width: k}, n)
}

// StepBlock is Step per column: x_c += alpha[c]·p_c, then p_c = z_c +
// beta[c]·p_c with the old p_c.
func StepBlock(x, p, z []float64, alpha, beta []float64, k int) {
	checkWidth("StepBlock", k)
	n := len(x) / k
	checkBlock("StepBlock", n, k, x, p, z)
	checkLen("StepBlock", k, alpha, beta)
	getPool().blockVecOp(job{op: opBlockStep, d: x, x: p, y: z, cs: alpha, ct: beta, width: k}, n)
}

// matOpWork is matOp for a block product, whose work grows with the width.
func (p *workerPool) matOpWork(j job) {
	a := j.a
	nb := (a.Rows + p.blk - 1) / p.blk
	if nb == 0 || (a.NNZ()+a.Rows)*j.width < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		j.inline(nb, p.blk)
		return
	}
	defer p.mu.Unlock()
	c := p.freeCall()
	if c == nil {
		j.inline(nb, p.blk)
		return
	}
	rowPartition(c.bounds, a.RowPtr, a.Rows, p.blk)
	j.sums = p.blockSums(nb)
	c.j, c.nb = j, nb
	p.run(c)
}

// blockRows runs a block vector kernel without sums on rows lo..hi.
//
// The block kernels go column by column over the rows of one fixed block
// (a stride of k through memory the block has just brought into cache:
// 2048 rows of up to 16 columns are at most 256 KiB an operand), so each
// column's scalars stay in registers and the inner loops carry no
// per-column branch.
func (j job) blockRows(lo, hi int) {
	k := j.width
	d := j.d[lo*k : hi*k]
	switch j.op {
	case opBlockAxpy:
		blockAxpy(d, j.cs, j.x[lo*k:hi*k], k)
	case opBlockTriad:
		z := j.x[lo*k : hi*k]
		z = z[:len(d)]
		for c, b := range j.ct[:k] {
			for i := c; i < len(d); i += k {
				d[i] = z[i] + b*d[i]
			}
		}
	case opBlockStep:
		p, z := j.x[lo*k:hi*k], j.y[lo*k:hi*k]
		p, z = p[:len(d)], z[:len(d)]
		beta := j.ct[:k]
		for c, a := range j.cs[:k] {
			b := beta[c]
			for i := c; i < len(d); i += k {
				pi := p[i]
				d[i] += a * pi
				p[i] = z[i] + b*pi
			}
		}
	}
}

// blockAxpy sets d[i·k + c] += alpha[c]·x[i·k + c], leaving the columns
// whose alpha[c] is zero untouched.
func blockAxpy(d, alpha, x []float64, k int) {
	x = x[:len(d)]
	for c, a := range alpha[:k] {
		if a == 0 {
			continue
		}
		for i := c; i < len(d); i += k {
			d[i] += a * x[i]
		}
	}
}

// dotColumns sets s[c] to the inner product of column c of the row-major
// blocks x and y (rows of k), summed as dotBlock sums a vector: four
// partial sums over the rows i ≡ 0, 1, 2, 3 (mod 4) of the leading multiple
// of four rows, the remaining rows added to the first, then
// (s0 + s1) + (s2 + s3).
func dotColumns(s, x, y []float64, k int) {
	y = y[:len(x)]
	rows := len(x) / k
	for c := range s[:k] {
		var s0, s1, s2, s3 float64
		i := 0
		for ; i+4 <= rows; i += 4 {
			j := i*k + c
			_ = x[j+3*k]
			_ = y[j+3*k]
			s0 += x[j] * y[j]
			s1 += x[j+k] * y[j+k]
			s2 += x[j+2*k] * y[j+2*k]
			s3 += x[j+3*k] * y[j+3*k]
		}
		for ; i < rows; i++ {
			j := i*k + c
			s0 += x[j] * y[j]
		}
		s[c] = (s0 + s1) + (s2 + s3)
	}
}

// mulRowsBlock sets rows lo..hi of the n×k block dst to A·x, each of the k
// sums of a row in column order from 0.0 as mulRows sums one, so column c
// is bitwise mulRows on column c. It reads the arrays without bounds
// checks under the same conditions as mulRows (trusted arrays, lengths
// checked by the callers). Widths 4 and 8 keep their sums in registers;
// other widths keep them in a small array.
func mulRowsBlock(a *CSR, dst, x []float64, k, lo, hi int) {
	if hi <= lo {
		return
	}
	val := unsafe.Pointer(unsafe.SliceData(a.Val))
	col := unsafe.Pointer(unsafe.SliceData(a.ColIdx))
	xs := unsafe.Pointer(unsafe.SliceData(x))
	rowPtr := a.RowPtr[lo : hi+1]
	out := dst[lo*k : hi*k]
	switch k {
	case 1:
		mulRows(a, dst, x, lo, hi)
		return
	case 4:
		mulRows4(rowPtr, val, col, xs, out)
		return
	case 8:
		mulRows8(rowPtr, val, col, xs, out)
		return
	}
	var s [MaxWidth]float64
	for r := 0; r+1 < len(rowPtr); r++ {
		acc := s[:k]
		clear(acc)
		for p := rowPtr[r]; p < rowPtr[r+1]; p++ {
			v := *(*float64)(unsafe.Add(val, 8*p))
			c := *(*uint32)(unsafe.Add(col, 4*p))
			xr := unsafe.Add(xs, 8*uintptr(c)*uintptr(k))
			for m := range acc {
				acc[m] += v * *(*float64)(unsafe.Add(xr, 8*m))
			}
		}
		copy(out[r*k:(r+1)*k], acc)
	}
}

func mulRows4(rowPtr []int, val, col, xs unsafe.Pointer, out []float64) {
	p := rowPtr[0]
	for r, end := range rowPtr[1:] {
		var s0, s1, s2, s3 float64
		// Addresses are formed from the array starts at each entry: a
		// pointer stepped past the last entry would be invalid.
		for ; p < end; p++ {
			v := *(*float64)(unsafe.Add(val, 8*p))
			xr := (*[4]float64)(unsafe.Add(xs, 32*uintptr(*(*uint32)(unsafe.Add(col, 4*p)))))
			s0 += v * xr[0]
			s1 += v * xr[1]
			s2 += v * xr[2]
			s3 += v * xr[3]
		}
		o := (*[4]float64)(out[4*r : 4*r+4])
		o[0], o[1], o[2], o[3] = s0, s1, s2, s3
	}
}

func mulRows8(rowPtr []int, val, col, xs unsafe.Pointer, out []float64) {
	p := rowPtr[0]
	for r, end := range rowPtr[1:] {
		var s0, s1, s2, s3, s4, s5, s6, s7 float64
		// Addresses are formed from the array starts at each entry: a
		// pointer stepped past the last entry would be invalid.
		for ; p < end; p++ {
			v := *(*float64)(unsafe.Add(val, 8*p))
			xr := (*[8]float64)(unsafe.Add(xs, 64*uintptr(*(*uint32)(unsafe.Add(col, 4*p)))))
			s0 += v * xr[0]
			s1 += v * xr[1]
			s2 += v * xr[2]
			s3 += v * xr[3]
			s4 += v * xr[4]
			s5 += v * xr[5]
			s6 += v * xr[6]
			s7 += v * xr[7]
		}
		o := (*[8]float64)(out[8*r : 8*r+8])
		o[0], o[1], o[2], o[3], o[4], o[5], o[6], o[7] = s0, s1, s2, s3, s4, s5, s6, s7
	}
}
