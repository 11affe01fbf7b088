package sparse_test

import (
	"fmt"
	"slices"
	"testing"
	"time"

	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// Bytes a kernel must move at the least, which the bandwidth figures below
// divide by the time:
//
// An SpMV y = A·x on an n×n matrix with nnz entries must read every value
// (8 bytes) and column index (4 bytes) once, the n+1 row pointers (8 bytes
// each), x at least once (8n, assuming perfect reuse of x from cache, which
// a banded matrix comes close to), and write y (8n):
//
//	12·nnz + 8·(n+1) + 16·n bytes.
//
// The triad a[i] = b[i] + s·c[i] on vectors of length m reads two vectors
// and writes one: 24·m bytes. Neither count includes the write-allocate
// read of the destination that an ordinary store causes (a cache line is
// read before it is written), so both are counted the same way, as the
// STREAM benchmark counts (McCalpin, 1995); on hardware with write-allocate
// both kernels really move 8 bytes per output element more, which weighs
// more on the triad (32/24) than on the SpMV.
//
// The triad reference runs on vectors whose three arrays together hold at
// least the SpMV's minimum bytes, so that both kernels stream the same
// amount of data through the same level of the memory hierarchy: in cache
// for Poisson3D 40³ (about 6 MB), from memory for 160³ and 200³ (0.4 and
// 0.8 GB, past the ~300 MiB last-level cache).

func spmvBytes(a *sparse.CSR) int64 {
	return 12*int64(a.NNZ()) + 8*int64(a.Rows+1) + 16*int64(a.Rows)
}

// nonsymmetric returns a copy of a with row i scaled by 1 + (i mod 3), so
// that its transpose is a different matrix with the same sparsity.
func nonsymmetric(a *sparse.CSR) *sparse.CSR {
	b := &sparse.CSR{Rows: a.Rows, Cols: a.Cols, RowPtr: a.RowPtr, ColIdx: a.ColIdx, Val: make([]float64, len(a.Val))}
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			b.Val[p] = a.Val[p] * float64(1+i%3)
		}
	}
	return b
}

func ones(n int) []float64 {
	v := make([]float64, n)
	for i := range v {
		v[i] = 1
	}
	return v
}

// BenchmarkSpMV measures y = A·x on 3D Poisson problems next to the triad
// kernel in the same run. The "ratio" sub-benchmark times one SpMV and one
// triad of the same byte volume in each iteration and reports both
// bandwidths and spmv/triad, the figure later performance work is judged
// by; "trans" does the same for MulVecTrans against MulVec on a
// nonsymmetric matrix with the Poisson pattern (its transpose kept).
func BenchmarkSpMV(b *testing.B) {
	for _, n := range []int{40, 100, 160, 200} {
		a := stencil.Poisson3D(n)
		// Every vector is written before timing: on this VM the first touch
		// of fresh memory (a page fault per 4 KiB) costs more than the
		// kernels.
		x, y := ones(a.Cols), ones(a.Rows)
		bytes := spmvBytes(a)
		m := int(bytes/24) + 1
		ta, tb, tc := ones(m), ones(m), ones(m)
		name := fmt.Sprintf("poisson3d-%d", n)

		b.Run(name+"/spmv", func(b *testing.B) {
			b.SetBytes(bytes)
			b.ReportAllocs()
			for b.Loop() {
				a.MulVec(y, x)
			}
		})
		b.Run(name+"/triad", func(b *testing.B) {
			b.SetBytes(24 * int64(m))
			b.ReportAllocs()
			for b.Loop() {
				sparse.Triad(ta, tb, tc, 0.5)
			}
		})
		b.Run(name+"/ratio", func(b *testing.B) {
			b.SetBytes(bytes + 24*int64(m))
			b.ReportAllocs()
			var ts, tt time.Duration
			for b.Loop() {
				t0 := time.Now()
				a.MulVec(y, x)
				t1 := time.Now()
				sparse.Triad(ta, tb, tc, 0.5)
				tt += time.Since(t1)
				ts += t1.Sub(t0)
			}
			spmv := float64(bytes) * float64(b.N) / ts.Seconds() / 1e9
			triad := 24 * float64(m) * float64(b.N) / tt.Seconds() / 1e9
			b.ReportMetric(spmv, "spmv-GB/s")
			b.ReportMetric(triad, "triad-GB/s")
			b.ReportMetric(spmv/triad, "spmv/triad")
		})
		b.Run(name+"/trans", func(b *testing.B) {
			g := nonsymmetric(a)
			g.MulVecTrans(y, x) // builds and keeps the transpose, outside the timing
			b.SetBytes(2 * bytes)
			b.ReportAllocs()
			var tn, tt time.Duration
			for b.Loop() {
				t0 := time.Now()
				g.MulVec(y, x)
				t1 := time.Now()
				g.MulVecTrans(y, x)
				tt += time.Since(t1)
				tn += t1.Sub(t0)
			}
			b.ReportMetric(tt.Seconds()/tn.Seconds(), "trans/mulvec")
			g.ForgetTranspose()
		})
	}
}

// BenchmarkCGSweep measures the kernels of one conjugate gradient
// iteration, fused where one sweep can do two jobs (q = A·p with pᵀq by
// MulVecDot; r −= α·q with rᵀr by AxpyDot; x += α·p by Axpy; p = r + β·p by
// Triad), against the triad in the same run. Minimum bytes per iteration:
// the SpMV's (p read once, q written), plus 24n for each of the three
// vector sweeps (two vectors read, one written; no write-allocate), that is
// 12·nnz + 8·(n+1) + 16n + 72n.
func BenchmarkCGSweep(b *testing.B) {
	for _, n := range []int{40, 100, 200} {
		a := stencil.Poisson3D(n)
		nr := a.Rows
		p, q, r, x := ones(nr), ones(nr), ones(nr), ones(nr)
		bytes := spmvBytes(a) + 3*24*int64(nr)
		m := int(bytes/24) + 1
		ta, tb, tc := ones(m), ones(m), ones(m)
		b.Run(fmt.Sprintf("poisson3d-%d", n), func(b *testing.B) {
			b.SetBytes(bytes)
			b.ReportAllocs()
			var tcg, tt time.Duration
			for b.Loop() {
				t0 := time.Now()
				pq := a.MulVecDot(q, p)
				alpha := 1e-3 / (pq + 1)
				rr := sparse.AxpyDot(r, -alpha, q)
				sparse.Axpy(x, alpha, p)
				sparse.Triad(p, r, p, 1e-3/(rr+1))
				t1 := time.Now()
				sparse.Triad(ta, tb, tc, 0.5)
				tt += time.Since(t1)
				tcg += t1.Sub(t0)
			}
			cg := float64(bytes) * float64(b.N) / tcg.Seconds() / 1e9
			triad := 24 * float64(m) * float64(b.N) / tt.Seconds() / 1e9
			b.ReportMetric(cg, "cg-GB/s")
			b.ReportMetric(triad, "triad-GB/s")
			b.ReportMetric(cg/triad, "cg/triad")
		})
	}
}

// BenchmarkSmall measures the cost of the kernels on small problems, where
// the pool's hand-off (or running inline) dominates.
func BenchmarkSmall(b *testing.B) {
	for _, n := range []int{10, 20, 32, 50} {
		a := stencil.Poisson3D(n)
		x, y := ones(a.Cols), ones(a.Rows)
		b.Run(fmt.Sprintf("poisson3d-%d/spmv", n), func(b *testing.B) {
			b.SetBytes(spmvBytes(a))
			b.ReportAllocs()
			for b.Loop() {
				a.MulVec(y, x)
			}
		})
		b.Run(fmt.Sprintf("n=%d/dot", a.Rows), func(b *testing.B) {
			b.SetBytes(16 * int64(a.Rows))
			b.ReportAllocs()
			for b.Loop() {
				sparse.Dot(x, y)
			}
		})
	}
}

// BenchmarkAnalyze measures the report on a 3D Poisson matrix (one sweep for
// the row figures, one with a binary search per off-diagonal entry for the
// symmetry).
func BenchmarkAnalyze(b *testing.B) {
	for _, n := range []int{40, 100} {
		a := stencil.Poisson3D(n)
		b.Run(fmt.Sprintf("poisson3d-%d", n), func(b *testing.B) {
			b.SetBytes(a.Bytes())
			b.ReportAllocs()
			for b.Loop() {
				sparse.Analyze(a, 1e-12)
			}
		})
	}
}

// BenchmarkTranspose measures building the transpose that MulVecTrans keeps.
func BenchmarkTranspose(b *testing.B) {
	for _, n := range []int{40, 100} {
		a := stencil.Poisson3D(n)
		b.Run(fmt.Sprintf("poisson3d-%d", n), func(b *testing.B) {
			b.SetBytes(a.Bytes())
			b.ReportAllocs()
			for b.Loop() {
				a.Transpose()
			}
		})
	}
}

// BenchmarkMulBlock measures the block product Y = A·X on k = 4 and 8
// columns (row-major n×k blocks, A read once per block) against k single
// products y = A·x on the same columns, in one run, interleaved, on
// Poisson3D 160³ (4.1 M rows, from memory). Each call is timed on its own
// and the ratio formed from the best times (the least disturbed on a shared
// machine; common practice) and from the medians. Metrics:
//
//	block-ms         best time of one block product
//	singles-ms       best time of k single products, summed per round
//	speedup          singles-ms / block-ms (targets: 2.5 for k = 4, 4 for k = 8)
//	speedup-median   the same from the medians
//
// Run: go test ./sparse/ -run '^$' -bench MulBlock -benchtime 5x
func BenchmarkMulBlock(b *testing.B) {
	a := stencil.Poisson3D(160)
	n := a.Rows
	for _, k := range []int{4, 8} {
		b.Run(fmt.Sprintf("poisson3d-160^3/k=%d", k), func(b *testing.B) {
			x := make([]float64, n*k)
			for i := range x {
				x[i] = float64(i%7) - 3
			}
			y := make([]float64, n*k)
			xs, ys := make([][]float64, k), make([][]float64, k)
			for c := range xs {
				xs[c], ys[c] = make([]float64, n), make([]float64, n)
				for i := range xs[c] {
					xs[c][i] = x[i*k+c]
				}
			}
			a.MulBlock(y, x, k) // touch the pages
			for c := range xs {
				a.MulVec(ys[c], xs[c])
			}
			var block, singles []time.Duration
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				t := time.Now()
				a.MulBlock(y, x, k)
				block = append(block, time.Since(t))
				t = time.Now()
				for c := range xs {
					a.MulVec(ys[c], xs[c])
				}
				singles = append(singles, time.Since(t))
			}
			b.StopTimer()
			bBest, bMed := minMedian(block)
			sBest, sMed := minMedian(singles)
			b.ReportMetric(bBest.Seconds()*1e3, "block-ms")
			b.ReportMetric(sBest.Seconds()*1e3, "singles-ms")
			b.ReportMetric(sBest.Seconds()/bBest.Seconds(), "speedup")
			b.ReportMetric(sMed.Seconds()/bMed.Seconds(), "speedup-median")
		})
	}
}

// minMedian returns the smallest and the median of d (sorted in place).
func minMedian(d []time.Duration) (lo, med time.Duration) {
	slices.Sort(d)
	return d[0], d[len(d)/2]
}
