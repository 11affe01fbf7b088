package api

import (
	"time"

	"github.com/residua/residua/history"
	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/wire"
)

// progressRecorder is the krylov.Recorder of one right-hand side of a job.
// Every row goes to the job's history log for that right-hand side (the
// full-resolution history of GetHistory and the page). A progress event is
// published at iteration 0, whenever the request's rule fires, and for the
// final iteration: the rule limits only what is pushed live. It never
// blocks on readers (a slow stream drops progress events in its own queue)
// and never stops the solve.
type progressRecorder struct {
	s        *Server
	j        *job
	log      *history.Log
	rhs      int
	every    int
	interval time.Duration

	lastSent time.Time
	pending  krylov.Progress
	havePend bool
}

func (r *progressRecorder) Record(p krylov.Progress) error {
	if h := r.s.testHookIteration; h != nil {
		h(r.j.ctx, r.j.id, r.rhs, p.Iteration)
	}
	r.log.Record(p)
	now := time.Now()
	if p.Iteration == 0 || (r.every > 0 && p.Iteration%r.every == 0) ||
		(r.interval > 0 && now.Sub(r.lastSent) >= r.interval) {
		r.send(p)
		r.lastSent = now
		r.havePend = false
		return nil
	}
	r.pending, r.havePend = p, true
	return nil
}

// Finish sends the last recorded progress if it was held back, so the
// stream always ends at the final iteration.
func (r *progressRecorder) Finish(res *krylov.Result) {
	r.log.Finish(res)
	if r.havePend {
		r.send(r.pending)
		r.havePend = false
	}
}

func (r *progressRecorder) send(p krylov.Progress) {
	r.j.publish(&pb.JobEvent{Event: &pb.JobEvent_Progress{Progress: wire.Progress(r.rhs, p)}})
}

var _ krylov.Recorder = (*progressRecorder)(nil)
