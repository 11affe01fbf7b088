package web

import (
	"errors"
	"math"
	"sync"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/history"
	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
)

// fakeSource is a job registry in memory, behaving as api.Registry does
// for the page: snapshots newest first, and each job's histories with a
// version that changes with them.
type fakeSource struct {
	mu      sync.Mutex
	jobs    []*pb.Job // newest first
	rows    map[string][][]krylov.Progress
	version map[string]uint64
}

func newFakeSource() *fakeSource {
	return &fakeSource{rows: map[string][][]krylov.Progress{}, version: map[string]uint64{}}
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

func (f *fakeSource) History(id string) ([]history.History, uint64, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for _, j := range f.jobs {
		if j.GetId() == id {
			out := make([]history.History, len(f.rows[id]))
			for i, r := range f.rows[id] {
				out[i] = history.History{Rows: append([]krylov.Progress(nil), r...), LeastSquares: j.GetMethod() == "lsqr"}
			}
			return out, f.version[id], nil
		}
	}
	return nil, 0, errors.New("no job " + id)
}

// change runs fn under the lock.
func (f *fakeSource) change(id string, fn func()) {
	f.mu.Lock()
	fn()
	f.version[id]++
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
	f.change(j.Id, func() {
		j.State = pb.JobState_QUEUED
		f.jobs = append([]*pb.Job{j}, f.jobs...)
		f.rows[j.Id] = make([][]krylov.Progress, max(1, j.RhsCount))
	})
}

func (f *fakeSource) start(id string, startedUnix float64) {
	f.change(id, func() {
		j := f.job(id)
		j.State = pb.JobState_RUNNING
		j.StartedUnix = startedUnix
	})
}

// progress records iterations from..to of a residual falling by rho per
// iteration (made-up rows for the page's tests), 10 ms per iteration; the
// job's last progress is the last of them.
func (f *fakeSource) progress(id string, rhs, from, to int, rho float64) {
	f.change(id, func() {
		j := f.job(id)
		for k := from; k <= to; k++ {
			r := math.Pow(rho, float64(k))
			p := krylov.Progress{Iteration: k, Elapsed: time.Duration(k) * 10 * time.Millisecond, ResidualNorm: 2 * r, RelResidual: r, NormalResidualNorm: r / 4}
			f.rows[id][rhs] = append(f.rows[id][rhs], p)
			j.LastProgress = &pb.Progress{Rhs: int32(rhs), Iteration: int64(k), ElapsedSeconds: p.Elapsed.Seconds(), ResidualNorm: 2 * r, RelativeResidual: r, NormalResidualNorm: r / 4}
		}
	})
}

func (f *fakeSource) finish(id, outcome string, finishedUnix float64) {
	f.change(id, func() {
		j := f.job(id)
		j.State = pb.JobState_DONE
		j.Outcome = outcome
		j.FinishedUnix = finishedUnix
		r := &pb.SolveResult{Status: outcome, Converged: outcome == "converged", Iterations: j.GetLastProgress().GetIteration(),
			Headline: outcome + " after " + "some iterations"}
		j.Results = append(j.Results, r)
		j.RhsDone++
	})
}

func (f *fakeSource) forget(id string) {
	f.change(id, func() {
		for i, j := range f.jobs {
			if j.GetId() == id {
				f.jobs = append(f.jobs[:i], f.jobs[i+1:]...)
				break
			}
		}
	})
}
