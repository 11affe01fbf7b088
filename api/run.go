package api

import (
	"context"
	"errors"
	"time"

	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

// runJob is the body of a job's goroutine once it has a solve slot: the
// set-up (from the cache or built), then the method on each right-hand
// side, through the solve layer, exactly as a local solve runs it.
func (s *Server) runJob(j *job, p *jobParams) (outcome solve.Outcome, err error) {
	start := time.Now()
	defer func() {
		p.release()
		// The work vectors are gone; the solutions stay accounted while
		// kept (or until the attached stream has sent them).
		s.store.shrink(j.mem, 8*int64(p.solutionLen())*int64(len(p.rhs)))
		j.runnerPin.Release()
		attrs := []any{"job", j.id, "matrix", p.matrixID, "state", string(solve.Done), "outcome", string(outcome),
			"duration", time.Since(start).String()}
		if err != nil {
			attrs = append(attrs, "error", err.Error())
		}
		s.log.Info("job end", attrs...)
	}()
	setup, pn, fromCache, err := s.prepare(j.ctx, p)
	if err != nil {
		if j.ctx.Err() != nil {
			return solve.Cancelled, context.Cause(j.ctx)
		}
		// The job's one result says what failed, in the summary's words.
		sum := solve.Failure(p.m.solveMatrix(), p.req, err)
		sum.MatrixID = p.matrixID
		j.mu.Lock()
		j.chosen = sum.Preconditioner
		j.mu.Unlock()
		j.deliver(0, nil, wire.Result(&sum))
		return solve.Outcome(sum.Status), err
	}
	defer pn.Release()
	base := setup.Summary()
	j.mu.Lock()
	j.chosen = base.Preconditioner
	j.mu.Unlock()
	acc := &pb.Accepted{
		MatrixId: p.matrixID, Method: base.Method, Preconditioner: base.Preconditioner,
		PreconditionerReason: base.PreconditionerReason, FromCache: fromCache,
		SetupSeconds: float64(base.SetupSeconds), PreconditionerBytes: setup.Bytes(),
		RhsCount: int32(len(p.rhs)), Detached: j.info.GetDetached(),
		MaxIterCeiling: int64(s.cfg.MaxJobIterations), TimeCeilingSeconds: s.cfg.MaxJobTime.Seconds(),
	}
	if c := setup.Choice; c != nil {
		acc.Shift, acc.Tries = c.Shift, int32(c.Tries)
	}
	j.publish(&pb.JobEvent{Event: &pb.JobEvent_Accepted{Accepted: acc}})
	s.log.Info("job start", "job", j.id, "matrix", p.matrixID, "rows", p.m.a.Rows, "cols", p.m.a.Cols, "nonzeros", p.m.a.NNZ(),
		"rhs", len(p.rhs), "method", base.Method, "preconditioner", base.Preconditioner, "reason", base.PreconditionerReason,
		"from_cache", fromCache, "setup", time.Duration(float64(base.SetupSeconds)*1e9).String(), "queued_for", start.Sub(j.created).String())

	// The set-up may come from the cache, built for another request: this
	// job's own settings go with it, under the server's ceilings.
	run := *setup
	run.Request = p.req
	run.Request.MaxIter = s.capIterations(p.req, p.m.a.Rows, p.m.a.Cols)
	iterating := time.Now()
	if len(p.rhs) > 1 && !p.req.LeastSquares && p.weights == nil && len(p.done) == 0 && s.data == nil {
		// One block product per iteration for all the right-hand sides;
		// with a data folder the columns run one at a time, since only a
		// single solve can checkpoint. The job's time ceiling bounds the
		// block as a whole.
		run.Request.TimeLimit = s.cfg.MaxJobTime
		if t := p.req.TimeLimit; t > 0 && t < s.cfg.MaxJobTime {
			run.Request.TimeLimit = t
		}
		return s.runBlock(j, p, &run, fromCache)
	}
	outcomes := make([]solve.Outcome, 0, len(p.rhs))
	for i, b := range p.rhs {
		if i < len(p.done) {
			// Solved before a restart (jobstore.go).
			s.restoreRHS(j, i, p.done[i])
			outcomes = append(outcomes, solve.Outcome(p.done[i].GetStatus()))
			continue
		}
		x := make([]float64, p.solutionLen())
		rec := &progressRecorder{s: s, j: j, log: j.logs[i], rhs: i, every: p.every, interval: p.interval}
		// What remains of the job's time ceiling (at least a nanosecond:
		// zero would mean no limit) bounds this right-hand side's.
		left := max(s.cfg.MaxJobTime-time.Since(iterating), time.Nanosecond)
		run.Request.TimeLimit = left
		if t := p.req.TimeLimit; t > 0 && t < left {
			run.Request.TimeLimit = t
		}
		sum, solveErr := run.SolveDurable(j.ctx, b, p.x0[i], x, rec, s.durable(j, p, i, b))
		sum.RHSIndex, sum.MatrixID, sum.FromCache = i, p.matrixID, &fromCache
		if solve.Outcome(sum.Status) != solve.TimeLimit {
			// The job's ceiling did not bind: the summary states the time
			// limit the request set (0: none), as a local solve's does;
			// the ceiling itself is in the accepted event.
			sum.TimeLimitSeconds = solve.Seconds(p.req.TimeLimit)
		}
		out := wire.Result(&sum)
		j.deliver(i, x, out)
		if solve.Outcome(sum.Status) != solve.Cancelled {
			s.persistResult(j, i, x, out)
		}
		if s.obs != nil {
			s.obs.IterationsDone(sum.Iterations)
		}
		s.log.Info("solve", "job", j.id, "rhs", i, "outcome", sum.Status, "iterations", sum.Iterations,
			"relative_residual", float64(sum.RelativeResidual), "solve", time.Duration(float64(sum.SolveSeconds)*1e9).String())
		o := solve.Outcome(sum.Status)
		switch {
		case o == solve.Cancelled:
			if cause := context.Cause(j.ctx); cause != nil {
				return o, cause
			}
			if solveErr == nil {
				solveErr = context.Canceled
			}
			return o, solveErr
		case solveErr != nil:
			return o, solveErr
		}
		outcomes = append(outcomes, o)
	}
	return solve.JobOutcome(outcomes, ""), nil
}

// capIterations returns the iteration cap of a right-hand side: the
// request's max_iter, or the method's default when it is 0, lowered to the
// server's ceiling. The defaults are krylov's (Settings.MaxIter, 10·n for
// conjugate gradients; LSQSettings.MaxIter, 10·min(m, n) undamped and 10·n
// damped for least squares); 0 is returned when the default stands.
func (s *Server) capIterations(r solve.Request, rows, cols int) int {
	ceiling := s.cfg.MaxJobIterations
	if r.MaxIter > 0 {
		return min(r.MaxIter, ceiling)
	}
	def := 10 * rows
	if r.LeastSquares {
		def = 10 * cols
		if r.Damp == 0 {
			def = 10 * min(rows, cols)
		}
	}
	if max(def, 1) > ceiling {
		return ceiling
	}
	return 0
}

// runBlock solves a job's several right-hand sides of a system as one block
// (solve.SolveBlock: one product with the matrix per iteration for up to 16
// of them), each with its own progress, history and result, and delivers
// the results in order once the block is done. The job's outcome is the
// first right-hand side's, in order, that was cancelled or failed, or
// solve.JobOutcome of them all.
func (s *Server) runBlock(j *job, p *jobParams, setup *solve.Setup, fromCache bool) (solve.Outcome, error) {
	k := len(p.rhs)
	xs := make([][]float64, k)
	recs := make([]krylov.Recorder, k)
	for i := range xs {
		xs[i] = make([]float64, p.m.a.Cols)
		recs[i] = &progressRecorder{s: s, j: j, log: j.logs[i], rhs: i, every: p.every, interval: p.interval}
	}
	sums, err := setup.SolveBlock(j.ctx, p.rhs, p.x0, xs, recs)
	var be *krylov.BlockError
	errors.As(err, &be)
	outcomes := make([]solve.Outcome, 0, k)
	var stop solve.Outcome
	var stopErr error
	for i := range sums {
		sum := &sums[i]
		sum.MatrixID, sum.FromCache = p.matrixID, &fromCache
		if solve.Outcome(sum.Status) != solve.TimeLimit {
			sum.TimeLimitSeconds = solve.Seconds(p.req.TimeLimit) // as in run: the ceiling did not bind
		}
		j.deliver(i, xs[i], wire.Result(sum))
		if s.obs != nil {
			s.obs.IterationsDone(sum.Iterations)
		}
		s.log.Info("solve", "job", j.id, "rhs", i, "outcome", sum.Status, "iterations", sum.Iterations,
			"relative_residual", float64(sum.RelativeResidual), "solve", time.Duration(float64(sum.SolveSeconds)*1e9).String())
		o := solve.Outcome(sum.Status)
		outcomes = append(outcomes, o)
		var colErr error
		if be != nil {
			colErr = be.Errs[i]
		}
		if stop != "" {
			continue
		}
		switch {
		case o == solve.Cancelled:
			stop, stopErr = o, colErr
			if cause := context.Cause(j.ctx); cause != nil {
				stopErr = cause
			}
			if stopErr == nil {
				stopErr = context.Canceled
			}
		case colErr != nil:
			stop, stopErr = o, colErr
		}
	}
	if stop != "" {
		return stop, stopErr
	}
	return solve.JobOutcome(outcomes, ""), nil
}
