package krylov_test

import (
	"context"
	"fmt"
	"slices"
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

// cgTimingRecorder keeps the wall time of every iteration after the first,
// the interval between consecutive Record calls, in a slice allocated
// beforehand. The first interval is left out: it lacks the x and p update,
// which CG does after recording an iteration, so each later interval holds
// exactly one iteration's work.
type cgTimingRecorder struct {
	last  time.Time
	times []time.Duration
}

func (r *cgTimingRecorder) Record(p krylov.Progress) error {
	now := time.Now()
	if p.Iteration > 1 {
		r.times = append(r.times, now.Sub(r.last))
	}
	r.last = now
	return nil
}

func (r *cgTimingRecorder) Finish(*krylov.Result) {}

// cgMinMedian returns the smallest and the median of d (sorted in place).
func cgMinMedian(d []time.Duration) (lo, med time.Duration) {
	slices.Sort(d)
	return d[0], d[len(d)/2]
}

// BenchmarkCGPoisson3D measures unpreconditioned CG iterations on the 7-point
// 3D Poisson matrix with 100³ and 200³ unknowns, as effective bandwidth: the
// least bytes an iteration must move (cgIterationBytes) over the time it
// takes, and that over the bandwidth of sparse.Triad measured in the same
// run, interleaved with the solves, on a working set of the same size
// (matrix plus five vectors), so that both sit in the same level of the
// memory hierarchy. The machine is shared, so every iteration and every
// triad call is timed on its own, and the ratio is formed from the best
// times (the runs least disturbed by other processes; common practice for
// noisy machines) and, as a second figure, from the medians. Metrics:
//
//	iter-ms          best wall time per iteration
//	cg-GB/s          cgIterationBytes / best iteration time
//	triad-GB/s       24 bytes per element / best triad time
//	cg/triad         their ratio (target ≥ 0.8)
//	cg/triad-median  the same ratio from the median times
//	allocs/iter      heap allocations per iteration: a 3-iteration solve's
//	                 minus a 1-iteration solve's (testing.AllocsPerRun), over 2
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

			rec := &cgTimingRecorder{times: make([]time.Duration, 0, b.N*c.iters)}
			triads := make([]time.Duration, 0, 5*b.N)
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				// Interleave the reference with the solves, so both see the
				// same machine.
				for range 5 {
					t := time.Now()
					sparse.Triad(ta, tb, tc, 0.5)
					triads = append(triads, time.Since(t))
				}
				solve(c.iters, rec)
			}
			b.StopTimer()
			iterBest, iterMed := cgMinMedian(rec.times)
			triadBest, triadMed := cgMinMedian(triads)
			triadBytes := 24 * float64(tn)
			b.ReportMetric(iterBest.Seconds()*1e3, "iter-ms")
			b.ReportMetric(bytesPerIter/iterBest.Seconds()/1e9, "cg-GB/s")
			b.ReportMetric(triadBytes/triadBest.Seconds()/1e9, "triad-GB/s")
			b.ReportMetric((bytesPerIter/iterBest.Seconds())/(triadBytes/triadBest.Seconds()), "cg/triad")
			b.ReportMetric((bytesPerIter/iterMed.Seconds())/(triadBytes/triadMed.Seconds()), "cg/triad-median")
			b.ReportMetric(perIter, "allocs/iter")
		})
	}
}
