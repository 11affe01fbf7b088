package sparse

import "fmt"

// The serial loops that the parallel kernels run on each block. They are
// the only places where the arithmetic happens, so the order of every
// floating-point operation is fixed here.

// mulRows sets dst[i] = Σ_k a(i, k)·x[k] for lo ≤ i < hi, each row summed in
// column order from 0.0. The entry position p runs on from row to row, so a
// row costs one row-pointer load. Measured in cache on one core (minimum of
// 400 runs, banded 64000×64000, 7 entries a row): 0.48 ns per entry
// against 0.66 for slicing each row; the same loop with unsafe pointers and
// no bounds checks took 0.41, not enough to give up the checks for.
func mulRows(a *CSR, dst, x []float64, lo, hi int) {
	rowPtr := a.RowPtr[lo : hi+1]
	colIdx, val := a.ColIdx, a.Val
	val = val[:len(colIdx)]
	dst = dst[lo:hi]
	p := rowPtr[0]
	for i := range dst {
		end := rowPtr[i+1]
		if end > len(val) {
			badRowPtr(end, len(val))
		}
		s := 0.0
		for ; p < end; p++ {
			s += val[p] * x[colIdx[p]]
		}
		dst[i] = s
	}
}

// badRowPtr panics: only a CSR that fails Validate gets here. Kept out of
// line so that the kernel's loop keeps its registers.
//
//go:noinline
func badRowPtr(end, nnz int) {
	panic(fmt.Sprintf("sparse: row pointer %d beyond the %d stored entries", end, nnz))
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
