package sparse

import "unsafe"

// The serial loops that the parallel kernels run on each block. They are
// the only places where the arithmetic happens, so the order of every
// floating-point operation is fixed here.

// mulRows sets dst[i] = Σ_k a(i, k)·x[k] for lo ≤ i < hi, each row summed in
// column order from 0.0.
//
// It reads Val, ColIdx and x without bounds checks, relying on the CSR
// invariants that CSR.trust has checked with Validate (row pointers within
// the stored entries and non-decreasing, column indices in [0, Cols)) and
// on the callers' length checks. Measured on one core, minimum of 15 runs,
// a banded matrix with 7 entries a row: 36 GB/s in cache (40³ rows) against
// 24 GB/s for the same loop with bounds checks, and 7.3 against 5.7 GB/s
// from memory (160³ rows), where a triad made 9.6; keeping only the check
// on x, or a check per row, lost most of the gain.
func mulRows(a *CSR, dst, x []float64, lo, hi int) {
	rowPtr := a.RowPtr[lo : hi+1]
	dst = dst[lo:hi]
	if len(dst) == 0 {
		return
	}
	val := unsafe.Pointer(unsafe.SliceData(a.Val))
	col := unsafe.Pointer(unsafe.SliceData(a.ColIdx))
	xs := unsafe.Pointer(unsafe.SliceData(x))
	p := rowPtr[0]
	for i := range dst {
		end := rowPtr[i+1]
		s := 0.0
		for ; p < end; p++ {
			c := *(*int32)(unsafe.Add(col, 4*p))
			s += *(*float64)(unsafe.Add(val, 8*p)) * *(*float64)(unsafe.Add(xs, 8*int(c)))
		}
		dst[i] = s
	}
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
