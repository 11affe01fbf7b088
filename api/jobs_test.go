package api

import (
	"context"
	"io"
	"log/slog"
	"testing"

	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

func testJob() *job {
	j := newJob("jtest", 1, false)
	j.info = &pb.Job{Id: "jtest"}
	return j
}

func progressEvent(it int) *pb.JobEvent {
	return &pb.JobEvent{Event: &pb.JobEvent_Progress{Progress: &pb.Progress{Iteration: int64(it)}}}
}

// TestSlowSubscriber: a subscriber that does not read never blocks the
// publisher; it keeps the newest progress events, counts the dropped ones,
// and never drops a result or the finished event.
func TestSlowSubscriber(t *testing.T) {
	r := newRegistry(slog.New(slog.NewTextHandler(io.Discard, nil)), nil, 1, 1, 10)
	j := testJob()
	sub := j.subscribe()
	defer sub.Close()
	const n = 1000
	for it := range n {
		j.publish(progressEvent(it))
		if it == 10 {
			j.publish(&pb.JobEvent{Event: &pb.JobEvent_Result{Result: &pb.SolveResult{Iterations: 10}}})
		}
	}
	r.finish(j, solve.Converged, nil)
	var progress []int64
	var results, finished int
	var dropped int64
	for {
		ev, err := sub.Next(context.Background())
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		switch {
		case ev.GetProgress() != nil:
			progress = append(progress, ev.GetProgress().GetIteration())
		case ev.GetResult() != nil:
			results++
		case ev.GetFinished() != nil:
			finished++
			dropped = ev.GetFinished().GetDroppedProgress()
		}
	}
	if results != 1 || finished != 1 {
		t.Fatalf("%d results, %d finished events; want 1 each", results, finished)
	}
	if len(progress) != subscriberProgress || dropped != n-subscriberProgress {
		t.Fatalf("%d progress events kept, %d dropped; want %d and %d", len(progress), dropped, subscriberProgress, n-subscriberProgress)
	}
	if progress[0] != n-subscriberProgress || progress[len(progress)-1] != n-1 {
		t.Errorf("kept iterations %d..%d, want the newest", progress[0], progress[len(progress)-1])
	}
}

// TestEventThinning: a long solve's replay keeps at most
// eventProgress progress events, spread over the whole solve, and a late
// subscriber replays it.
func TestEventThinning(t *testing.T) {
	j := testJob()
	const n = 10 * eventProgress
	for it := range n {
		j.publish(progressEvent(it))
	}
	sub := j.subscribe()
	defer sub.Close()
	var its []int64
	for range sub.replay {
		ev, err := sub.Next(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		its = append(its, ev.GetProgress().GetIteration())
	}
	if len(its) > eventProgress || len(its) < eventProgress/4 {
		t.Fatalf("history holds %d progress events, want at most %d and not far fewer", len(its), eventProgress)
	}
	if its[0] != 0 || its[len(its)-1] < n-n/eventProgress*8 {
		t.Errorf("history spans iterations %d..%d of 0..%d", its[0], its[len(its)-1], n-1)
	}
	for i := 1; i < len(its); i++ {
		if its[i] <= its[i-1] {
			t.Fatalf("history out of order at %d", i)
		}
	}
}
