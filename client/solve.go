package client

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"

	pb "github.com/residua/residua/proto/residua/v1"
)

// inlineBudget is how many bytes of vectors a solve request carries
// inline by default; longer vectors are uploaded first with UploadVector,
// so the request stays well under gRPC's 4 MiB message limit. maxInline
// bounds WithInlineVectorBytes.
const (
	inlineBudget = 2 << 20
	maxInline    = 3 << 20
)

// SolveRequest describes a remote solve. Zero fields take the server's
// defaults, which are the solver's.
type SolveRequest struct {
	// MatrixID is the id an upload returned.
	MatrixID string
	// B holds the right-hand sides, solved one after the other with the
	// same preconditioner.
	B [][]float64
	// X0 holds the starting guesses: none (zeros), one for all, or one per
	// right-hand side.
	X0 [][]float64
	// Method is "cg" (the default when empty) or, for least squares on any
	// A, "lsq", "lsqr" or "cgls".
	Method string
	// Precond is the preconditioner kind: "auto" (default), "none",
	// "jacobi", "ic0"; for least squares the column scaling: "auto",
	// "colscale", "none".
	Precond string
	// RTol and ATol: for CG, stop when ‖b − A·x‖₂ ≤ max(RTol·‖b‖₂, ATol).
	// For least squares RTol must be 0; ATol and BTol are the relative
	// tolerances of Paige and Saunders' stopping rules, and Damp is λ in
	// min ‖A·x − b‖² + λ²‖x‖².
	RTol, ATol float64
	BTol, Damp float64
	// MaxIter caps the iterations per right-hand side (0: 10·n).
	MaxIter int
	// TimeLimit is a time budget per right-hand side (0: none).
	TimeLimit time.Duration
	// RefreshEvery: how often the true residual replaces the recursive one
	// (0: the solver's default).
	RefreshEvery int
	// ProgressEvery and ProgressInterval: a progress event every k
	// iterations and/or every interval; both zero means the server's
	// default (every 200 ms).
	ProgressEvery    int
	ProgressInterval time.Duration
	// Detach lets the job outlive the call: Solve returns once the job is
	// queued, with only Outcome.JobID set.
	Detach bool
	// KeepSolution leaves the solutions on the server (for
	// DownloadSolution) instead of streaming them into Outcome.X.
	KeepSolution bool
	// Label is shown in job lists.
	Label string
}

// Event is one event of a job, as a Solve or Watch call delivers it to its
// callback. Exactly one of the pointer fields is set.
type Event struct {
	JobID    string
	Seq      uint64
	Queued   *pb.Queued
	Accepted *pb.Accepted
	Progress *pb.Progress
	Result   *pb.SolveResult
	Finished *pb.Finished
}

// Settings echo the settings a solve used, defaults filled in.
type Settings struct {
	RTol             float64 `json:"rtol"`
	ATol             float64 `json:"atol"`
	MaxIter          int64   `json:"max_iter"`
	TimeLimitSeconds float64 `json:"time_limit_seconds"`
	RefreshEvery     int     `json:"refresh_every"`
	BTol             float64 `json:"btol,omitempty"`
	Damp             float64 `json:"damp,omitempty"`
}

// Result is the outcome for one right-hand side, with the keys of the
// CLI's solve --json summary.
type Result struct {
	Converged            bool     `json:"converged"`
	Status               string   `json:"status"`
	Method               string   `json:"method"`
	Iterations           int64    `json:"iterations"`
	RelativeResidual     float64  `json:"relative_residual"`
	ResidualNorm         float64  `json:"residual_norm"`
	TrueResidualNorm     float64  `json:"true_residual_norm"`
	RHSNorm              float64  `json:"rhs_norm"`
	Preconditioner       string   `json:"preconditioner"`
	PreconditionerReason string   `json:"preconditioner_reason"`
	Shift                float64  `json:"shift"`
	SetupSeconds         float64  `json:"setup_seconds"`
	SolveSeconds         float64  `json:"solve_seconds"`
	PerIterationSeconds  float64  `json:"per_iteration_seconds"`
	LambdaMin            float64  `json:"lambda_min"`
	LambdaMax            float64  `json:"lambda_max"`
	Cond                 float64  `json:"cond"`
	Settings             Settings `json:"settings"`
	FromCache            bool     `json:"from_cache"`
	Error                string   `json:"error,omitempty"`
	// Least squares only: ‖Aᵀr − λ²x‖₂, ‖x‖₂, the estimate of ‖A‖, the
	// stopping rule met, and A's zero columns (0-based).
	NormalResidualNorm float64 `json:"normal_residual_norm,omitempty"`
	XNorm              float64 `json:"x_norm,omitempty"`
	NormEstimate       float64 `json:"norm_estimate,omitempty"`
	StoppedBy          string  `json:"stopped_by,omitempty"`
	ZeroColumns        []int64 `json:"zero_columns,omitempty"`
}

// ResultFrom converts the wire form of a result.
func ResultFrom(r *pb.SolveResult) Result {
	s := r.GetSettings()
	return Result{
		Converged: r.GetConverged(), Status: r.GetStatus(), Method: r.GetMethod(),
		Iterations: r.GetIterations(), RelativeResidual: r.GetRelativeResidual(),
		ResidualNorm: r.GetResidualNorm(), TrueResidualNorm: r.GetTrueResidualNorm(), RHSNorm: r.GetRhsNorm(),
		Preconditioner: r.GetPreconditioner(), PreconditionerReason: r.GetPreconditionerReason(),
		Shift: r.GetShift(), SetupSeconds: r.GetSetupSeconds(), SolveSeconds: r.GetSolveSeconds(),
		PerIterationSeconds: r.GetPerIterationSeconds(),
		LambdaMin:           r.GetLambdaMin(), LambdaMax: r.GetLambdaMax(), Cond: r.GetCond(),
		Settings: Settings{RTol: s.GetRtol(), ATol: s.GetAtol(), MaxIter: s.GetMaxIter(),
			TimeLimitSeconds: s.GetTimeLimitSeconds(), RefreshEvery: int(s.GetRefreshEvery()),
			BTol: s.GetBtol(), Damp: s.GetDamp()},
		FromCache: r.GetFromCache(), Error: r.GetError(),
		NormalResidualNorm: r.GetNormalResidualNorm(), XNorm: r.GetXNorm(), NormEstimate: r.GetANormEstimate(),
		StoppedBy: r.GetStoppedBy(), ZeroColumns: r.GetZeroColumns(),
	}
}

// Outcome is what a Solve or Watch call saw of a job.
type Outcome struct {
	JobID string
	// State is the job's final state ("FINISHED", "FAILED", "CANCELLED"),
	// or "" when the stream ended before the job did.
	State    string
	Accepted *pb.Accepted
	// Results holds one result per right-hand side that finished.
	Results []Result
	// X holds the solutions streamed (Solve without KeepSolution or
	// Detach); nil otherwise.
	X [][]float64
	// DroppedProgress counts progress events the server dropped because
	// this client read too slowly.
	DroppedProgress int64
	// Error is the job's error in words, if it failed.
	Error string
}

// Solve runs a remote solve: it uploads right-hand sides too long to send
// inline, starts the job, calls onEvent (if not nil) for each event as it
// arrives, and collects the results and solutions. The returned error is
// the stream's gRPC status: nil when the job ran to a status (which may
// be other than converged: see Outcome.Results), FAILED_PRECONDITION for
// a breakdown, CANCELED, DEADLINE_EXCEEDED, and so on; the Outcome holds
// what arrived before it. Cancelling ctx cancels an attached job.
func (c *Client) Solve(ctx context.Context, req SolveRequest, onEvent func(Event)) (*Outcome, error) {
	preq := &pb.SolveRequest{
		MatrixId: req.MatrixID, Method: req.Method, Preconditioner: req.Precond,
		Rtol: req.RTol, Atol: req.ATol, Btol: req.BTol, Damp: req.Damp,
		MaxIter: int64(req.MaxIter), RefreshEvery: int32(req.RefreshEvery),
		Progress: &pb.ProgressPolicy{EveryIterations: int32(req.ProgressEvery)},
		Detach:   req.Detach, KeepSolution: req.KeepSolution, Label: req.Label,
	}
	if req.TimeLimit > 0 {
		preq.TimeLimit = durationpb.New(req.TimeLimit)
	}
	if req.ProgressInterval > 0 {
		preq.Progress.Interval = durationpb.New(req.ProgressInterval)
	}
	budget := c.inline
	ref := func(x []float64, name string) (*pb.VectorRef, error) {
		if 8*len(x) <= budget {
			budget -= 8 * len(x)
			return &pb.VectorRef{Source: &pb.VectorRef_Data{Data: Pack(x)}}, nil
		}
		info, err := c.UploadVector(ctx, x, name)
		if err != nil {
			return nil, err
		}
		return &pb.VectorRef{Source: &pb.VectorRef_VectorId{VectorId: info.GetId()}}, nil
	}
	for i, b := range req.B {
		r, err := ref(b, fmt.Sprintf("rhs %d", i))
		if err != nil {
			return nil, err
		}
		preq.Rhs = append(preq.Rhs, r)
	}
	for i, x := range req.X0 {
		r, err := ref(x, fmt.Sprintf("x0 %d", i))
		if err != nil {
			return nil, err
		}
		preq.X0 = append(preq.X0, r)
	}
	stream, err := c.rpc.Solve(ctx, preq)
	if err != nil {
		return nil, err
	}
	out := &Outcome{}
	if !req.KeepSolution && !req.Detach {
		out.X = make([][]float64, len(req.B))
	}
	return out, follow(stream, out, onEvent)
}

// Watch follows a job (replaying its history, then live) until it
// finishes or ctx is done, calling onEvent for each event. Solutions are
// not streamed: fetch them with DownloadSolution. The error is as for
// Solve.
func (c *Client) Watch(ctx context.Context, jobID string, onEvent func(Event)) (*Outcome, error) {
	stream, err := c.rpc.Watch(ctx, &pb.WatchRequest{JobId: jobID})
	if err != nil {
		return nil, err
	}
	out := &Outcome{JobID: jobID}
	return out, follow(stream, out, onEvent)
}

// follow reads a job's event stream into out until it ends.
func follow(stream interface{ Recv() (*pb.JobEvent, error) }, out *Outcome, onEvent func(Event)) error {
	for {
		ev, err := stream.Recv()
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
		if out.JobID == "" {
			out.JobID = ev.GetJobId()
		}
		if c := ev.GetSolution(); c != nil {
			if err := out.addChunk(c); err != nil {
				return err
			}
			continue
		}
		e := Event{JobID: ev.GetJobId(), Seq: ev.GetSeq(), Queued: ev.GetQueued(), Accepted: ev.GetAccepted(),
			Progress: ev.GetProgress(), Result: ev.GetResult(), Finished: ev.GetFinished()}
		switch {
		case e.Accepted != nil:
			out.Accepted = e.Accepted
		case e.Result != nil:
			out.Results = append(out.Results, ResultFrom(e.Result))
		case e.Finished != nil:
			out.State = e.Finished.GetState().String()
			out.DroppedProgress = e.Finished.GetDroppedProgress()
			out.Error = e.Finished.GetError()
		}
		if onEvent != nil {
			onEvent(e)
		}
	}
}

// addChunk places a solution chunk. The server sends whole entries in
// order; anything else is a protocol error.
func (o *Outcome) addChunk(c *pb.VectorChunk) error {
	k := int(c.GetRhs())
	if o.X == nil || k < 0 || k >= len(o.X) {
		return fmt.Errorf("client: unexpected solution chunk for right-hand side %d", k)
	}
	if o.X[k] == nil {
		if c.GetLength() < 0 || c.GetLength() > math.MaxInt32 {
			return fmt.Errorf("client: solution length %d out of range", c.GetLength())
		}
		o.X[k] = make([]float64, 0, c.GetLength())
	}
	if c.GetOffset() != int64(len(o.X[k])) || len(c.GetData())%8 != 0 ||
		c.GetOffset()+int64(len(c.GetData())/8) > c.GetLength() {
		return fmt.Errorf("client: solution chunk at offset %d does not follow entry %d", c.GetOffset(), len(o.X[k]))
	}
	o.X[k] = unpackAppend(o.X[k], c.GetData())
	return nil
}

// DownloadSolution fetches the solution of right-hand side rhs of a
// finished job that kept it.
func (c *Client) DownloadSolution(ctx context.Context, jobID string, rhs int) ([]float64, error) {
	stream, err := c.rpc.DownloadSolution(ctx, &pb.DownloadSolutionRequest{JobId: jobID, Rhs: int32(rhs)})
	if err != nil {
		return nil, err
	}
	var x []float64
	for {
		ch, err := stream.Recv()
		if err == io.EOF {
			return nil, errors.New("client: the solution stream ended before its last chunk")
		}
		if err != nil {
			return nil, err
		}
		if x == nil {
			x = make([]float64, 0, ch.GetLength())
		}
		if ch.GetOffset() != int64(len(x)) || len(ch.GetData())%8 != 0 {
			return nil, fmt.Errorf("client: solution chunk at offset %d does not follow entry %d", ch.GetOffset(), len(x))
		}
		x = unpackAppend(x, ch.GetData())
		if ch.GetLast() {
			if int64(len(x)) != ch.GetLength() {
				return nil, fmt.Errorf("client: solution has %d of its %d entries", len(x), ch.GetLength())
			}
			return x, nil
		}
	}
}

// Pack encodes x as packed little-endian float64 bytes, the wire form of
// vectors.
func Pack(x []float64) []byte {
	b := make([]byte, 0, 8*len(x))
	for _, v := range x {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	}
	return b
}

// Unpack decodes packed little-endian float64 bytes; a trailing partial
// entry is an error.
func Unpack(b []byte) ([]float64, error) {
	if len(b)%8 != 0 {
		return nil, fmt.Errorf("client: %d bytes is not a whole number of float64 entries", len(b))
	}
	return unpackAppend(make([]float64, 0, len(b)/8), b), nil
}

func unpackAppend(x []float64, b []byte) []float64 {
	for i := 0; i+8 <= len(b); i += 8 {
		x = append(x, math.Float64frombits(binary.LittleEndian.Uint64(b[i:])))
	}
	return x
}
