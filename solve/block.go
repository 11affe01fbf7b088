package solve

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/sparse"
)

// BlockWorkVectors returns how many vectors of the matrix's order the
// method's workspace holds when SolveBlock solves nrhs right-hand sides of
// a request (leastSquares: the least-squares methods, which solve one after
// another): for a system, six per column of the widest block (B, X, R, P,
// A·P and the preconditioned residual; blocks are at most sparse.MaxWidth
// wide) and two for column work; for least squares, the five of one solve.
// A server charges them against its memory budget.
func BlockWorkVectors(nrhs int, leastSquares bool) int {
	if leastSquares || nrhs <= 1 {
		return 5
	}
	return 6*min(nrhs, sparse.MaxWidth) + 2
}

// SolveBlock solves the system for several right-hand sides at once:
// conjugate gradients on the block of them (krylov.CGBlock), which reads
// the matrix once per iteration for up to sparse.MaxWidth right-hand sides.
// Right-hand side i starts from x0s[i] (nil, or a nil entry: zero), writes
// xs[i] and reports to recs[i] (nil, or a nil entry: nothing), and gets its
// own summary, with RHSIndex i, bitwise the one Solve would give it apart
// from the timings (krylov.CGBlock takes each right-hand side through CG's
// own steps); the iteration times are the block's. Least squares solves one
// right-hand side after the other with Solve. The error is nil when no
// right-hand side's method returned one, and otherwise names the first
// (a *krylov.BlockError for a system); each summary states its own. It panics on vectors of the wrong length or slices of different
// lengths.
func (s *Setup) SolveBlock(ctx context.Context, bs, x0s, xs [][]float64, recs []krylov.Recorder) ([]Summary, error) {
	k := len(bs)
	if len(xs) != k || (x0s != nil && len(x0s) != k) || (recs != nil && len(recs) != k) {
		panic(fmt.Sprintf("solve: SolveBlock: %d right-hand sides, %d solutions, %d starts, %d recorders", k, len(xs), len(x0s), len(recs)))
	}
	x0 := func(i int) []float64 {
		if x0s == nil {
			return nil
		}
		return x0s[i]
	}
	rec := func(i int) krylov.Recorder {
		if recs == nil {
			return nil
		}
		return recs[i]
	}
	sums := make([]Summary, k)
	if s.Request.LeastSquares || k == 1 {
		var first error
		for i := range bs {
			sum, err := s.Solve(ctx, bs[i], x0(i), xs[i], rec(i))
			sum.RHSIndex = i
			sums[i] = sum
			if err != nil && first == nil {
				first = fmt.Errorf("right-hand side %d: %w", i, err)
			}
		}
		return sums, first
	}
	req := s.Request
	var m krylov.Preconditioner
	if s.Choice.M != nil {
		m = s.Choice.M
	}
	ss := make([]krylov.Settings, k)
	for i := range ss {
		ss[i] = krylov.Settings{
			RelTol: req.RelTol, AbsTol: req.AbsTol, MaxIter: req.MaxIter, TimeLimit: req.TimeLimit,
			RefreshEvery: req.RefreshEvery, X0: x0(i), Recorder: rec(i),
		}
	}
	results, err := krylov.CGBlock(ctx, s.Matrix.A, bs, xs, m, ss)
	var be *krylov.BlockError
	errors.As(err, &be)
	for i := range results {
		sums[i] = s.Summary()
		var colErr error
		if be != nil {
			colErr = be.Errs[i]
		}
		fill(&sums[i], &results[i], colErr, s.zeroDiag)
		sums[i].RHSIndex = i
	}
	return sums, err
}

// RunBlock is Prepare followed by Setup.SolveBlock: the one call of a front
// end that solves several right-hand sides of one matrix. When the set-up
// fails, every summary is Failure's (with its RHSIndex) and xs are left as
// they were. The summaries' SetupSeconds include the set-up.
func RunBlock(ctx context.Context, m Matrix, req Request, bs, x0s, xs [][]float64, recs []krylov.Recorder) ([]Summary, *Setup, error) {
	start := time.Now()
	s, err := Prepare(m, req)
	if err != nil {
		sums := make([]Summary, len(bs))
		for i := range sums {
			sums[i] = Failure(m, req, err)
			sums[i].RHSIndex = i
			sums[i].SetupSeconds = Seconds(time.Since(start))
		}
		return sums, nil, err
	}
	sums, err := s.SolveBlock(ctx, bs, x0s, xs, recs)
	return sums, s, err
}
