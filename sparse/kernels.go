package sparse

import (
	"math"
	"unsafe"
)

// The serial loops that the parallel kernels run on each block. They are
// the only places where the arithmetic happens, so the order of every
// floating-point operation is fixed here.

// mulRows sets dst[i] = Σ_k a(i, k)·x[k] for lo ≤ i < hi, each row summed in
// column order from 0.0: s = 0.0, then s += Val[p]·x[ColIdx[p]] for p from
// RowPtr[i] up, exactly the plain loop (mulRowsRef in the tests).
//
// It reads RowPtr, Val, ColIdx and x without bounds checks, relying on the
// CSR invariants that CSR.trust has checked with Validate (row pointers
// within the stored entries and non-decreasing, column indices in
// [0, Cols)) and on the callers' length checks. Measured on one core,
// minimum of 15 runs, a banded matrix with 7 entries a row: 36 GB/s in
// cache (40³ rows) against 24 GB/s for the same loop with bounds checks,
// and 7.3 against 5.7 GB/s from memory (160³ rows), where a triad made 9.6;
// keeping only the check on x, or a check per row, lost most of the gain.
//
// Rows of up to 8 entries (stencils: 7 for 3D Poisson) run as straight-line
// code chosen by the row's length: no loop counter, no loop-exit branch
// that mispredicts where the length changes, and every load at a constant
// offset from the row's first entry. Longer rows take 4 entries at a time
// until at most 8 are left, which then go the same way. The additions are
// the same, in the same order, as the plain loop's, so the results agree bit
// for bit. On Poisson3D, one core, this made 43 against 30 GB/s in cache
// (40³) and 19.4 against 18.2 GB/s from memory (160³); the compare-and-
// branch dispatch (two switches of four cases) beat a jump table into a
// Duff's device (31 GB/s in cache) and a 4-way unrolled loop (39).
func mulRows(a *CSR, dst, x []float64, lo, hi int) {
	rowPtr := a.RowPtr[lo : hi+1]
	dst = dst[lo:hi]
	if len(dst) == 0 {
		return
	}
	val := unsafe.Pointer(unsafe.SliceData(a.Val))
	col := unsafe.Pointer(unsafe.SliceData(a.ColIdx))
	xs := unsafe.Pointer(unsafe.SliceData(x))
	// rp points at the end pointer of the first row, RowPtr[lo+1].
	rp := unsafe.Pointer(unsafe.SliceData(rowPtr[1:]))
	p := rowPtr[0]
	for i := range dst {
		end := *(*int)(unsafe.Add(rp, 8*i))
		n := end - p
		s := 0.0
		// An empty row takes no pointer to its (possibly nonexistent) first
		// entry: a pointer past the end of Val or ColIdx is not allowed.
		if n > 0 {
			cb := unsafe.Add(col, 4*p)
			vb := unsafe.Add(val, 8*p)
			for ; n > 8; n -= 4 {
				s += entry(cb, vb, xs, 0)
				s += entry(cb, vb, xs, 1)
				s += entry(cb, vb, xs, 2)
				s += entry(cb, vb, xs, 3)
				cb = unsafe.Add(cb, 4*4)
				vb = unsafe.Add(vb, 4*8)
			}
			// Two switches of four cases compile to compares and branches,
			// which predict better here than the jump table of one switch of
			// eight.
			if n > 4 {
				switch n {
				case 5:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
					s += entry(cb, vb, xs, 2)
					s += entry(cb, vb, xs, 3)
					s += entry(cb, vb, xs, 4)
				case 6:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
					s += entry(cb, vb, xs, 2)
					s += entry(cb, vb, xs, 3)
					s += entry(cb, vb, xs, 4)
					s += entry(cb, vb, xs, 5)
				case 7:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
					s += entry(cb, vb, xs, 2)
					s += entry(cb, vb, xs, 3)
					s += entry(cb, vb, xs, 4)
					s += entry(cb, vb, xs, 5)
					s += entry(cb, vb, xs, 6)
				case 8:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
					s += entry(cb, vb, xs, 2)
					s += entry(cb, vb, xs, 3)
					s += entry(cb, vb, xs, 4)
					s += entry(cb, vb, xs, 5)
					s += entry(cb, vb, xs, 6)
					s += entry(cb, vb, xs, 7)
				}
			} else {
				switch n {
				case 1:
					s += entry(cb, vb, xs, 0)
				case 2:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
				case 3:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
					s += entry(cb, vb, xs, 2)
				case 4:
					s += entry(cb, vb, xs, 0)
					s += entry(cb, vb, xs, 1)
					s += entry(cb, vb, xs, 2)
					s += entry(cb, vb, xs, 3)
				}
			}
		}
		dst[i] = s
		p = end
	}
}

// entry returns Val[p+k]·x[ColIdx[p+k]] where cb and vb point at ColIdx[p]
// and Val[p]. The column index is read as a uint32, the same value since
// Validate has checked it is not negative: a zero-extending load lets the
// compiler fold the constant k into the load's address, which it does not
// do for the sign-extending one.
func entry(cb, vb, xs unsafe.Pointer, k int) float64 {
	c := *(*uint32)(unsafe.Add(cb, 4*k))
	return *(*float64)(unsafe.Add(vb, 8*k)) * *(*float64)(unsafe.Add(xs, 8*uintptr(c)))
}

// dotBlock returns xᵀy for one block: four partial sums over the elements
// i ≡ 0, 1, 2, 3 (mod 4) of the block's leading multiple of four, the
// remaining elements added to the first, then (s0 + s1) + (s2 + s3). Four
// independent sums let the additions overlap in the pipeline.
func dotBlock(x, y []float64) float64 {
	y = y[:len(x)]
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		s0 += x[i] * y[i]
		s1 += x[i+1] * y[i+1]
		s2 += x[i+2] * y[i+2]
		s3 += x[i+3] * y[i+3]
	}
	for ; i < len(x); i++ {
		s0 += x[i] * y[i]
	}
	return (s0 + s1) + (s2 + s3)
}

// axpyBlock sets d[i] += s·x[i].
func axpyBlock(d []float64, s float64, x []float64) {
	x = x[:len(d)]
	for i := range d {
		d[i] += s * x[i]
	}
}

// triadBlock sets d[i] = b[i] + s·c[i].
func triadBlock(d, b, c []float64, s float64) {
	b, c = b[:len(d)], c[:len(d)]
	for i := range d {
		d[i] = b[i] + s*c[i]
	}
}

// stepBlock sets x[i] += α·p[i], then p[i] = z[i] + β·p[i] (with the old
// p[i]).
func stepBlock(x, p, z []float64, alpha, beta float64) {
	p, z = p[:len(x)], z[:len(x)]
	for i := range x {
		pi := p[i]
		x[i] += alpha * pi
		p[i] = z[i] + beta*pi
	}
}

// subNormBlock sets d[i] = b[i] − d[i] and returns dᵀd, summed like
// dotBlock.
func subNormBlock(d, b []float64) float64 {
	b = b[:len(d)]
	for i := range d {
		d[i] = b[i] - d[i]
	}
	return dotBlock(d, d)
}

// residualBoundRows returns Σ_i ((w_i + 1)·s_i)² over rows lo..hi, where
// s_i = Σ_k |a(i, k)|·|x[k]| + |b[i]| and w_i is row i's number of stored
// entries: the squared first-order bound, in units of the unit roundoff, on
// the rounding error of row i of b − A·x (see CSR.ResidualBound). The sum
// over the block runs in row order; it is not on a hot path.
func residualBoundRows(a *CSR, x, b []float64, lo, hi int) float64 {
	sum := 0.0
	for i := lo; i < hi; i++ {
		p, q := a.RowPtr[i], a.RowPtr[i+1]
		s := math.Abs(b[i])
		for k, c := range a.ColIdx[p:q] {
			s += math.Abs(a.Val[p+k]) * math.Abs(x[c])
		}
		w := float64(q-p+1) * s
		sum += w * w
	}
	return sum
}
