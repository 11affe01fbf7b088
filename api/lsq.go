package api

import (
	"fmt"
	"time"

	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
)

// runLSQ is runJob for a least-squares job: LSQR or CGLS on each
// right-hand side, with the column scaling of the request. There is no
// set-up to cache: the scaling costs one sweep over A per solve.
func (s *Server) runLSQ(j *job, p *jobParams) (pb.JobState, error) {
	a := p.m.a
	scaling, reason := p.lsqSet.Scaling, "as requested"
	if scaling == krylov.ScaleAuto {
		// krylov's rule for ScaleAuto with an operator that has column
		// norms (ours does): scale when m ≥ n.
		if a.Rows >= a.Cols {
			scaling, reason = krylov.ScaleColumns, fmt.Sprintf("auto: %d rows ≥ %d columns", a.Rows, a.Cols)
		} else {
			scaling, reason = krylov.ScaleNone, fmt.Sprintf("auto: %d rows < %d columns (the minimum-norm solution needs the unscaled iteration)", a.Rows, a.Cols)
		}
	}
	set := p.lsqSet
	set.Scaling = scaling
	j.mu.Lock()
	j.chosen = scaling.String()
	j.mu.Unlock()
	j.publish(&pb.JobEvent{Event: &pb.JobEvent_Accepted{Accepted: &pb.Accepted{
		MatrixId: p.matrixID, Method: p.method, Preconditioner: scaling.String(),
		PreconditionerReason: scaling.String() + ": " + reason, RhsCount: int32(len(p.rhs)),
		Detached: j.info.GetDetached(),
	}}})
	s.log.Info("job start", "job", j.id, "matrix", p.matrixID, "rows", a.Rows, "cols", a.Cols, "nonzeros", a.NNZ(),
		"rhs", len(p.rhs), "method", p.method, "scaling", scaling.String(), "queued_for", time.Since(j.created).String())
	for i, b := range p.rhs {
		x := make([]float64, a.Cols)
		si := set
		si.X0 = p.x0[i]
		rec := &progressRecorder{s: s, j: j, rhs: i, every: p.every, interval: p.interval}
		si.Recorder = rec
		res, lsqErr := krylov.LSQ(j.ctx, a, b, x, si)
		rec.flush()
		j.deliver(i, x, lsqResultMessage(i, &res, reason, lsqErr))
		s.log.Info("solve", "job", j.id, "rhs", i, "status", res.Status.String(), "iterations", res.Iterations,
			"residual_norm", res.ResidualNorm, "normal_residual_norm", res.LSQ.NormalResidualNorm, "solve", res.Solve.String())
		if state, stop, err := j.stopAfter(res.Status, lsqErr); stop {
			return state, err
		}
	}
	return pb.JobState_FINISHED, nil
}

// lsqResultMessage converts a least-squares result to the wire form.
func lsqResultMessage(rhs int, r *krylov.Result, reason string, err error) *pb.SolveResult {
	l := r.LSQ
	out := &pb.SolveResult{
		Rhs: int32(rhs), Converged: r.Status == krylov.Converged, Status: r.Status.String(),
		Method: r.Method, Iterations: int64(r.Iterations), RelativeResidual: r.RelResidual,
		ResidualNorm: r.ResidualNorm, TrueResidualNorm: r.ResidualNorm, RhsNorm: r.RHSNorm,
		Preconditioner: l.Scaling, PreconditionerReason: l.Scaling + ": " + reason,
		SolveSeconds: r.Solve.Seconds(), PerIterationSeconds: r.PerIteration.Seconds(),
		Cond: l.CondEstimate,
		Settings: &pb.Settings{
			Atol: l.Settings.ATol, Btol: l.Settings.BTol, Damp: l.Settings.Damp, MaxIter: int64(l.Settings.MaxIter),
			TimeLimitSeconds: l.Settings.TimeLimit.Seconds(),
		},
		NormalResidualNorm: l.NormalResidualNorm, XNorm: l.XNorm, ANormEstimate: l.ANormEstimate,
		StoppedBy: l.StoppedBy,
	}
	for _, c := range l.ZeroColumns {
		out.ZeroColumns = append(out.ZeroColumns, int64(c))
	}
	if err != nil && r.Status != krylov.Cancelled {
		out.Error = err.Error()
	}
	return out
}
