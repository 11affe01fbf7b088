package web

import (
	"context"
	"sync"
	"time"

	"github.com/residua/residua/history"
	pb "github.com/residua/residua/proto/residua/v1"
)

// tracker polls a Source: every poll interval it reads the job list and
// the history version of each job not yet seen done, and wakes the event
// streams when anything changed. It keeps no rows of its own: the page's
// histories are the server's (Source.History).
type tracker struct {
	src  Source
	poll time.Duration

	ctx    context.Context
	cancel context.CancelFunc
	wg     sync.WaitGroup

	mu       sync.Mutex // guards the fields below
	list     []*pb.Job  // the latest snapshot, newest first
	versions map[string]uint64
	done     map[string]bool // seen done, with its final version read
	changed  chan struct{}   // closed and replaced at every change
	svg      map[string]cachedSVG
}

// cachedSVG is a job's chart, rendered for one version of its history.
type cachedSVG struct {
	version uint64
	body    []byte
}

func newTracker(src Source, poll time.Duration) *tracker {
	ctx, cancel := context.WithCancel(context.Background())
	t := &tracker{src: src, poll: poll, ctx: ctx, cancel: cancel, versions: map[string]uint64{}, done: map[string]bool{},
		changed: make(chan struct{}), svg: map[string]cachedSVG{}}
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

// wait returns a channel closed at the next change.
func (t *tracker) wait() <-chan struct{} {
	t.mu.Lock()
	defer t.mu.Unlock()
	return t.changed
}

// refresh reads the job list and the versions of the jobs that may still
// change, and forgets the jobs that have left the list.
func (t *tracker) refresh() {
	list := t.src.Jobs()
	versions := make(map[string]uint64, len(list))
	t.mu.Lock()
	for _, j := range list {
		if v, ok := t.versions[j.GetId()]; ok && t.done[j.GetId()] {
			versions[j.GetId()] = v
		}
	}
	t.mu.Unlock()
	for _, j := range list {
		id := j.GetId()
		if _, ok := versions[id]; ok {
			continue
		}
		if _, v, err := t.src.History(id); err == nil {
			versions[id] = v
		}
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	changed := len(list) != len(t.list)
	for i, j := range list {
		id := j.GetId()
		if !changed && (t.list[i].GetId() != id || t.list[i].GetState() != j.GetState() || t.versions[id] != versions[id]) {
			changed = true
		}
		if j.GetState() == pb.JobState_DONE {
			t.done[id] = true
		}
	}
	for id := range t.versions {
		if _, ok := versions[id]; !ok {
			delete(t.done, id)
			delete(t.svg, id)
		}
	}
	t.list, t.versions = list, versions
	if changed {
		close(t.changed)
		t.changed = make(chan struct{})
	}
}

// histories reads a job's histories from the source.
func (t *tracker) histories(id string) ([]history.History, uint64, bool) {
	h, v, err := t.src.History(id)
	return h, v, err == nil
}
