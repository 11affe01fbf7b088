package web

import (
	"context"
	"io"
	"math"
	"sync"

	pb "github.com/residua/residua/proto/residua/v1"
	"google.golang.org/protobuf/proto"
)

// fakeSource is a job registry in memory, behaving as api.Registry does
// for the page: snapshots newest first, and subscriptions that replay the
// events so far and then follow the live ones.
type fakeSource struct {
	mu      sync.Mutex
	jobs    []*pb.Job // newest first
	events  map[string][]*pb.JobEvent
	changed chan struct{}
}

func newFakeSource() *fakeSource {
	return &fakeSource{events: map[string][]*pb.JobEvent{}, changed: make(chan struct{})}
}

func (f *fakeSource) Jobs() []*pb.Job {
	f.mu.Lock()
	defer f.mu.Unlock()
	out := make([]*pb.Job, len(f.jobs))
	for i, j := range f.jobs {
		out[i] = proto.Clone(j).(*pb.Job)
	}
	return out
}

func (f *fakeSource) Subscribe(id string) (Events, error) {
	return &fakeEvents{f: f, id: id}, nil
}

type fakeEvents struct {
	f    *fakeSource
	id   string
	next int
}

func (e *fakeEvents) Next(ctx context.Context) (*pb.JobEvent, error) {
	for {
		e.f.mu.Lock()
		evs := e.f.events[e.id]
		ch := e.f.changed
		if e.next < len(evs) {
			ev := evs[e.next]
			e.next++
			e.f.mu.Unlock()
			return ev, nil
		}
		if n := len(evs); n > 0 && evs[n-1].GetFinished() != nil {
			e.f.mu.Unlock()
			return nil, io.EOF
		}
		e.f.mu.Unlock()
		select {
		case <-ch:
		case <-ctx.Done():
			return nil, ctx.Err()
		}
	}
}

func (e *fakeEvents) Close() {}

// change runs fn under the lock and wakes the subscribers.
func (f *fakeSource) change(fn func()) {
	f.mu.Lock()
	fn()
	close(f.changed)
	f.changed = make(chan struct{})
	f.mu.Unlock()
}

func (f *fakeSource) job(id string) *pb.Job {
	for _, j := range f.jobs {
		if j.GetId() == id {
			return j
		}
	}
	panic("no job " + id)
}

func (f *fakeSource) add(j *pb.Job) {
	f.change(func() {
		j.State = pb.JobState_QUEUED
		f.jobs = append([]*pb.Job{j}, f.jobs...)
		f.events[j.Id] = append(f.events[j.Id], &pb.JobEvent{JobId: j.Id, Event: &pb.JobEvent_Queued{Queued: &pb.Queued{}}})
	})
}

func (f *fakeSource) start(id string, startedUnix float64) {
	f.change(func() {
		j := f.job(id)
		j.State = pb.JobState_RUNNING
		j.StartedUnix = startedUnix
	})
}

// progress records iterations from..to of a residual falling by rho per
// iteration (made-up rows for the page's tests), 10 ms per iteration.
func (f *fakeSource) progress(id string, rhs, from, to int, rho float64) {
	f.change(func() {
		j := f.job(id)
		for k := from; k <= to; k++ {
			r := math.Pow(rho, float64(k))
			p := &pb.Progress{Rhs: int32(rhs), Iteration: int64(k), ElapsedSeconds: float64(k) / 100, ResidualNorm: 2 * r, RelativeResidual: r}
			j.LastProgress = p
			f.events[id] = append(f.events[id], &pb.JobEvent{JobId: id, Event: &pb.JobEvent_Progress{Progress: p}})
		}
	})
}

func (f *fakeSource) finish(id string, state pb.JobState, status string, finishedUnix float64) {
	f.change(func() {
		j := f.job(id)
		j.State = state
		j.FinishedUnix = finishedUnix
		if status != "" {
			r := &pb.SolveResult{Status: status, Converged: status == "converged", Iterations: j.GetLastProgress().GetIteration()}
			j.Results = append(j.Results, r)
			j.RhsDone++
			f.events[id] = append(f.events[id], &pb.JobEvent{JobId: id, Event: &pb.JobEvent_Result{Result: r}})
		}
		f.events[id] = append(f.events[id], &pb.JobEvent{JobId: id, Event: &pb.JobEvent_Finished{Finished: &pb.Finished{State: state, ElapsedSeconds: finishedUnix - j.GetCreatedUnix()}}})
	})
}

func (f *fakeSource) forget(id string) {
	f.change(func() {
		for i, j := range f.jobs {
			if j.GetId() == id {
				f.jobs = append(f.jobs[:i], f.jobs[i+1:]...)
				break
			}
		}
	})
}
