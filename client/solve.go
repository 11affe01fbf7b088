package client

import (
	"context"
	"fmt"
	"io"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"

	"github.com/residua/residua/history"
	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

// inlineBudget is how many bytes of vectors a solve request carries
// inline by default; longer vectors are uploaded first with UploadVector,
// so the request stays well under gRPC's 4 MiB message limit. maxInline
// bounds WithInlineVectorBytes.
const (
	inlineBudget = 2 << 20
	maxInline    = 3 << 20
)

// SolveRequest describes a remote solve.
type SolveRequest struct {
	// MatrixID is the id an upload returned.
	MatrixID string
	// B holds the right-hand sides, solved one after the other with the
	// same preconditioner.
	B [][]float64
	// X0 holds the starting guesses: none (zeros), one for all, or one per
	// right-hand side.
	X0 [][]float64
	// Request is what to solve and how: the method, the preconditioner
	// (or column scaling), the tolerances and limits, in the words of the
	// solve layer, whose zero values are the defaults (see solve.Request).
	solve.Request
	// ProgressEvery and ProgressInterval: a progress event every k
	// iterations and/or every interval; both zero means the server's
	// default (every 200 ms). They limit only what is pushed live: the
	// server records every iteration (History).
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
	// Weights, when not nil, make the matrix B and the job solve the
	// normal equations (B·diag(Weights)·Bᵀ + Reg·I)·y = b (see the
	// SolveRequest message's weights field): one weight ≥ 0 per column
	// of B, b and X0 of B's row count. Upload B once and send new weights
	// with each request.
	Weights []float64
	Reg     float64
}

// Event is one event of a job, as a Solve or Watch call delivers it to its
// callback. Exactly one of the pointer fields is set.
type Event struct {
	JobID    string
	Seq      uint64
	Queued   *pb.Queued
	Accepted *pb.Accepted
	// Progress is a history row of right-hand side RHS.
	Progress *krylov.Progress
	RHS      int
	// Result is the summary of right-hand side RHS.
	Result   *solve.Summary
	Finished *pb.Finished
}

// Outcome is what a Solve or Watch call saw of a job.
type Outcome struct {
	JobID string
	// State is the job's state when the stream ended: done, or "" when
	// the stream ended before the job did. Outcome says how it ended.
	State   solve.State
	Outcome solve.Outcome
	// Accepted is the job's accepted event (the preconditioner chosen).
	Accepted *pb.Accepted
	// Results holds the summary of each right-hand side that finished.
	Results []solve.Summary
	// X holds the solutions streamed (Solve without KeepSolution or
	// Detach), each checked against the length and checksum the server
	// sent; nil otherwise.
	X [][]float64
	// DroppedProgress counts progress events the server dropped because
	// this client read too slowly.
	DroppedProgress int64
	// Error is the job's error in words, if it failed.
	Error string

	chunks []wire.Assembler
}

// Solve runs a remote solve: it uploads right-hand sides too long to send
// inline, starts the job, calls onEvent (if not nil) for each event as it
// arrives, and collects the results and solutions. The returned error is
// the stream's gRPC status: nil when the job ran to a status (which may
// be other than converged: see Outcome.Results), FAILED_PRECONDITION for
// a breakdown, CANCELED, DEADLINE_EXCEEDED, and so on; the Outcome holds
// what arrived before it. Cancelling ctx cancels an attached job. A
// solution that arrives short or altered is an error wrapping
// wire.ErrTruncated.
func (c *Client) Solve(ctx context.Context, req SolveRequest, onEvent func(Event)) (*Outcome, error) {
	preq := &pb.SolveRequest{
		MatrixId: req.MatrixID,
		Progress: &pb.ProgressPolicy{EveryIterations: int32(req.ProgressEvery)},
		Detach:   req.Detach, KeepSolution: req.KeepSolution, Label: req.Label,
	}
	wire.FillRequest(preq, req.Request)
	if req.ProgressInterval > 0 {
		preq.Progress.Interval = durationpb.New(req.ProgressInterval)
	}
	budget := c.inline
	ref := func(x []float64, name string) (*pb.VectorRef, error) {
		if 8*len(x) <= budget {
			budget -= 8 * len(x)
			return &pb.VectorRef{Source: &pb.VectorRef_Data{Data: wire.Pack(x)}}, nil
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
	if req.Weights != nil {
		r, err := ref(req.Weights, "weights")
		if err != nil {
			return nil, err
		}
		preq.Weights, preq.Reg = r, req.Reg
	}
	stream, err := c.rpc.Solve(ctx, preq)
	if err != nil {
		return nil, err
	}
	out := &Outcome{}
	if !req.KeepSolution && !req.Detach {
		out.X = make([][]float64, len(req.B))
		out.chunks = make([]wire.Assembler, len(req.B))
	}
	return out, follow(stream, out, onEvent)
}

// Watch follows a job (replaying its events so far, then live) until it
// finishes or ctx is done, calling onEvent for each event. Solutions are
// not streamed: fetch them with DownloadSolution, and the full history
// with History. The error is as for Solve.
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
			return out.checkSolutions()
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
		e := Event{JobID: ev.GetJobId(), Seq: ev.GetSeq(), Queued: ev.GetQueued(), Accepted: ev.GetAccepted(), Finished: ev.GetFinished()}
		switch {
		case e.Accepted != nil:
			out.Accepted = e.Accepted
		case ev.GetProgress() != nil:
			p := wire.Row(ev.GetProgress())
			e.Progress, e.RHS = &p, int(ev.GetProgress().GetRhs())
		case ev.GetResult() != nil:
			s := wire.Summary(ev.GetResult())
			out.Results = append(out.Results, s)
			e.Result, e.RHS = &out.Results[len(out.Results)-1], s.RHSIndex
		case e.Finished != nil:
			out.State = wire.State(e.Finished.GetState())
			out.Outcome = solve.Outcome(e.Finished.GetOutcome())
			out.DroppedProgress = e.Finished.GetDroppedProgress()
			out.Error = e.Finished.GetError()
		}
		if onEvent != nil {
			onEvent(e)
		}
	}
}

// addChunk places a solution chunk, checked by wire.Assembler.
func (o *Outcome) addChunk(c *pb.VectorChunk) error {
	k := int(c.GetRhs())
	if o.X == nil || k < 0 || k >= len(o.X) {
		return fmt.Errorf("client: unexpected solution chunk for right-hand side %d", k)
	}
	done, err := o.chunks[k].Add(c.GetLength(), c.GetOffset(), c.GetData(), c.GetLast(), c.GetSha256())
	if err != nil {
		return fmt.Errorf("client: solution of right-hand side %d: %w", k, err)
	}
	if done {
		o.X[k] = o.chunks[k].Vector()
	}
	return nil
}

// checkSolutions makes sure that every right-hand side whose result came
// with a solution got the whole of it.
func (o *Outcome) checkSolutions() error {
	if o.X == nil {
		return nil
	}
	for _, r := range o.Results {
		if r.Status == string(solve.SetupFailed) {
			continue
		}
		if k := r.RHSIndex; k >= 0 && k < len(o.X) && o.X[k] == nil {
			return fmt.Errorf("client: the solution of right-hand side %d did not arrive in full: %w", k, wire.ErrTruncated)
		}
	}
	return nil
}

// DownloadSolution fetches the solution of right-hand side rhs of a
// finished job that kept it, checked against the length and checksum the
// server sends.
func (c *Client) DownloadSolution(ctx context.Context, jobID string, rhs int) ([]float64, error) {
	stream, err := c.rpc.DownloadSolution(ctx, &pb.DownloadSolutionRequest{JobId: jobID, Rhs: int32(rhs)})
	if err != nil {
		return nil, err
	}
	var a wire.Assembler
	for {
		ch, err := stream.Recv()
		if err == io.EOF {
			return nil, fmt.Errorf("client: the solution stream ended before its last chunk: %w", wire.ErrTruncated)
		}
		if err != nil {
			return nil, err
		}
		done, err := a.Add(ch.GetLength(), ch.GetOffset(), ch.GetData(), ch.GetLast(), ch.GetSha256())
		if err != nil {
			return nil, fmt.Errorf("client: %w", err)
		}
		if done {
			return a.Vector(), nil
		}
	}
}

// History fetches the convergence history the server recorded for
// right-hand side rhs of a job: every iteration, up to the server's
// budget of rows, past which the rows are evenly thinned with the first
// and last exact (History.Thinned).
func (c *Client) History(ctx context.Context, jobID string, rhs int) (history.History, error) {
	h, err := c.rpc.GetHistory(ctx, &pb.GetHistoryRequest{JobId: jobID, Rhs: int32(rhs)})
	if err != nil {
		return history.History{}, err
	}
	out := history.History{LeastSquares: h.GetLeastSquares(), Thinned: h.GetThinned(), Rows: make([]krylov.Progress, len(h.GetRows()))}
	for i, p := range h.GetRows() {
		out.Rows[i] = wire.Row(p)
	}
	return out, nil
}
