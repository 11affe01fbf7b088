package api

import (
	"context"
	"io"
	"slices"
	"sync"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/history"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

const (
	// subscriberProgress bounds the progress events waiting in one
	// subscriber's queue; past it the oldest waiting progress event is
	// dropped and counted. Other events are never dropped.
	subscriberProgress = 256
	// eventProgress bounds the progress events a job keeps for the replay
	// of a late watcher. When the replay reaches it, every second progress
	// event is dropped and from then on only every second (then fourth,
	// ...) one is kept, so the replay always spans the whole solve. The
	// job's full history is kept apart, in its logs.
	eventProgress = 2048
)

// job is one solve job. The fields before mu are set at creation and never
// change; the rest are guarded by mu.
type job struct {
	id      string
	created time.Time
	info    *pb.Job // the static fields of the description
	keep    bool    // the solutions are kept for DownloadSolution
	ctx     context.Context
	cancel  context.CancelCauseFunc
	done    chan struct{} // closed when the job has finished
	// logs hold each right-hand side's full history: every iteration up
	// to history.DefaultBudget rows, then evenly thinned (history.Log).
	logs []*history.Log
	// mem holds the job's vectors in the store; its pins are released by
	// the runner and (for an attached job that streams its solutions) by
	// the stream, and the last release deletes it.
	mem       *item
	runnerPin *pin
	streamPin *pin

	mu           sync.Mutex
	state        pb.JobState
	outcome      solve.Outcome // set when done
	seq          uint64
	events       []*pb.JobEvent // the replay of a late watcher
	nprogress    int            // progress events in events
	stride       int            // keep every stride-th progress event in events
	progressAll  int            // progress events published
	subs         map[*Subscription]struct{}
	last         *pb.Progress
	results      []*pb.SolveResult
	chosen       string
	started      time.Time
	finished     time.Time
	err          error
	solutions    [][]float64
	solutionGone string // why the solutions are not available, once dropped
}

func (j *job) isDone() bool {
	select {
	case <-j.done:
		return true
	default:
		return false
	}
}

// snapshot describes j as it is now.
func (j *job) snapshot() *pb.Job {
	j.mu.Lock()
	defer j.mu.Unlock()
	s := proto.Clone(j.info).(*pb.Job)
	s.State = j.state
	s.Outcome = string(j.outcome)
	s.Preconditioner = j.chosen
	s.RhsDone = int32(len(j.results))
	if j.last != nil {
		s.LastProgress = proto.Clone(j.last).(*pb.Progress)
	}
	for _, res := range j.results {
		s.Results = append(s.Results, proto.Clone(res).(*pb.SolveResult))
	}
	if j.err != nil {
		s.Error = j.err.Error()
	}
	s.CreatedUnix = unixSeconds(j.created)
	s.StartedUnix = unixSeconds(j.started)
	s.FinishedUnix = unixSeconds(j.finished)
	s.SolutionKept = j.keep && j.solutions != nil && j.isDone()
	return s
}

func unixSeconds(t time.Time) float64 {
	if t.IsZero() {
		return 0
	}
	return float64(t.UnixNano()) / 1e9
}

// history returns the full history of right-hand side rhs, or false when
// the job has no such right-hand side.
func (j *job) history(rhs int) (history.History, int, bool) {
	if rhs < 0 || rhs >= len(j.logs) {
		return history.History{}, 0, false
	}
	l := j.logs[rhs]
	h := l.Snapshot()
	h.LeastSquares = solve.Method(j.info.GetMethod()).LeastSquares()
	return h, l.Recorded(), true
}

// version changes whenever any of the job's histories or its state does.
func (j *job) version() uint64 {
	var v uint64
	for _, l := range j.logs {
		v += l.Version()
	}
	j.mu.Lock()
	v += j.seq
	j.mu.Unlock()
	return v
}

// publish adds an event to j's replay and every subscriber's queue.
func (j *job) publish(ev *pb.JobEvent) {
	j.mu.Lock()
	j.publishLocked(ev)
	j.mu.Unlock()
}

// publishLocked is publish with j.mu held. The event must not be changed
// afterwards: subscribers and the replay share it.
func (j *job) publishLocked(ev *pb.JobEvent) {
	j.seq++
	ev.Seq = j.seq
	ev.JobId = j.id
	prog := ev.GetProgress() != nil
	switch {
	case prog:
		j.last = ev.GetProgress()
		if j.progressAll%j.stride == 0 {
			j.events = append(j.events, ev)
			j.nprogress++
		}
		j.progressAll++
		if j.nprogress >= eventProgress {
			j.thinEvents()
		}
	case ev.GetResult() != nil:
		j.results = append(j.results, ev.GetResult())
		j.events = append(j.events, ev)
	default:
		j.events = append(j.events, ev)
	}
	for s := range j.subs {
		s.push(ev, prog)
	}
}

// thinEvents drops every second progress event of the replay (keeping the
// first) and doubles the stride at which new ones are kept.
func (j *job) thinEvents() {
	kept := j.events[:0]
	n := 0
	for _, ev := range j.events {
		if ev.GetProgress() != nil {
			n++
			if n%2 == 0 {
				continue
			}
		}
		kept = append(kept, ev)
	}
	clear(j.events[len(kept):])
	j.events = kept
	j.nprogress = (n + 1) / 2
	j.stride *= 2
}

// deliver keeps right-hand side i's solution x (when the job keeps
// solutions) and publishes its result.
func (j *job) deliver(i int, x []float64, out *pb.SolveResult) {
	j.mu.Lock()
	if j.solutions != nil {
		j.solutions[i] = x
	}
	j.mu.Unlock()
	j.publish(&pb.JobEvent{Event: &pb.JobEvent_Result{Result: out}})
}

// solution returns the solution of right-hand side rhs, or ErrNotFound
// when it is not (or no longer) held.
func (j *job) solution(rhs int) ([]float64, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.solutions == nil {
		return nil, notFoundf("job %s: %s", j.id, j.solutionGone)
	}
	if rhs < 0 || rhs >= len(j.solutions) {
		return nil, notFoundf("job %s has %d right-hand sides; there is no number %d", j.id, len(j.solutions), rhs)
	}
	if j.solutions[rhs] == nil {
		return nil, notFoundf("job %s has no solution for right-hand side %d yet", j.id, rhs)
	}
	return j.solutions[rhs], nil
}

// hasSolution reports whether a result of right-hand side rhs comes with
// a solution to send: false for the result of a job that failed before
// iterating (its set-up failed or was refused memory), whose one result
// carries no x. When the solutions were dropped it reports true, so that
// solution says why they are gone.
func (j *job) hasSolution(rhs int) bool {
	j.mu.Lock()
	defer j.mu.Unlock()
	return j.solutions == nil || rhs < 0 || rhs >= len(j.solutions) || j.solutions[rhs] != nil
}

// dropSolutions lets go of the job's solutions, saying why.
func (j *job) dropSolutions(why string) {
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.solutions != nil {
		j.solutions = nil
		j.solutionGone = why
	}
}

// outcome returns the job's state and the error that ended it (nil while
// it runs or when it ran to a status for every right-hand side).
func (j *job) result() (pb.JobState, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	return j.state, j.err
}

// Subscription follows one job's events: first the replay recorded when it
// was made, then the live events. Each subscription has its own queue:
// when its reader falls behind, the oldest queued progress events are
// dropped (and counted); the other events are never dropped. Next is
// meant for one goroutine; Close may be called from any.
type Subscription struct {
	j      *job
	replay []*pb.JobEvent
	next   int
	ended  bool // the finished event was returned
	notify chan struct{}

	// Guarded by j.mu.
	queue   []*pb.JobEvent
	nprog   int
	dropped int64
}

func (j *job) subscribe() *Subscription {
	s := &Subscription{j: j, notify: make(chan struct{}, 1)}
	j.mu.Lock()
	s.replay = slices.Clone(j.events)
	if j.subs == nil {
		j.subs = make(map[*Subscription]struct{})
	}
	j.subs[s] = struct{}{}
	j.mu.Unlock()
	return s
}

// push queues ev for s. j.mu must be held.
func (s *Subscription) push(ev *pb.JobEvent, prog bool) {
	s.queue = append(s.queue, ev)
	if prog {
		s.nprog++
		if s.nprog > subscriberProgress {
			for i, q := range s.queue {
				if q.GetProgress() != nil {
					s.queue = slices.Delete(s.queue, i, i+1)
					break
				}
			}
			s.nprog--
			s.dropped++
		}
	}
	select {
	case s.notify <- struct{}{}:
	default:
	}
}

// Next returns the next event, waiting for it if need be. After the
// finished event it returns io.EOF. The finished event it returns is a copy
// whose dropped_progress counts the progress events this subscription
// dropped.
func (s *Subscription) Next(ctx context.Context) (*pb.JobEvent, error) {
	for {
		if s.ended {
			return nil, io.EOF
		}
		var ev *pb.JobEvent
		if s.next < len(s.replay) {
			ev = s.replay[s.next]
			s.replay[s.next] = nil
			s.next++
		} else {
			s.j.mu.Lock()
			if len(s.queue) > 0 {
				ev = s.queue[0]
				s.queue[0] = nil
				s.queue = s.queue[1:]
				if ev.GetProgress() != nil {
					s.nprog--
				}
			}
			s.j.mu.Unlock()
		}
		if ev == nil {
			select {
			case <-s.notify:
				continue
			case <-ctx.Done():
				return nil, ctx.Err()
			}
		}
		if fin := ev.GetFinished(); fin != nil {
			s.ended = true
			c := proto.Clone(ev).(*pb.JobEvent)
			c.GetFinished().DroppedProgress = s.Dropped()
			return c, nil
		}
		return ev, nil
	}
}

// Dropped returns the number of progress events dropped so far.
func (s *Subscription) Dropped() int64 {
	s.j.mu.Lock()
	defer s.j.mu.Unlock()
	return s.dropped
}

// Close stops the subscription.
func (s *Subscription) Close() {
	s.j.mu.Lock()
	delete(s.j.subs, s)
	s.queue = nil
	s.j.mu.Unlock()
}
