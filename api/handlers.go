package api

import (
	"context"
	"fmt"
	"time"

	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

const (
	// solutionChunk is the number of entries per solution chunk by
	// default: 1 MiB of payload, well under the 4 MiB message limit.
	solutionChunk = 1 << 17
	// maxSolutionChunk bounds a requested chunk: 4,000,000 bytes.
	maxSolutionChunk = 500_000
)

// Solve implements the Solve RPC (see the .proto for the stream contract).
func (s *Server) Solve(req *pb.SolveRequest, stream pb.Solver_SolveServer) error {
	if err := s.refuseIfClosing(); err != nil {
		return err
	}
	j, p, err := s.newJob(req)
	if err != nil {
		return err
	}
	sub := j.subscribe()
	defer sub.Close()
	// With a data folder the record is on disk before the id is sent.
	if err := s.persistQueued(j, req); err != nil {
		p.release()
		j.runnerPin.Release()
		j.streamPin.Release()
		return err
	}
	if err := s.jobs.add(j); err != nil {
		p.release()
		j.runnerPin.Release()
		j.streamPin.Release()
		if s.jobsDB != nil {
			s.jobsDB.remove(j.id, len(p.rhs))
		}
		return err
	}
	s.log.Info("job queued", "job", j.id, "matrix", p.matrixID, "rows", p.m.a.Rows, "cols", p.m.a.Cols, "nonzeros", p.m.a.NNZ(),
		"rhs", len(p.rhs), "method", string(p.req.Method), "preconditioner", p.req.Preconditioner, "detached", req.GetDetach())
	s.jobs.start(j, func() (solve.Outcome, error) {
		o, err := s.runJob(j, p)
		s.persistEnd(j, o, err)
		return o, err
	})

	ctx := stream.Context()
	if req.GetDetach() {
		ev, err := sub.Next(ctx)
		if err != nil {
			return err
		}
		return stream.Send(ev)
	}
	// Attached: the job dies with the stream. When the handler returns
	// normally the job has finished, so this cancel is a no-op then.
	stop := context.AfterFunc(ctx, func() {
		j.cancel(fmt.Errorf("the solve stream ended: %w", streamCause(ctx)))
	})
	defer stop()
	if !j.keep {
		defer func() {
			j.dropSolutions("the solution was streamed and not kept")
			j.streamPin.Release()
		}()
	}
	return s.follow(ctx, j, sub, stream, !j.keep)
}

// deadlineSlack: a stream cancelled this close to its deadline counts as
// having reached it. A client whose deadline passes resets the stream with
// the same code as a cancellation, and that reset races the server's own
// timer for the same deadline; the slack lets the job record the deadline
// either way.
const deadlineSlack = 20 * time.Millisecond

// streamCause says why a stream's context ended.
func streamCause(ctx context.Context) error {
	if dl, ok := ctx.Deadline(); ok && time.Until(dl) < deadlineSlack {
		return context.DeadlineExceeded
	}
	return context.Cause(ctx)
}

// follow sends a subscription's events to a stream, with each result's
// solution after it when withSolutions is set, and returns the job's
// outcome as the stream's error. It is the only goroutine sending on the
// stream; a failed send ends it (the client has gone).
func (s *Server) follow(ctx context.Context, j *job, sub *Subscription, stream interface{ Send(*pb.JobEvent) error }, withSolutions bool) error {
	for {
		ev, err := sub.Next(ctx)
		if err != nil {
			return err
		}
		if err := stream.Send(ev); err != nil {
			return err
		}
		if res := ev.GetResult(); res != nil && withSolutions && j.hasSolution(int(res.GetRhs())) {
			x, err := j.solution(int(res.GetRhs()))
			if err != nil {
				return err
			}
			rhs := res.GetRhs()
			if err := sendVector(x, rhs, solutionChunk, func(c *pb.VectorChunk) error {
				return stream.Send(&pb.JobEvent{JobId: j.id, Event: &pb.JobEvent_Solution{Solution: c}})
			}); err != nil {
				return err
			}
		}
		if ev.GetFinished() != nil {
			_, err := j.result()
			return err
		}
	}
}

// sendVector sends x in chunks of at most per entries, the last flagged
// and carrying the vector's checksum (wire.ChunkVector).
func sendVector(x []float64, rhs int32, per int, send func(*pb.VectorChunk) error) error {
	return wire.ChunkVector(x, per, func(off int, data []byte, last bool, sum string) error {
		return send(&pb.VectorChunk{Rhs: rhs, Length: int64(len(x)), Offset: int64(off), Data: data, Last: last, Sha256: sum})
	})
}

// forgetJob runs when the registry forgets a finished job.
func (s *Server) forgetJob(j *job) {
	j.dropSolutions("the job was forgotten")
	s.store.remove(key{kind: kindJob, id: j.id})
	if s.jobsDB != nil {
		// The expiry of kept solutions: they go with the job's record.
		s.jobsDB.remove(j.id, len(j.logs))
	}
}

// Watch implements the Watch RPC.
func (s *Server) Watch(req *pb.WatchRequest, stream pb.Solver_WatchServer) error {
	sub, err := s.jobs.Subscribe(req.GetJobId())
	if err != nil {
		return err
	}
	defer sub.Close()
	return s.follow(stream.Context(), sub.j, sub, stream, false)
}

// GetJob implements the GetJob RPC.
func (s *Server) GetJob(ctx context.Context, req *pb.GetJobRequest) (*pb.Job, error) {
	return s.jobs.Job(req.GetJobId())
}

// GetHistory implements the GetHistory RPC.
func (s *Server) GetHistory(ctx context.Context, req *pb.GetHistoryRequest) (*pb.History, error) {
	j, err := s.jobs.lookup(req.GetJobId())
	if err != nil {
		return nil, err
	}
	rhs := int(req.GetRhs())
	h, recorded, ok := j.history(rhs)
	if !ok {
		return nil, notFoundf("job %s has %d right-hand sides; there is no number %d", j.id, len(j.logs), rhs)
	}
	out := &pb.History{JobId: j.id, Rhs: int32(rhs), Thinned: h.Thinned, Recorded: int64(recorded), LeastSquares: h.LeastSquares,
		Rows: make([]*pb.Progress, len(h.Rows))}
	for i, p := range h.Rows {
		out.Rows[i] = wire.Progress(rhs, p)
	}
	return out, nil
}

// ListJobs implements the ListJobs RPC.
func (s *Server) ListJobs(ctx context.Context, _ *pb.ListJobsRequest) (*pb.ListJobsResponse, error) {
	return &pb.ListJobsResponse{Jobs: s.jobs.Jobs()}, nil
}

// CancelJob implements the CancelJob RPC.
func (s *Server) CancelJob(ctx context.Context, req *pb.CancelJobRequest) (*pb.Job, error) {
	j, err := s.jobs.Cancel(req.GetJobId())
	if err != nil {
		return nil, err
	}
	s.log.Info("job cancel requested", "job", req.GetJobId())
	return j, nil
}

// DownloadSolution implements the DownloadSolution RPC.
func (s *Server) DownloadSolution(req *pb.DownloadSolutionRequest, stream pb.Solver_DownloadSolutionServer) error {
	j, err := s.jobs.lookup(req.GetJobId())
	if err != nil {
		return err
	}
	if !j.isDone() {
		return notFoundf("job %s has not finished; its solution is not available yet", j.id)
	}
	if !j.keep {
		return notFoundf("job %s did not keep its solution (it was streamed; set keep_solution or detach)", j.id)
	}
	x, err := s.solutionOf(j, int(req.GetRhs()))
	if err != nil {
		return err
	}
	per := int(req.GetChunkEntries())
	switch {
	case per < 0:
		return invalidf("chunk_entries %d is negative", per)
	case per == 0:
		per = solutionChunk
	case per > maxSolutionChunk:
		per = maxSolutionChunk
	}
	// The store item may be evicted while we send; we hold x, so sending
	// completes either way.
	s.store.touch(key{kind: kindJob, id: j.id})
	return sendVector(x, req.GetRhs(), per, stream.Send)
}
