package api

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/client"
	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

func bitwise(x, y []float64) bool {
	return slices.EqualFunc(x, y, func(p, q float64) bool { return math.Float64bits(p) == math.Float64bits(q) })
}

// TestJobResumesAfterRestart: a detached job with two right-hand sides is
// interrupted by a shutdown in the middle of the second (a checkpoint is
// written as the shutdown cancels it); after a restart on the same data
// folder the job runs again under its id, the first right-hand side
// restored and the second resumed from its checkpoint, and both kept
// solutions are bitwise those of an uninterrupted solve in process (the
// embedded path the service matches bit for bit), the second's history
// ending at the uninterrupted solve's last iteration. A job that finished
// before the restart is listed again with its results, history and
// solution.
func TestJobResumesAfterRestart(t *testing.T) {
	dir := t.TempDir()
	a := stencil.Poisson2D(40)
	b0 := onesRHS(a)
	b1 := make([]float64, a.Rows)
	for i := range b1 {
		b1[i] = float64(i%5) - 2
	}
	req := solve.Request{Preconditioner: "none", RelTol: 1e-10}
	set := krylov.Settings{RelTol: 1e-10}
	x0ref, _ := localSolve(t, a, b0, precond.KindNone, set)
	x1ref, res1 := localSolve(t, a, b1, precond.KindNone, set)

	h1 := startServer(t, Config{DataDir: dir, ShutdownGrace: time.Millisecond, CheckpointEvery: time.Hour})
	c1 := h1.dial(t)
	m, err := c1.UploadCSR(context.Background(), a, "plate")
	if err != nil {
		t.Fatal(err)
	}
	// A job that finishes before the restart.
	fin, err := c1.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b0}, Request: req, KeepSolution: true}, nil)
	if err != nil || fin.Outcome != solve.Converged {
		t.Fatalf("first job: %v %v", fin.Outcome, err)
	}
	held := make(chan struct{})
	h1.srv.testHookIteration = func(jctx context.Context, _ string, rhs, it int) {
		if rhs == 1 && it == 7 {
			close(held)
			<-jctx.Done() // until the shutdown cancels the job
		}
	}
	det, err := c1.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b0, b1}, Request: req, Detach: true}, nil)
	if err != nil {
		t.Fatal(err)
	}
	<-held
	c1.Close()
	h1.stop()
	if _, err := os.Stat(filepath.Join(dir, "jobs", det.JobID+".1.ck")); err != nil {
		t.Fatalf("no checkpoint after the shutdown: %v", err)
	}

	h2 := startServer(t, Config{DataDir: dir})
	c2 := h2.dial(t)
	out, err := c2.Watch(context.Background(), det.JobID, nil)
	if err != nil || out.Outcome != solve.Converged || len(out.Results) != 2 {
		t.Fatalf("resumed job: %v, %v, %d results\n%s", out.Outcome, err, len(out.Results), h2.logs.String())
	}
	for i, want := range [][]float64{x0ref, x1ref} {
		x, err := c2.DownloadSolution(context.Background(), det.JobID, i)
		if err != nil {
			t.Fatal(err)
		}
		if !bitwise(x, want) {
			t.Errorf("right-hand side %d: the resumed job's x differs from the uninterrupted solve's", i)
		}
	}
	hist, err := c2.History(context.Background(), det.JobID, 1)
	if err != nil || len(hist.Rows) == 0 || hist.Rows[len(hist.Rows)-1].Iteration != res1.Iterations || hist.Rows[0].Iteration != 0 {
		t.Errorf("history of the resumed right-hand side: %d rows, %v; want 0 … %d", len(hist.Rows), err, res1.Iterations)
	}
	if r := out.Results[1].ResumedFrom; r == nil || *r != 7 {
		t.Errorf("the resumed right-hand side's result says resumed_from_iteration %v, want 7", r)
	}
	if out.Results[0].ResumedFrom != nil {
		t.Errorf("the restored first right-hand side says it resumed")
	}
	if !strings.Contains(h2.logs.String(), "job resumed") || !strings.Contains(h2.logs.String(), "iteration=7") {
		t.Errorf("no log line saying where the job resumed:\n%s", h2.logs.String())
	}
	// The job that had finished is there, with its solution.
	j, err := c2.Job(context.Background(), fin.JobID)
	if err != nil || j.GetOutcome() != string(solve.Converged) || len(j.GetResults()) != 1 {
		t.Fatalf("finished job after the restart: %v, %v", j, err)
	}
	x, err := c2.DownloadSolution(context.Background(), fin.JobID, 0)
	if err != nil || !bitwise(x, x0ref) {
		t.Errorf("finished job's solution after the restart: %v", err)
	}
	if r := relResidual(a, b1, x1ref); r > 1e-10 {
		t.Errorf("the reference itself: relative residual %g", r)
	}
}

// TestAttachedJobAfterCrash: a job attached to its client's stream whose
// server died (its record left open, as a kill leaves it) is reported
// after the restart as cancelled, saying why.
func TestAttachedJobAfterCrash(t *testing.T) {
	dir := t.TempDir()
	h1 := startServer(t, Config{DataDir: dir})
	c1 := h1.dial(t)
	a := stencil.Poisson2D(10)
	m, _ := c1.UploadCSR(context.Background(), a, "small")
	out, err := c1.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{onesRHS(a)}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	c1.Close()
	h1.stop()
	// Reopen the record as a kill in the middle of the solve leaves it.
	js, err := openJobStore(dir, time.Second, h1.srv.log)
	if err != nil {
		t.Fatal(err)
	}
	if err := js.update(out.JobID, func(r *jobRecord) { r.Done, r.Results = false, nil }); err != nil {
		t.Fatal(err)
	}
	js.close()

	h2 := startServer(t, Config{DataDir: dir})
	j, err := h2.dial(t).Job(context.Background(), out.JobID)
	if err != nil || j.GetOutcome() != string(solve.Cancelled) || !strings.Contains(j.GetError(), "server restarted") {
		t.Fatalf("attached job after the restart: %v, %v", j, err)
	}
}

// TestJobStoreDamaged: a damaged job store file, a torn checkpoint and a
// damaged kept solution are each detected: the store is quarantined with a
// log line and the server serves its matrices still; a torn checkpoint
// makes its right-hand side start again (with a log line naming the file)
// and still reach the uninterrupted answer; a damaged solution is refused
// with NOT_FOUND saying so, never sent.
func TestJobStoreDamaged(t *testing.T) {
	dir := t.TempDir()
	a := stencil.Poisson2D(30)
	b := onesRHS(a)
	req := solve.Request{Preconditioner: "none", RelTol: 1e-10}
	xref, _ := localSolve(t, a, b, precond.KindNone, krylov.Settings{RelTol: 1e-10})

	h1 := startServer(t, Config{DataDir: dir, ShutdownGrace: time.Millisecond, CheckpointEvery: time.Hour})
	c1 := h1.dial(t)
	m, _ := c1.UploadCSR(context.Background(), a, "plate")
	fin, err := c1.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}, Request: req, KeepSolution: true}, nil)
	if err != nil {
		t.Fatal(err)
	}
	held := make(chan struct{})
	h1.srv.testHookIteration = func(jctx context.Context, _ string, _, it int) {
		if it == 5 {
			close(held)
			<-jctx.Done()
		}
	}
	det, err := c1.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}, Request: req, Detach: true}, nil)
	if err != nil {
		t.Fatal(err)
	}
	<-held
	c1.Close()
	h1.stop()
	ck := filepath.Join(dir, "jobs", det.JobID+".0.ck")
	raw, err := os.ReadFile(ck)
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(ck, raw[:len(raw)/2], 0o644)
	sol := filepath.Join(dir, "jobs", fin.JobID+".0.x")
	raw, _ = os.ReadFile(sol)
	raw[len(raw)-10] ^= 1
	os.WriteFile(sol, raw, 0o644)

	h2 := startServer(t, Config{DataDir: dir})
	c2 := h2.dial(t)
	out, err := c2.Watch(context.Background(), det.JobID, nil)
	if err != nil || out.Outcome != solve.Converged {
		t.Fatalf("job with a torn checkpoint: %v %v", out.Outcome, err)
	}
	if x, err := c2.DownloadSolution(context.Background(), det.JobID, 0); err != nil || !bitwise(x, xref) {
		t.Errorf("job restarted from x0 after a torn checkpoint: %v", err)
	}
	if logs := h2.logs.String(); !strings.Contains(logs, "checkpoint unreadable") || !strings.Contains(logs, ck) {
		t.Errorf("no log line naming the torn checkpoint:\n%s", logs)
	}
	if _, err := c2.DownloadSolution(context.Background(), fin.JobID, 0); err == nil || !strings.Contains(err.Error(), "damaged") {
		t.Errorf("damaged solution: %v", err)
	}
	c2.Close()
	h2.stop()

	// The store itself: its first page overwritten.
	db := filepath.Join(dir, "jobs.db")
	f, _ := os.OpenFile(db, os.O_WRONLY, 0)
	f.WriteAt(make([]byte, 8192), 0)
	f.Close()
	h3 := startServer(t, Config{DataDir: dir})
	if logs := h3.logs.String(); !strings.Contains(logs, "quarantined a damaged file") || !strings.Contains(logs, db) {
		t.Errorf("no quarantine line for the damaged store:\n%s", logs)
	}
	c3 := h3.dial(t)
	if list, err := c3.Matrices(context.Background()); err != nil || len(list) != 1 {
		t.Errorf("matrices after the store was quarantined: %v %v", list, err)
	}
	if x := solveByID(t, c3, m.GetId(), b); relResidual(a, b, x) > 1e-9 {
		t.Error("solve after the store was quarantined")
	}
}

// TestJobFilesInBudget: kept solutions count against the disk budget, and
// the matrix a running job uses is never evicted to make room for them:
// with a budget that holds the matrix and nothing more, the solution is
// not written to disk (a log line says so), stays downloadable from
// memory, and the matrix stays.
func TestJobFilesInBudget(t *testing.T) {
	dir := t.TempDir()
	a := stencil.Poisson2D(30)
	id := wire.MatrixID(a)
	meta, _ := proto.Marshal(newMatrixEntry(a, "plate", id, wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))).info)
	budget := csrfile.Bytes(csrfile.Matrix, a.Rows, a.NNZ(), id, meta) + 100
	h := startServer(t, Config{DataDir: dir, DiskBudget: budget})
	c := h.dial(t)
	m, err := c.UploadCSR(context.Background(), a, "plate")
	if err != nil {
		t.Fatal(err)
	}
	out, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{onesRHS(a)}, Detach: true}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := c.Watch(context.Background(), out.JobID, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := c.DownloadSolution(context.Background(), out.JobID, 0); err != nil {
		t.Errorf("solution from memory: %v", err)
	}
	if !strings.Contains(h.logs.String(), "solution not kept on disk") {
		t.Errorf("no log line for the solution over the budget:\n%s", h.logs.String())
	}
	if _, err := os.Stat(filepath.Join(dir, "matrices", m.GetId()+".csr")); err != nil {
		t.Errorf("the running job's matrix was evicted: %v", err)
	}
}
