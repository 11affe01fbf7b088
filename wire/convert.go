package wire

import (
	"math"
	"strings"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond/amg"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

// Result converts a summary to the wire's result message. The fields that
// only a front end knows (where b came from, read and upload times, the
// server and job, files written, the error against a known solution) are
// not carried.
func Result(s *solve.Summary) *pb.SolveResult {
	r := &pb.SolveResult{
		Rhs: int32(s.RHSIndex), Converged: s.Converged, Status: s.Status, Headline: s.Headline,
		Method: s.Method, Iterations: int64(s.Iterations),
		RelativeResidual: float64(s.RelativeResidual), ResidualNorm: f64(s.ResidualNorm),
		TrueResidualNorm: float64(s.TrueResidualNorm), RhsNorm: float64(s.RHSNorm),
		RecursiveResidualNorm: f64(s.RecursiveResidualNorm), RecursiveRelativeResidual: f64(s.RecursiveRelativeResidual),
		Preconditioner: s.Preconditioner, PreconditionerReason: s.PreconditionerReason,
		Shift: f64(s.Shift), ShiftTries: int32(s.ShiftTries), PreconditionerBytes: s.PreconditionerBytes,
		SetupSeconds: float64(s.SetupSeconds), SolveSeconds: float64(s.SolveSeconds), PerIterationSeconds: float64(s.SecondsPerIteration),
		LambdaMin: f64(s.LambdaMin), LambdaMax: f64(s.LambdaMax), Cond: float64(s.CondEstimate),
		Settings: &pb.Settings{
			Rtol: f64(s.RelTol), Atol: float64(s.AbsTol), MaxIter: int64(s.MaxIter),
			TimeLimitSeconds: float64(s.TimeLimitSeconds), RefreshEvery: int32(s.RefreshEvery),
			Btol: f64(s.BTol), Damp: f64(s.Damp),
		},
		FromCache: s.FromCache != nil && *s.FromCache, Error: s.Error,
		NormalResidualNorm: f64(s.NormalResidualNorm), XNorm: f64(s.XNorm), ANormEstimate: f64(s.NormEstimate),
		StoppedBy:            s.StoppedBy,
		ForwardErrorEstimate: f64(s.ForwardErrorEstimate), ForwardErrorNote: s.ForwardErrorNote,
		Warning: s.Warning, WarningText: s.WarningText, Advice: s.Advice,
		Matrix: s.Matrix, MatrixId: s.MatrixID, Rows: int64(s.Rows), Cols: int64(s.Cols), Nonzeros: int64(s.Nonzeros),
		MethodReason: s.MethodReason,
		Operator:     s.Operator, WeightRatio: f64(s.WeightRatio), Regularization: f64(s.Regularization),
		Multigrid: multigridMessage(s.Multigrid),
	}
	for _, c := range s.ZeroColumns {
		r.ZeroColumns = append(r.ZeroColumns, int64(c))
	}
	if s.ResumedFrom != nil {
		it := int32(*s.ResumedFrom)
		r.ResumedFromIteration = &it
	}
	return r
}

// Summary converts the wire's result message back to a summary; the
// preconditioner_from_cache key is set (a remote solve knows it).
func Summary(r *pb.SolveResult) solve.Summary {
	st := r.GetSettings()
	if st == nil {
		st = &pb.Settings{}
	}
	cached := r.GetFromCache()
	s := solve.Summary{
		RHSIndex: int(r.GetRhs()), Converged: r.GetConverged(), Status: r.GetStatus(), Headline: r.GetHeadline(),
		Method: r.GetMethod(), Iterations: int(r.GetIterations()),
		RelativeResidual: solve.Num(r.GetRelativeResidual()), ResidualNorm: num(r.ResidualNorm),
		TrueResidualNorm: solve.Num(r.GetTrueResidualNorm()), RHSNorm: solve.Num(r.GetRhsNorm()),
		RecursiveResidualNorm: num(r.RecursiveResidualNorm), RecursiveRelativeResidual: num(r.RecursiveRelativeResidual),
		Preconditioner: r.GetPreconditioner(), PreconditionerReason: r.GetPreconditionerReason(),
		Shift: num(r.Shift), ShiftTries: int(r.GetShiftTries()), PreconditionerBytes: r.PreconditionerBytes,
		SetupSeconds: solve.Num(r.GetSetupSeconds()), SolveSeconds: solve.Num(r.GetSolveSeconds()),
		SecondsPerIteration: solve.Num(r.GetPerIterationSeconds()),
		LambdaMin:           num(r.LambdaMin), LambdaMax: num(r.LambdaMax), CondEstimate: solve.Num(r.GetCond()),
		RelTol: num(st.Rtol), AbsTol: solve.Num(st.GetAtol()), MaxIter: int(st.GetMaxIter()),
		TimeLimitSeconds: solve.Num(st.GetTimeLimitSeconds()), RefreshEvery: int(st.GetRefreshEvery()),
		BTol: num(st.Btol), Damp: num(st.Damp),
		FromCache: &cached, Error: r.GetError(),
		NormalResidualNorm: num(r.NormalResidualNorm), XNorm: num(r.XNorm), NormEstimate: num(r.ANormEstimate),
		StoppedBy:            r.GetStoppedBy(),
		ForwardErrorEstimate: num(r.ForwardErrorEstimate), ForwardErrorNote: r.GetForwardErrorNote(),
		Warning: r.GetWarning(), WarningText: r.GetWarningText(), Advice: r.GetAdvice(),
		Matrix: r.GetMatrix(), MatrixID: r.GetMatrixId(), Rows: int(r.GetRows()), Cols: int(r.GetCols()), Nonzeros: int(r.GetNonzeros()),
		MethodReason: r.GetMethodReason(),
		Operator:     r.GetOperator(), WeightRatio: num(r.WeightRatio), Regularization: num(r.Regularization),
		Multigrid: multigridReport(r.GetMultigrid()),
	}
	for _, c := range r.GetZeroColumns() {
		s.ZeroColumns = append(s.ZeroColumns, int(c))
	}
	if r.ResumedFromIteration != nil {
		it := int(r.GetResumedFromIteration())
		s.ResumedFrom = &it
	}
	return s
}

func f64(v *solve.Num) *float64 {
	if v == nil {
		return nil
	}
	f := float64(*v)
	return &f
}

func num(v *float64) *solve.Num {
	if v == nil {
		return nil
	}
	return solve.NumPtr(*v)
}

// Progress converts one history row of right-hand side rhs to the wire.
func Progress(rhs int, p krylov.Progress) *pb.Progress {
	return &pb.Progress{
		Rhs: int32(rhs), Iteration: int64(p.Iteration), ElapsedSeconds: p.Elapsed.Seconds(),
		ResidualNorm: p.ResidualNorm, RelativeResidual: p.RelResidual, NormalResidualNorm: p.NormalResidualNorm,
	}
}

// Row converts a wire progress row back. The elapsed time is rounded to
// the nanosecond, which undoes Duration.Seconds exactly below 2⁵³ ns.
func Row(p *pb.Progress) krylov.Progress {
	return krylov.Progress{
		Iteration: int(p.GetIteration()), Elapsed: time.Duration(math.Round(p.GetElapsedSeconds() * 1e9)),
		ResidualNorm: p.GetResidualNorm(), RelResidual: p.GetRelativeResidual(), NormalResidualNorm: p.GetNormalResidualNorm(),
	}
}

// FillRequest sets the solve settings of a wire request from r: method,
// preconditioner, tolerances, limits. The rest (the matrix, the vectors,
// the progress policy, detach) is the caller's.
func FillRequest(dst *pb.SolveRequest, r solve.Request) {
	dst.LeastSquares = r.LeastSquares
	dst.Method = string(r.MethodAsked())
	dst.Preconditioner = r.Preconditioner
	dst.Rtol, dst.Btol, dst.Damp = r.RelTol, r.BTol, r.Damp
	dst.Atol = r.AbsTol
	if r.LeastSquares {
		dst.Atol = r.ATol
	}
	dst.MaxIter = int64(r.MaxIter)
	dst.RefreshEvery = int32(r.RefreshEvery)
	dst.TimeLimit = nil
	if r.TimeLimit > 0 {
		dst.TimeLimit = durationpb.New(r.TimeLimit)
	}
	dst.Amg = nil
	if o := r.AMG; o.Theta != 0 || o.Smoother != "" || o.Degree != 0 || o.BlockSize != 0 {
		dst.Amg = &pb.AMGOptions{Theta: o.Theta, Smoother: o.Smoother, Degree: int32(o.Degree), BlockSize: int32(o.BlockSize)}
	}
}

// Request reads the solve settings of a wire request, unvalidated (call
// solve.Request.Validate). A malformed duration is an error naming the
// field.
func Request(req *pb.SolveRequest) (solve.Request, error) {
	m, err := solve.ParseMethod(req.GetMethod())
	if err != nil {
		return solve.Request{}, &solve.FieldError{Field: "method", Err: err}
	}
	r := solve.Request{
		LeastSquares: req.GetLeastSquares() || m.LeastSquares(), Method: m, Preconditioner: req.GetPreconditioner(),
		RelTol: req.GetRtol(), BTol: req.GetBtol(), Damp: req.GetDamp(),
		MaxIter: int(req.GetMaxIter()), RefreshEvery: int(req.GetRefreshEvery()),
	}
	if r.LeastSquares {
		r.ATol = req.GetAtol()
	} else {
		r.AbsTol = req.GetAtol()
	}
	if d := req.GetTimeLimit(); d != nil {
		if err := d.CheckValid(); err != nil {
			return r, &solve.FieldError{Field: "time_limit", Err: err}
		}
		r.TimeLimit = d.AsDuration()
	}
	if o := req.GetAmg(); o != nil {
		r.AMG = solve.AMGOptions{Theta: o.GetTheta(), Smoother: o.GetSmoother(), Degree: int(o.GetDegree()), BlockSize: int(o.GetBlockSize())}
	}
	return r, nil
}

// multigridMessage converts an AMG set-up report to the wire's (nil for
// none).
func multigridMessage(m *amg.Report) *pb.MultigridReport {
	if m == nil {
		return nil
	}
	r := &pb.MultigridReport{
		Smoother: string(m.Smoother), Degree: int32(m.Degree), Theta: m.Theta, NearNullVectors: int32(m.K),
		Coarsest: m.Coarsest, OperatorComplexity: m.OperatorComplexity, GridComplexity: m.GridComplexity,
		SetupSeconds: m.SetupSeconds, SetupSpmvs: m.SetupSpMVs, ApplySpmvs: m.ApplySpMVs, Bytes: m.Bytes,
	}
	for _, l := range m.Levels {
		r.Levels = append(r.Levels, &pb.MultigridLevel{Rows: int64(l.Rows), Nnz: int64(l.NNZ), Theta: l.Theta, Omega: l.Omega, LambdaMax: l.LambdaMax})
	}
	return r
}

// multigridReport converts the wire's multigrid report back (nil for
// none).
func multigridReport(r *pb.MultigridReport) *amg.Report {
	if r == nil {
		return nil
	}
	m := &amg.Report{
		Smoother: amg.Smoother(r.GetSmoother()), Degree: int(r.GetDegree()), Theta: r.GetTheta(), K: int(r.GetNearNullVectors()),
		Coarsest: r.GetCoarsest(), OperatorComplexity: r.GetOperatorComplexity(), GridComplexity: r.GetGridComplexity(),
		SetupSeconds: r.GetSetupSeconds(), SetupSpMVs: r.GetSetupSpmvs(), ApplySpMVs: r.GetApplySpmvs(), Bytes: r.GetBytes(),
	}
	for _, l := range r.GetLevels() {
		m.Levels = append(m.Levels, amg.Level{Rows: int(l.GetRows()), NNZ: int(l.GetNnz()), Theta: l.GetTheta(), Omega: l.GetOmega(), LambdaMax: l.GetLambdaMax()})
	}
	return m
}

// State returns the word for a job state ("queued", "running", "done").
func State(s pb.JobState) solve.State {
	switch s {
	case pb.JobState_QUEUED:
		return solve.Queued
	case pb.JobState_RUNNING:
		return solve.Running
	case pb.JobState_DONE:
		return solve.Done
	}
	return solve.State(strings.ToLower(s.String()))
}
