package wire

import (
	"time"

	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

// Job is how residua describes a job in JSON, with the same keys wherever
// it does (the CLI's jobs --json, the watch page's /api/jobs): the job as
// the server's Job message has it, in the state and outcome words of
// package solve. A figure that does not exist yet is null.
type Job struct {
	ID    string `json:"id"`
	Label string `json:"label,omitempty"`
	// State is queued, running or done; Outcome, once done, how it ended.
	State   string `json:"state"`
	Outcome string `json:"outcome,omitempty"`
	// Matrix is the name given at upload (its id when none was).
	Matrix         string `json:"matrix"`
	MatrixID       string `json:"matrix_id"`
	Rows           int64  `json:"rows"`
	Cols           int64  `json:"cols"`
	Nonzeros       int64  `json:"nonzeros"`
	Method         string `json:"method"`
	Preconditioner string `json:"preconditioner"`
	RHSCount       int32  `json:"rhs_count"`
	RHSDone        int32  `json:"rhs_done"`
	// RHS, Iteration, RelResidual and NormalResidual (‖Aᵀr‖, least
	// squares only) are the latest known: of the last finished
	// right-hand side's result, or of the latest progress.
	RHS            int32      `json:"rhs"`
	Iteration      int64      `json:"iteration"`
	RelResidual    *solve.Num `json:"relative_residual"`
	NormalResidual *solve.Num `json:"normal_residual_norm"`
	// Tolerance is the relative tolerance of a system's solve (0 for
	// least squares).
	Tolerance float64 `json:"tolerance"`
	// ElapsedSeconds runs from the start of the job's solve to its end
	// (or to now while it runs); zero while queued.
	ElapsedSeconds float64 `json:"elapsed_seconds"`
	Detached       bool    `json:"detached"`
	SolutionKept   bool    `json:"solution_kept"`
	Error          string  `json:"error,omitempty"`
	CreatedUnix    float64 `json:"created_unix"`
	StartedUnix    float64 `json:"started_unix"`
	FinishedUnix   float64 `json:"finished_unix"`
}

// JobRecord describes j as of now.
func JobRecord(j *pb.Job, now time.Time) Job {
	v := Job{
		ID: j.GetId(), Label: j.GetLabel(), State: string(State(j.GetState())), Outcome: j.GetOutcome(),
		Matrix: j.GetMatrixName(), MatrixID: j.GetMatrixId(), Rows: j.GetRows(), Cols: j.GetCols(), Nonzeros: j.GetNonzeros(),
		Method: j.GetMethod(), Preconditioner: j.GetPreconditioner(), RHSCount: j.GetRhsCount(), RHSDone: j.GetRhsDone(),
		Tolerance: j.GetRtol(), Detached: j.GetDetached(), SolutionKept: j.GetSolutionKept(), Error: j.GetError(),
		CreatedUnix: j.GetCreatedUnix(), StartedUnix: j.GetStartedUnix(), FinishedUnix: j.GetFinishedUnix(),
	}
	if v.Preconditioner == "" {
		v.Preconditioner = j.GetPreconditionerRequested()
	}
	if v.Matrix == "" {
		v.Matrix = v.MatrixID
	}
	leastSquares := solve.Method(v.Method).LeastSquares()
	if lp := j.GetLastProgress(); lp != nil {
		v.RHS, v.Iteration, v.RelResidual = lp.GetRhs(), lp.GetIteration(), solve.NumPtr(lp.GetRelativeResidual())
		if leastSquares {
			v.NormalResidual = solve.NumPtr(lp.GetNormalResidualNorm())
		}
	}
	// A finished right-hand side's figures are final: the last progress
	// event sent may lag behind them.
	if rs := j.GetResults(); len(rs) > 0 && rs[len(rs)-1].GetRhs() >= v.RHS {
		r := rs[len(rs)-1]
		v.RHS, v.Iteration, v.RelResidual = r.GetRhs(), r.GetIterations(), solve.NumPtr(r.GetRelativeResidual())
		if leastSquares && r.NormalResidualNorm != nil {
			v.NormalResidual = solve.NumPtr(r.GetNormalResidualNorm())
		}
	}
	switch {
	case v.StartedUnix == 0:
	case v.FinishedUnix != 0:
		v.ElapsedSeconds = v.FinishedUnix - v.StartedUnix
	default:
		v.ElapsedSeconds = max(0, float64(now.UnixNano())/1e9-v.StartedUnix)
	}
	return v
}
