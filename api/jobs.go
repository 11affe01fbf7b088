package api

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"io"
	"log/slog"
	"runtime/debug"
	"slices"
	"sync"
	"time"

	"google.golang.org/protobuf/proto"

	pb "github.com/residua/residua/proto/residua/v1"
)

const (
	// subscriberProgress bounds the progress events waiting in one
	// subscriber's queue; past it the oldest waiting progress event is
	// dropped and counted. Other events are never dropped.
	subscriberProgress = 256
	// historyProgress bounds the progress events a job keeps for replay.
	// When the history reaches it, every second progress event is dropped
	// and from then on only every second (then fourth, ...) one is kept, so
	// the history always spans the whole solve at a coarser resolution.
	historyProgress = 2048
)

// Registry holds the server's jobs: queued, running and recently finished.
// It is what the gRPC handlers and any other front end (a web page, metrics)
// read: Jobs and Job give snapshots, Subscribe follows a job's events.
// All methods are safe for concurrent use.
type Registry struct {
	log       *slog.Logger
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

func newRegistry(log *slog.Logger, maxConcurrent, maxQueued, maxKept int) *Registry {
	return &Registry{
		log:       log,
		maxKept:   maxKept,
		maxQueued: maxQueued,
		slots:     make(chan struct{}, maxConcurrent),
		jobs:      make(map[string]*job),
	}
}

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

	mu           sync.Mutex
	state        pb.JobState
	seq          uint64
	history      []*pb.JobEvent
	nprogress    int // progress events in history
	stride       int // keep every stride-th progress event in history
	progressAll  int // progress events published
	subs         map[*Subscription]struct{}
	last         *pb.Progress
	results      []*pb.SolveResult
	chosen       string
	started      time.Time
	finished     time.Time
	err          error
	solutions    [][]float64
	solutionGone string // why the solutions are not available, once dropped
	mem          *item  // the job's vectors in the store
}

// newJobID returns a random job id: 16 hex digits, short enough to type.
func newJobID() string {
	var b [8]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic("api: crypto/rand failed: " + err.Error())
	}
	return "j" + hex.EncodeToString(b[:])
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
	return nil
}

// start runs the job's work in a new goroutine once a solve slot is free.
// work must end promptly when j.ctx is done. A panic in work is recovered,
// logged with its stack and turned into a failed job; a job always ends
// with a finished event, whatever happens.
func (r *Registry) start(j *job, work func() (pb.JobState, error)) {
	r.wg.Add(1)
	go func() {
		defer r.wg.Done()
		state, err := pb.JobState_CANCELLED, error(nil)
		defer func() {
			if p := recover(); p != nil {
				r.log.Error("job panicked", "job", j.id, "panic", fmt.Sprint(p), "stack", string(debug.Stack()))
				state, err = pb.JobState_FAILED, ErrPanic
			}
			r.finish(j, state, err)
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
		state, err = work()
	}()
}

// finish ends j: it records the outcome, sends the finished event, and
// forgets the oldest finished jobs beyond the retention bound.
func (r *Registry) finish(j *job, state pb.JobState, err error) {
	j.mu.Lock()
	j.state = state
	j.err = err
	j.finished = time.Now()
	fin := &pb.Finished{State: state, ElapsedSeconds: j.finished.Sub(j.created).Seconds()}
	if err != nil {
		fin.Error = err.Error()
	}
	j.publishLocked(&pb.JobEvent{Event: &pb.JobEvent_Finished{Finished: fin}})
	close(j.done)
	j.mu.Unlock()
	j.cancel(context.Canceled) // release the context's resources

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

func (j *job) isDone() bool {
	select {
	case <-j.done:
		return true
	default:
		return false
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
var errCancelRequested = fmt.Errorf("job cancelled on request: %w", context.Canceled)

// snapshot describes j as it is now.
func (j *job) snapshot() *pb.Job {
	j.mu.Lock()
	defer j.mu.Unlock()
	s := proto.Clone(j.info).(*pb.Job)
	s.State = j.state
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

// publish adds an event to j's history and every subscriber's queue.
func (j *job) publish(ev *pb.JobEvent) {
	j.mu.Lock()
	j.publishLocked(ev)
	j.mu.Unlock()
}

// publishLocked is publish with j.mu held. The event must not be changed
// afterwards: subscribers and the history share it.
func (j *job) publishLocked(ev *pb.JobEvent) {
	j.seq++
	ev.Seq = j.seq
	ev.JobId = j.id
	prog := ev.GetProgress() != nil
	switch {
	case prog:
		j.last = ev.GetProgress()
		if j.progressAll%j.stride == 0 {
			j.history = append(j.history, ev)
			j.nprogress++
		}
		j.progressAll++
		if j.nprogress >= historyProgress {
			j.thinHistory()
		}
	case ev.GetResult() != nil:
		j.results = append(j.results, ev.GetResult())
		j.history = append(j.history, ev)
	default:
		j.history = append(j.history, ev)
	}
	for s := range j.subs {
		s.push(ev, prog)
	}
}

// thinHistory drops every second progress event of the history (keeping
// the first) and doubles the stride at which new ones are kept.
func (j *job) thinHistory() {
	kept := j.history[:0]
	n := 0
	for _, ev := range j.history {
		if ev.GetProgress() != nil {
			n++
			if n%2 == 0 {
				continue
			}
		}
		kept = append(kept, ev)
	}
	clear(j.history[len(kept):])
	j.history = kept
	j.nprogress = (n + 1) / 2
	j.stride *= 2
}

// Subscription follows one job's events: first the history recorded when it
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

// Subscribe follows the job with the given id. The caller must Close the
// subscription when done with it.
func (r *Registry) Subscribe(id string) (*Subscription, error) {
	j, err := r.lookup(id)
	if err != nil {
		return nil, err
	}
	return j.subscribe(), nil
}

func (j *job) subscribe() *Subscription {
	s := &Subscription{j: j, notify: make(chan struct{}, 1)}
	j.mu.Lock()
	s.replay = slices.Clone(j.history)
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

// outcome returns the job's state and the error that ended it (nil while
// it runs or when it finished normally).
func (j *job) outcome() (pb.JobState, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	return j.state, j.err
}
