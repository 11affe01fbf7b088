package api

import (
	"context"
	"encoding/json"
	"os"
	"reflect"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
)

// TestUploadSolveSuiteSparse uploads bcsstk14 in small chunks, solves with
// progress events, and checks the streamed solution's true residual and
// that it equals a local solve's bit for bit.
func TestUploadSolveSuiteSparse(t *testing.T) {
	a, path := sharedMatrix(t, "bcsstk14.mtx")
	h := startServer(t, Config{})
	c := h.dial(t, client.WithChunkSize(4096))
	ctx := context.Background()

	m, err := c.UploadFile(ctx, path, "")
	if err != nil {
		t.Fatal(err)
	}
	// The collection's index (MANIFEST.tsv): bcsstk14 is 1806×1806 with
	// 32630 stored entries in one triangle, so 2·32630 − 1806 = 63454 in
	// full storage, symmetric.
	if m.GetRows() != 1806 || m.GetCols() != 1806 || m.GetNonzeros() != 63454 || m.GetSymmetry() != "symmetric" {
		t.Fatalf("upload reply %v×%v, %v nonzeros, %s; want 1806×1806, 63454, symmetric",
			m.GetRows(), m.GetCols(), m.GetNonzeros(), m.GetSymmetry())
	}
	if m.GetName() != "bcsstk14.mtx" || m.GetAlreadyStored() {
		t.Errorf("name %q, already stored %v", m.GetName(), m.GetAlreadyStored())
	}
	if m.GetUploadBytes() == 0 {
		t.Errorf("upload_bytes is zero")
	}
	var report struct {
		Rows      int  `json:"rows"`
		Entries   int  `json:"stored_entries"`
		Symmetric bool `json:"symmetric"`
		Diagonal  struct {
			Positive bool `json:"positive"`
		} `json:"diagonal"`
	}
	if err := json.Unmarshal([]byte(m.GetInspectJson()), &report); err != nil {
		t.Fatalf("inspect_json: %v", err)
	}
	// The manifest: all 1806 diagonal entries of bcsstk14 are positive.
	if report.Rows != 1806 || report.Entries != 63454 || !report.Symmetric || !report.Diagonal.Positive {
		t.Errorf("inspect report %+v", report)
	}

	b := onesRHS(a)
	var events []client.Event
	out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b},
		ProgressEvery: 10, Request: solve.Request{Preconditioner: "jacobi"}}, func(e client.Event) { events = append(events, e) })
	if err != nil {
		t.Fatal(err)
	}
	// Stream contract (residua.proto, Solve): queued, accepted, progress
	// from iteration 0 to the final iteration, result, finished.
	if len(events) < 5 || events[0].Queued == nil || events[1].Accepted == nil || events[2].Progress == nil ||
		events[len(events)-2].Result == nil || events[len(events)-1].Finished == nil {
		t.Fatalf("event order wrong: %v", events)
	}
	for i := 1; i < len(events); i++ {
		if events[i].Seq != events[i-1].Seq+1 {
			t.Errorf("seq %d follows %d", events[i].Seq, events[i-1].Seq)
		}
	}
	res := out.Results[0]
	if events[2].Progress.Iteration != 0 {
		t.Errorf("first progress at iteration %d, want 0", events[2].Progress.Iteration)
	}
	if last := events[len(events)-3].Progress; last == nil || last.Iteration != res.Iterations {
		t.Errorf("last progress %v, want iteration %d", last, res.Iterations)
	}
	if !res.Converged || res.Status != "converged" || out.State != solve.Done || out.Outcome != solve.Converged {
		t.Fatalf("result %+v state %s", res, out.State)
	}
	if res.Preconditioner != "jacobi" || *res.RelTol != 1e-8 || res.MaxIter != 10*1806 {
		t.Errorf("settings echo %+v (krylov.Settings defaults: rtol 1e-8, max_iter 10·n)", res)
	}
	x := out.X[0]
	// The stopping test (krylov.Settings): ‖b − A·x‖₂ ≤ rtol·‖b‖₂ on the
	// true residual, recomputed here from the x received.
	if rr := relResidual(a, b, x); rr > 1e-8 {
		t.Errorf("true relative residual of the streamed x is %g > 1e-8", rr)
	}
	xl, rl := localSolve(t, a, b, precond.KindJacobi, krylov.Settings{})
	if !slices.Equal(x, xl) || rl.Iterations != int(res.Iterations) {
		t.Errorf("remote x differs from the local solve's (%d vs %d iterations)", res.Iterations, rl.Iterations)
	}

	// The same matrix again, as raw CSR: the same id, stored once.
	m2, err := c.UploadCSR(ctx, a, "again")
	if err != nil {
		t.Fatal(err)
	}
	if m2.GetId() != m.GetId() || !m2.GetAlreadyStored() {
		t.Errorf("re-upload id %s (already %v), want %s", m2.GetId(), m2.GetAlreadyStored(), m.GetId())
	}
	if ms, err := c.Matrices(ctx); err != nil || len(ms) != 1 {
		t.Errorf("Matrices: %d, %v; want 1", len(ms), err)
	}
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := h.srv.UploadBytes(), st.Size()+m2.GetUploadBytes(); got != want {
		t.Errorf("UploadBytes = %d, want the file's %d bytes plus the raw upload's", got, want)
	}

	// The second solve takes the preconditioner from the cache.
	out2, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}, Request: solve.Request{Preconditioner: "jacobi"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !out2.Accepted.GetFromCache() || !*out2.Results[0].FromCache {
		t.Errorf("second solve not from the cache: %v", out2.Accepted)
	}
	if !slices.Equal(out2.X[0], x) {
		t.Errorf("second solve's x differs")
	}
	// Jacobi keeps the n inverse diagonal entries (8 bytes each).
	if mb, pcb := h.srv.StoredBytes(); mb != a.Bytes() || pcb != 8*1806 {
		t.Errorf("StoredBytes = %d, %d; want %d, %d", mb, pcb, a.Bytes(), 8*1806)
	}
	logs := h.logs.String()
	for _, want := range []string{"msg=upload", "msg=\"job start\"", "msg=\"job end\"", "matrix=" + m.GetId()} {
		if !strings.Contains(logs, want) {
			t.Errorf("logs lack %q", want)
		}
	}
}

// slowProblem is a 2D Poisson problem that unpreconditioned CG needs a few
// hundred iterations for.
func slowProblem(t *testing.T, c *client.Client) (string, []float64) {
	t.Helper()
	a := stencil.Poisson2D(60)
	m, err := c.UploadCSR(context.Background(), a, "poisson2d-60")
	if err != nil {
		t.Fatal(err)
	}
	return m.GetId(), onesRHS(a)
}

// TestWatchers: two clients watch a detached job live and a third joins
// after it finished; all see the job's history.
func TestWatchers(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	ctx := context.Background()
	id, b := slowProblem(t, c)
	gate := make(chan struct{})
	h.srv.testHookIteration = func(ctx context.Context, _ string, _, it int) {
		if it == 5 {
			<-gate // hold the solve until both watchers are attached
		}
	}
	det, err := c.Solve(ctx, client.SolveRequest{MatrixID: id, B: [][]float64{b},
		ProgressEvery: 1, Detach: true, Request: solve.Request{Preconditioner: "none"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if det.JobID == "" || det.X != nil {
		t.Fatalf("detached outcome %+v", det)
	}
	var wg sync.WaitGroup
	seen := make([][]uint64, 2)
	outs := make([]*client.Outcome, 2)
	for w := range 2 {
		wc := h.dial(t)
		wg.Add(1)
		go func() {
			defer wg.Done()
			out, err := wc.Watch(ctx, det.JobID, func(e client.Event) { seen[w] = append(seen[w], e.Seq) })
			if err != nil {
				t.Error(err)
			}
			outs[w] = out
		}()
	}
	waitFor(t, "two watchers", func() bool {
		j, _ := h.srv.jobs.lookup(det.JobID)
		j.mu.Lock()
		defer j.mu.Unlock()
		return len(j.subs) == 2
	})
	close(gate)
	wg.Wait()
	late := h.dial(t)
	var lateSeq []uint64
	lateOut, err := late.Watch(ctx, det.JobID, func(e client.Event) { lateSeq = append(lateSeq, e.Seq) })
	if err != nil {
		t.Fatal(err)
	}
	// The late watcher gets the full history (fewer than 2048 progress
	// events, so none thinned): every seq from 1 to the finished event.
	for i, s := range lateSeq {
		if s != uint64(i+1) {
			t.Fatalf("late replay seq %d at position %d", s, i)
		}
	}
	for w := range 2 {
		if outs[w].DroppedProgress == 0 && !slices.Equal(seen[w], lateSeq) {
			t.Errorf("watcher %d saw %d events, the replay has %d", w, len(seen[w]), len(lateSeq))
		}
		if outs[w].DroppedProgress > 0 && int64(len(seen[w]))+outs[w].DroppedProgress != int64(len(lateSeq)) {
			t.Errorf("watcher %d: %d seen + %d dropped != %d", w, len(seen[w]), outs[w].DroppedProgress, len(lateSeq))
		}
		if !reflect.DeepEqual(outs[w].Results[0], lateOut.Results[0]) {
			t.Errorf("watcher %d result differs", w)
		}
	}
	if !lateOut.Results[0].Converged {
		t.Fatalf("detached job did not converge: %+v", lateOut.Results[0])
	}
	x, err := c.DownloadSolution(ctx, det.JobID, 0)
	if err != nil {
		t.Fatal(err)
	}
	a := stencil.Poisson2D(60)
	if rr := relResidual(a, b, x); rr > 1e-8 {
		t.Errorf("downloaded solution's relative residual %g > 1e-8", rr)
	}
	jobs, err := c.Jobs(ctx)
	if err != nil || len(jobs) != 1 || jobs[0].GetState() != pb.JobState_DONE || !jobs[0].GetSolutionKept() {
		t.Errorf("Jobs: %v, %v", jobs, err)
	}
}

// TestCancelStopsWithinOneIteration cancels an attached solve from the
// client at a known iteration: the stream ends with CANCELED and the
// solver does at most one more iteration.
func TestCancelStopsWithinOneIteration(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	id, b := slowProblem(t, c)
	const at = 20
	reached := make(chan string, 1)
	h.srv.testHookIteration = func(jctx context.Context, jobID string, _, it int) {
		if it == at {
			reached <- jobID
			// Wait until the cancellation has crossed the connection.
			select {
			case <-jctx.Done():
			case <-time.After(10 * time.Second):
			}
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	errc := make(chan error, 1)
	go func() {
		_, err := c.Solve(ctx, client.SolveRequest{MatrixID: id, B: [][]float64{b}, Request: solve.Request{Preconditioner: "none"}}, nil)
		errc <- err
	}()
	jobID := <-reached
	cancel()
	if err := <-errc; status.Code(err) != codes.Canceled {
		t.Fatalf("Solve error %v, want CANCELED", err)
	}
	waitFor(t, "job to end", func() bool {
		j, _ := h.srv.jobs.Job(jobID)
		return j.GetOutcome() == string(solve.Cancelled)
	})
	j, _ := h.srv.jobs.Job(jobID)
	if len(j.GetResults()) != 1 || j.GetResults()[0].GetIterations() > at+1 || j.GetResults()[0].GetStatus() != "cancelled" {
		t.Errorf("cancelled job's result %v; want status cancelled after at most %d iterations", j.GetResults(), at+1)
	}
}

// TestCancelJobRPC cancels an attached job from a second client.
func TestCancelJobRPC(t *testing.T) {
	h := startServer(t, Config{})
	c, other := h.dial(t), h.dial(t)
	id, b := slowProblem(t, c)
	started := make(chan string, 1)
	h.srv.testHookIteration = func(jctx context.Context, jobID string, _, it int) {
		if it == 3 {
			started <- jobID
			<-jctx.Done()
		}
	}
	errc := make(chan error, 1)
	var out *client.Outcome
	go func() {
		var err error
		out, err = c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}, Request: solve.Request{Preconditioner: "none"}}, nil)
		errc <- err
	}()
	jobID := <-started
	if _, err := other.Cancel(context.Background(), jobID); err != nil {
		t.Fatal(err)
	}
	err := <-errc
	if status.Code(err) != codes.Canceled {
		t.Fatalf("Solve error %v, want CANCELED", err)
	}
	// The result and the (partial) solution still arrive before the end.
	if out.Outcome != solve.Cancelled || len(out.Results) != 1 || out.Results[0].Status != "cancelled" || len(out.X[0]) != len(b) {
		t.Errorf("outcome %+v", out)
	}
	if _, err := other.Cancel(context.Background(), "jnope"); status.Code(err) != codes.NotFound {
		t.Errorf("cancel of an unknown job: %v, want NOT_FOUND", err)
	}
}

// TestDeadline: a client deadline ends the stream with DEADLINE_EXCEEDED
// and cancels the job.
func TestDeadline(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	id, b := slowProblem(t, c)
	h.srv.testHookIteration = func(_ context.Context, _ string, _, it int) {
		time.Sleep(3 * time.Millisecond) // a solve of about a second
	}
	ctx, cancel := context.WithTimeout(context.Background(), 300*time.Millisecond)
	defer cancel()
	_, err := c.Solve(ctx, client.SolveRequest{MatrixID: id, B: [][]float64{b}, Request: solve.Request{Preconditioner: "none"}}, nil)
	if status.Code(err) != codes.DeadlineExceeded {
		t.Fatalf("Solve error %v, want DEADLINE_EXCEEDED", err)
	}
	jobs := h.srv.jobs.Jobs()
	if len(jobs) != 1 {
		t.Fatalf("%d jobs, want 1", len(jobs))
	}
	waitFor(t, "job to end", func() bool {
		j, _ := h.srv.jobs.Job(jobs[0].GetId())
		return j.GetOutcome() == string(solve.Cancelled)
	})
	j, _ := h.srv.jobs.Job(jobs[0].GetId())
	if !strings.Contains(j.GetError(), "deadline") {
		t.Errorf("job error %q does not name the deadline", j.GetError())
	}
}

// TestDroppedClient: a client whose connection goes away mid-solve leaves
// no job running and no goroutine behind (the harness checks leaks).
func TestDroppedClient(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	id, b := slowProblem(t, c)
	started := make(chan string, 1)
	h.srv.testHookIteration = func(jctx context.Context, jobID string, _, it int) {
		if it == 3 {
			started <- jobID
		}
		time.Sleep(time.Millisecond)
	}
	dropping := h.dial(t)
	go dropping.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}, Request: solve.Request{Preconditioner: "none"}}, nil)
	jobID := <-started
	dropping.Close()
	waitFor(t, "job to end", func() bool {
		j, _ := h.srv.jobs.Job(jobID)
		return j.GetState() == pb.JobState_DONE
	})
	if j, _ := h.srv.jobs.Job(jobID); j.GetOutcome() != string(solve.Cancelled) {
		t.Errorf("job %v after its client dropped, want CANCELLED", j)
	}
	if q, r := h.srv.jobs.Counts(); q != 0 || r != 0 {
		t.Errorf("%d queued, %d running after the drop", q, r)
	}
}

// TestQueueBound: with one slot and one queue place, a third job is
// refused with RESOURCE_EXHAUSTED.
func TestQueueBound(t *testing.T) {
	h := startServer(t, Config{MaxConcurrentSolves: 1, MaxQueued: 1})
	c := h.dial(t)
	id, b := slowProblem(t, c)
	gate := make(chan struct{})
	h.srv.testHookIteration = func(jctx context.Context, _ string, _, it int) {
		if it == 1 {
			select {
			case <-gate:
			case <-jctx.Done():
			}
		}
	}
	req := client.SolveRequest{MatrixID: id, B: [][]float64{b}, Detach: true, Request: solve.Request{Preconditioner: "none"}}
	first, err := c.Solve(context.Background(), req, nil)
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, "first job running", func() bool {
		j, _ := h.srv.jobs.Job(first.JobID)
		return j.GetState() == pb.JobState_RUNNING
	})
	if _, err := c.Solve(context.Background(), req, nil); err != nil {
		t.Fatal(err)
	}
	_, err = c.Solve(context.Background(), req, nil)
	if status.Code(err) != codes.ResourceExhausted {
		t.Fatalf("third job: %v, want RESOURCE_EXHAUSTED", err)
	}
	close(gate)
	waitFor(t, "jobs to finish", func() bool { q, r := h.srv.jobs.Counts(); return q == 0 && r == 0 })
}
