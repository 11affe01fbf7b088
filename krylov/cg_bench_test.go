package krylov_test

import (
	"context"
	"fmt"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// cgIterationBytes is the least memory traffic one unpreconditioned CG
// iteration on a CSR matrix must move, counting each array read or written
// once per sweep (the STREAM convention, which also counts the triad as 24
// bytes per element):
//
//	q = A·p, pᵀq     values 8·nnz, column indices 4·nnz, row pointers 8·(n+1),
//	                 read p 8·n (each entry once: the stencil's neighbours are
//	                 reused from cache), write q 8·n
//	r −= α·q, rᵀr    read r, q, write r: 24·n
//	x += α·p,        read x, p, r, write x, p: 40·n
//	p = r + β·p
//
// in all 12·nnz + 88·n + 8 bytes. The periodic true-residual refresh (one
// more product every 50 iterations) is left out: the benchmark's solves stop
// before the first one.
func cgIterationBytes(a *sparse.CSR) float64 {
	n := float64(a.Rows)
	return 12*float64(a.NNZ()) + 88*n + 8
}

// cgTimingRecorder notes when iterations first and last are recorded.
type cgTimingRecorder struct {
	first, last int
	t0, t1      time.Time
}

func (r *cgTimingRecorder) Record(p krylov.Progress) error {
	switch p.Iteration {
	case r.first:
		r.t0 = time.Now()
	case r.last:
		r.t1 = time.Now()
	}
	return nil
}

func (r *cgTimingRecorder) Finish(*krylov.Result) {}

// BenchmarkCGPoisson3D measures unpreconditioned CG iterations on the 7-point
// 3D Poisson matrix with 100³ and 200³ unknowns, as effective bandwidth: the
// least bytes an iteration must move (cgIterationBytes) over the time it
// takes, and that over the bandwidth of sparse.Triad measured in the same
// run on a working set of the same size (matrix plus five vectors), so that
// both sit in the same level of the memory hierarchy. Metrics:
//
//	iter-ms         wall time per iteration
//	cg-GB/s         cgIterationBytes / iteration time
//	triad-GB/s      24 bytes per element / triad time
//	cg/triad        their ratio (target ≥ 0.8)
//	allocs/iter     heap allocations per iteration: a 3-iteration solve's
//	                minus a 1-iteration solve's (testing.AllocsPerRun), over 2
//
// The allocations per op (ReportAllocs) are those of one solve's workspace,
// made once before the loop.
//
// Run: go test ./krylov/ -run '^$' -bench CGPoisson3D -benchtime 3x
func BenchmarkCGPoisson3D(b *testing.B) {
	for _, c := range []struct{ side, iters int }{{100, 60}, {200, 20}} {
		b.Run(fmt.Sprintf("n=%d^3", c.side), func(b *testing.B) {
			a := stencil.Poisson3D(c.side)
			n := a.Rows
			rhs := make([]float64, n)
			a.MulVec(rhs, cgOnes(n))
			x := make([]float64, n)
			bytesPerIter := cgIterationBytes(a)

			// The triad's three vectors hold as many bytes as CG's working set:
			// the matrix plus b, x, r, p, q.
			working := float64(12*a.NNZ()+8*(n+1)) + 5*8*float64(n)
			tn := int(working / 24)
			ta, tb, tc := make([]float64, tn), cgOnes(tn), cgOnes(tn)
			sparse.Triad(ta, tb, tc, 0.5) // touch the pages before timing

			solve := func(iters int, rec krylov.Recorder) {
				res, err := krylov.CG(context.Background(), a, rhs, x, nil, krylov.Settings{MaxIter: iters, Recorder: rec})
				if err != nil || res.Iterations != iters {
					b.Fatalf("%v after %d iterations: %v", res.Status, res.Iterations, err)
				}
			}
			perIter := (testing.AllocsPerRun(1, func() { solve(3, nil) }) - testing.AllocsPerRun(1, func() { solve(1, nil) })) / 2

			rec := &cgTimingRecorder{first: 1, last: c.iters}
			var cgTime, triadTime time.Duration
			var triadCalls int
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				// Interleave the reference with the solve, so both see the
				// same machine (it is shared and noisy).
				t := time.Now()
				for range 5 {
					sparse.Triad(ta, tb, tc, 0.5)
				}
				triadTime += time.Since(t)
				triadCalls += 5

				solve(c.iters, rec)
				cgTime += rec.t1.Sub(rec.t0)
			}
			b.StopTimer()
			timed := float64(b.N * (c.iters - rec.first))
			iterSec := cgTime.Seconds() / timed
			cgBW := bytesPerIter / iterSec
			triadBW := 24 * float64(tn) * float64(triadCalls) / triadTime.Seconds()
			b.ReportMetric(iterSec*1e3, "iter-ms")
			b.ReportMetric(cgBW/1e9, "cg-GB/s")
			b.ReportMetric(triadBW/1e9, "triad-GB/s")
			b.ReportMetric(cgBW/triadBW, "cg/triad")
			b.ReportMetric(perIter, "allocs/iter")
		})
	}
}
