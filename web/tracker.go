package web

import (
	"context"
	"sync"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/metrics"
	pb "github.com/residua/residua/proto/residua/v1"
)

// maxRows bounds the rows the tracker keeps per right-hand side. At the
// bound every second row is dropped (the first and the latest always stay)
// and from then on only every second arriving row is kept, then every
// fourth, and so on: the curve always spans the whole solve, at a coarser
// resolution, in bounded memory.
const maxRows = 4096

// tracker follows every job of a Source: it reads the job list every poll
// interval, subscribes to each new job and collects its progress rows per
// right-hand side, and forgets jobs that have left the list.
type tracker struct {
	src  Source
	poll time.Duration
	m    *metrics.Metrics // nil: count nothing

	ctx    context.Context
	cancel context.CancelFunc
	wg     sync.WaitGroup

	mu      sync.Mutex // guards the fields below and every *tracked
	list    []*pb.Job  // the latest snapshot, newest first
	jobs    map[string]*tracked
	changed chan struct{} // closed and replaced at every change
}

// tracked is what the tracker knows of one job beyond its snapshot.
type tracked struct {
	series  []series // per right-hand side
	version uint64   // increases whenever a row arrives
	done    bool     // the finished event arrived
	stop    context.CancelFunc

	svg        []byte // the latest rendered chart, for svgVersion
	svgVersion uint64
}

type series struct {
	rows   []krylov.Progress
	stride int // keep every stride-th arriving row
	seen   int // rows arrived
	tip    krylov.Progress
	hasTip bool // tip is newer than the last kept row
}

// all returns a copy of the kept rows and the tip.
func (s *series) all() []krylov.Progress {
	out := make([]krylov.Progress, len(s.rows), len(s.rows)+1)
	copy(out, s.rows)
	if s.hasTip {
		out = append(out, s.tip)
	}
	return out
}

func newTracker(src Source, poll time.Duration, m *metrics.Metrics) *tracker {
	ctx, cancel := context.WithCancel(context.Background())
	t := &tracker{src: src, poll: poll, m: m, ctx: ctx, cancel: cancel, jobs: map[string]*tracked{}, changed: make(chan struct{})}
	t.refresh()
	t.wg.Add(1)
	go t.loop()
	return t
}

func (t *tracker) close() {
	t.cancel()
	t.wg.Wait()
}

func (t *tracker) loop() {
	defer t.wg.Done()
	tick := time.NewTicker(t.poll)
	defer tick.Stop()
	for {
		select {
		case <-t.ctx.Done():
			return
		case <-tick.C:
			t.refresh()
		}
	}
}

// notify wakes everyone waiting for a change. t.mu must be held.
func (t *tracker) notify() {
	close(t.changed)
	t.changed = make(chan struct{})
}

// wait returns a channel closed at the next change.
func (t *tracker) wait() <-chan struct{} {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.changed
}

// refresh reads the job list, starts following new jobs and forgets gone
// ones.
func (t *tracker) refresh() {
	list := t.src.Jobs()
	t.mu.Lock()
	defer t.mu.Unlock()
	changed := len(list) != len(t.list)
	seen := make(map[string]bool, len(list))
	for i, j := range list {
		seen[j.GetId()] = true
		if !changed && !sameJob(j, t.list[i]) {
			changed = true
		}
		if _, ok := t.jobs[j.GetId()]; !ok {
			ctx, stop := context.WithCancel(t.ctx)
			tj := &tracked{stop: stop}
			t.jobs[j.GetId()] = tj
			t.wg.Add(1)
			go t.follow(ctx, j.GetId(), tj)
		}
	}
	for id, tj := range t.jobs {
		if !seen[id] {
			tj.stop()
			delete(t.jobs, id)
		}
	}
	t.list = list
	if changed {
		t.notify()
	}
}

// sameJob says whether two snapshots of a job show the same thing on the
// page.
func sameJob(a, b *pb.Job) bool {
	return a.GetId() == b.GetId() && a.GetState() == b.GetState() && a.GetRhsDone() == b.GetRhsDone() &&
		a.GetPreconditioner() == b.GetPreconditioner() && a.GetError() == b.GetError() &&
		a.GetLastProgress().GetIteration() == b.GetLastProgress().GetIteration() &&
		a.GetLastProgress().GetRhs() == b.GetLastProgress().GetRhs()
}

// follow collects one job's progress rows until it finishes or is
// forgotten.
func (t *tracker) follow(ctx context.Context, id string, tj *tracked) {
	defer t.wg.Done()
	sub, err := t.src.Subscribe(id)
	if err != nil {
		return // forgotten between the list and the subscription
	}
	defer sub.Close()
	// Each job is followed once from its first event, so the job
	// lifecycle metrics are counted here, from the registry itself.
	t.m.SolveStarted()
	outcome := ""
	for {
		ev, err := sub.Next(ctx)
		if err != nil {
			return
		}
		if p := ev.GetProgress(); p != nil {
			t.mu.Lock()
			tj.add(p)
			t.notify()
			t.mu.Unlock()
		}
		if r := ev.GetResult(); r != nil {
			t.m.IterationsDone(int(r.GetIterations()))
			if outcome == "" || outcome == "converged" {
				outcome = r.GetStatus()
			}
		}
		if f := ev.GetFinished(); f != nil {
			switch f.GetState() {
			case pb.JobState_CANCELLED:
				outcome = "cancelled"
			case pb.JobState_FAILED:
				if outcome == "" || outcome == "converged" {
					outcome = "failed"
				}
			}
			t.m.SolveFinished(outcome, time.Duration(f.GetElapsedSeconds()*1e9))
			t.mu.Lock()
			tj.done = true
			tj.version++
			t.notify()
			t.mu.Unlock()
			return
		}
	}
}

// add appends a progress row to its right-hand side's series.
func (tj *tracked) add(p *pb.Progress) {
	rhs := int(p.GetRhs())
	if rhs < 0 || rhs > 1<<16 {
		return
	}
	for len(tj.series) <= rhs {
		tj.series = append(tj.series, series{stride: 1})
	}
	s := &tj.series[rhs]
	row := krylov.Progress{
		Iteration:    int(p.GetIteration()),
		Elapsed:      time.Duration(p.GetElapsedSeconds() * 1e9),
		ResidualNorm: p.GetResidualNorm(),
		RelResidual:  p.GetRelativeResidual(),
	}
	// Arrival k (from 0) is kept when k is a multiple of the stride; the
	// latest arrival is kept aside as the tip, so the curve always reaches
	// the present.
	if s.seen%s.stride == 0 {
		s.rows = append(s.rows, row)
		s.hasTip = false
	} else {
		s.tip, s.hasTip = row, true
	}
	s.seen++
	if len(s.rows) >= maxRows {
		// Keep arrivals 0, 2·stride, 4·stride, ...: the rows at even
		// indices, which are the multiples of the doubled stride.
		kept := s.rows[:0]
		for i := 0; i < len(s.rows); i += 2 {
			kept = append(kept, s.rows[i])
		}
		clear(s.rows[len(kept):])
		s.rows = kept
		s.stride *= 2
	}
	tj.version++
}

// rows returns a copy of the rows of every right-hand side.
func (t *tracker) rows(id string) ([][]krylov.Progress, bool) {
	t.mu.Lock()
	defer t.mu.Unlock()
	tj, ok := t.jobs[id]
	if !ok {
		return nil, false
	}
	out := make([][]krylov.Progress, len(tj.series))
	for i := range tj.series {
		s := &tj.series[i]
		out[i] = s.all()
	}
	return out, true
}
