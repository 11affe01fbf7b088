package api

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"log/slog"
	"runtime/debug"
	"slices"
	"sync"
	"time"

	"github.com/residua/residua/history"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

// Observer is told about every job's life, whatever front end runs: the
// server's metrics (package metrics satisfies it). Its methods must be
// quick and safe for concurrent use.
type Observer interface {
	// SolveStarted counts a job accepted into the queue.
	SolveStarted()
	// SolveFinished counts a job that ended with outcome (an Outcome
	// word), d after it was submitted.
	SolveFinished(outcome string, d time.Duration)
	// IterationsDone adds the iterations of a finished right-hand side.
	IterationsDone(n int)
}

// Registry holds the server's jobs: queued, running and recently finished.
// It is what the gRPC handlers and any other front end (a web page) read:
// Jobs and Job give snapshots, Subscribe follows a job's events, History
// gives a right-hand side's full history. All methods are safe for
// concurrent use.
type Registry struct {
	log       *slog.Logger
	obs       Observer // nil: none
	maxKept   int
	maxQueued int
	// slots holds one token per running job (a semaphore of capacity
	// MaxConcurrentSolves).
	slots chan struct{}
	// onForget runs (without mu held) when a finished job is forgotten.
	onForget func(*job)

	mu      sync.Mutex // guards the fields below
	jobs    map[string]*job
	order   []*job // in creation order
	waiting int    // jobs queued for a slot
	closed  bool
	wg      sync.WaitGroup // the job goroutines
}

func newRegistry(log *slog.Logger, obs Observer, maxConcurrent, maxQueued, maxKept int) *Registry {
	return &Registry{
		log:       log,
		obs:       obs,
		maxKept:   maxKept,
		maxQueued: maxQueued,
		slots:     make(chan struct{}, maxConcurrent),
		jobs:      make(map[string]*job),
	}
}

// newJobID returns a random job id: 16 hex digits, short enough to type.
func newJobID() string {
	var b [8]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic("api: crypto/rand failed: " + err.Error())
	}
	return "j" + hex.EncodeToString(b[:])
}

// newJob makes a job with its context and one history log per right-hand
// side; the caller fills info.
func newJob(id string, nrhs int, keep bool) *job {
	j := &job{id: id, created: time.Now(), keep: keep, done: make(chan struct{}), stride: 1,
		logs: make([]*history.Log, nrhs), solutions: make([][]float64, nrhs)}
	for i := range j.logs {
		j.logs[i] = &history.Log{}
	}
	j.ctx, j.cancel = context.WithCancelCause(context.Background())
	return j
}

// add registers j in the queued state, or refuses it when the registry is
// closed or the queue is full.
func (r *Registry) add(j *job) error {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.closed {
		return ErrShuttingDown
	}
	if r.waiting >= r.maxQueued+cap(r.slots)-len(r.slots) {
		return limitf("the solve queue is full (%d running, %d queued; the server takes at most %d queued)",
			len(r.slots), r.waiting, r.maxQueued)
	}
	ahead := max(0, r.waiting-(cap(r.slots)-len(r.slots)))
	r.waiting++
	r.jobs[j.id] = j
	r.order = append(r.order, j)
	j.mu.Lock()
	j.state = pb.JobState_QUEUED
	j.publishLocked(&pb.JobEvent{Event: &pb.JobEvent_Queued{Queued: &pb.Queued{Position: int32(ahead)}}})
	j.mu.Unlock()
	if r.obs != nil {
		r.obs.SolveStarted()
	}
	return nil
}

// start runs the job's work in a new goroutine once a solve slot is free.
// work must end promptly when j.ctx is done and returns the job's outcome
// and the error that stopped it, if any. A panic in work is recovered,
// logged with its stack and turned into the outcome failed; a job always
// ends with a finished event, whatever happens.
func (r *Registry) start(j *job, work func() (solve.Outcome, error)) {
	r.wg.Add(1)
	go func() {
		defer r.wg.Done()
		outcome, err := solve.Cancelled, error(nil)
		defer func() {
			if p := recover(); p != nil {
				r.log.Error("job panicked", "job", j.id, "panic", fmt.Sprint(p), "stack", string(debug.Stack()))
				outcome, err = solve.Failed, ErrPanic
			}
			r.finish(j, outcome, err)
		}()
		select {
		case r.slots <- struct{}{}:
		case <-j.ctx.Done():
			r.mu.Lock()
			r.waiting--
			r.mu.Unlock()
			err = context.Cause(j.ctx)
			return
		}
		defer func() { <-r.slots }()
		r.mu.Lock()
		r.waiting--
		r.mu.Unlock()
		j.mu.Lock()
		j.state = pb.JobState_RUNNING
		j.started = time.Now()
		j.mu.Unlock()
		outcome, err = work()
	}()
}

// finish ends j: it records the outcome, sends the finished event, counts
// it, and forgets the oldest finished jobs beyond the retention bound.
func (r *Registry) finish(j *job, outcome solve.Outcome, err error) {
	j.mu.Lock()
	j.state = pb.JobState_DONE
	j.outcome = outcome
	j.err = err
	j.finished = time.Now()
	fin := &pb.Finished{State: pb.JobState_DONE, Outcome: string(outcome), ElapsedSeconds: j.finished.Sub(j.created).Seconds()}
	if err != nil {
		fin.Error = err.Error()
	}
	j.publishLocked(&pb.JobEvent{Event: &pb.JobEvent_Finished{Finished: fin}})
	close(j.done)
	elapsed := j.finished.Sub(j.created)
	j.mu.Unlock()
	j.cancel(context.Canceled) // release the context's resources
	if r.obs != nil {
		r.obs.SolveFinished(string(outcome), elapsed)
	}

	var forget []*job
	r.mu.Lock()
	nfinished := 0
	for _, o := range r.order {
		if o.isDone() {
			nfinished++
		}
	}
	keep := r.order[:0]
	for _, o := range r.order {
		if nfinished > r.maxKept && o.isDone() {
			nfinished--
			delete(r.jobs, o.id)
			forget = append(forget, o)
			continue
		}
		keep = append(keep, o)
	}
	clear(r.order[len(keep):])
	r.order = keep
	r.mu.Unlock()
	if r.onForget != nil {
		for _, o := range forget {
			r.onForget(o)
		}
	}
}

// close refuses new jobs from now on.
func (r *Registry) close() {
	r.mu.Lock()
	r.closed = true
	r.mu.Unlock()
}

// cancelAll cancels every job that has not finished, with cause.
func (r *Registry) cancelAll(cause error) {
	r.mu.Lock()
	jobs := slices.Clone(r.order)
	r.mu.Unlock()
	for _, j := range jobs {
		j.cancel(cause)
	}
}

// wait waits for every job goroutine to end, or for ctx.
func (r *Registry) wait(ctx context.Context) error {
	done := make(chan struct{})
	go func() { r.wg.Wait(); close(done) }()
	select {
	case <-done:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

func (r *Registry) lookup(id string) (*job, error) {
	r.mu.Lock()
	defer r.mu.Unlock()
	j, ok := r.jobs[id]
	if !ok {
		return nil, notFoundf("no job %q (unknown, or finished long enough ago to be forgotten)", id)
	}
	return j, nil
}

// Jobs returns a snapshot of every job the registry holds, newest first.
func (r *Registry) Jobs() []*pb.Job {
	r.mu.Lock()
	jobs := slices.Clone(r.order)
	r.mu.Unlock()
	out := make([]*pb.Job, 0, len(jobs))
	for i := len(jobs) - 1; i >= 0; i-- {
		out = append(out, jobs[i].snapshot())
	}
	return out
}

// Job returns a snapshot of the job with the given id; the error wraps
// ErrNotFound for an unknown id.
func (r *Registry) Job(id string) (*pb.Job, error) {
	j, err := r.lookup(id)
	if err != nil {
		return nil, err
	}
	return j.snapshot(), nil
}

// History returns the full history of every right-hand side of a job (see
// the GetHistory RPC), and a version that changes whenever any of them or
// the job's events do, so a reader can tell whether to read again.
func (r *Registry) History(id string) ([]history.History, uint64, error) {
	j, err := r.lookup(id)
	if err != nil {
		return nil, 0, err
	}
	out := make([]history.History, len(j.logs))
	for i := range j.logs {
		out[i], _, _ = j.history(i)
	}
	return out, j.version(), nil
}

// Cancel cancels the job with the given id (nothing happens if it has
// finished) and returns its snapshot.
func (r *Registry) Cancel(id string) (*pb.Job, error) {
	j, err := r.lookup(id)
	if err != nil {
		return nil, err
	}
	j.cancel(errCancelRequested)
	return j.snapshot(), nil
}

// Counts reports the number of queued and running jobs.
func (r *Registry) Counts() (queued, running int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.waiting, len(r.slots)
}

// errCancelRequested is the cause of a job cancelled by CancelJob.
var errCancelRequested = fmt.Errorf("cancelled on request: %w", context.Canceled)

// Subscribe follows the job with the given id. The caller must Close the
// subscription when done with it.
func (r *Registry) Subscribe(id string) (*Subscription, error) {
	j, err := r.lookup(id)
	if err != nil {
		return nil, err
	}
	return j.subscribe(), nil
}
