package api

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	refpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// TestConcurrentClients: 16 clients × 4 solves on mixed matrices and
// preconditioners at once; every answer is checked, no job is lost and
// the memory accounting returns to the stored matrices and preconditioners.
func TestConcurrentClients(t *testing.T) {
	files := []string{"nos4.mtx", "494_bus.mtx", "gr_30_30.mtx", "bcsstk05.mtx", "1138_bus.mtx"}
	mats := []*sparse.CSR{stencil.Poisson2D(24)}
	paths := []string{""}
	for _, f := range files {
		a, p := sharedMatrix(t, f)
		mats = append(mats, a)
		paths = append(paths, p)
	}
	h := startServer(t, Config{MaxQueued: 64})
	kinds := []string{"none", "jacobi", "ic0", "auto"}
	const clients, solves = 16, 4
	var wg sync.WaitGroup
	var mu sync.Mutex
	done := 0
	for ci := range clients {
		c := h.dial(t, client.WithChunkSize(8192))
		wg.Add(1)
		go func() {
			defer wg.Done()
			ctx := context.Background()
			rng := rand.New(rand.NewPCG(uint64(ci), 7)) // fixed seed per client
			var outs []*client.Outcome
			var bs [][]float64
			var as []*sparse.CSR
			var wg2 sync.WaitGroup
			outs = make([]*client.Outcome, solves)
			errs := make([]error, solves)
			for k := range solves {
				mi := (ci + k) % len(mats)
				a := mats[mi]
				var m *pb.Matrix
				var err error
				if paths[mi] == "" {
					m, err = c.UploadCSR(ctx, a, "poisson")
				} else {
					m, err = c.UploadFile(ctx, paths[mi], "")
				}
				if err != nil {
					t.Error(err)
					return
				}
				b := make([]float64, a.Rows)
				for i := range b {
					b[i] = rng.Float64() - 0.5
				}
				bs, as = append(bs, b), append(as, a)
				wg2.Add(1)
				go func() {
					defer wg2.Done()
					outs[k], errs[k] = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}, Request: solve.Request{Preconditioner: kinds[(ci+k)%len(kinds)], RelTol: 1e-6}}, nil)
				}()
			}
			wg2.Wait()
			for k := range solves {
				if errs[k] != nil {
					t.Errorf("client %d solve %d: %v", ci, k, errs[k])
					continue
				}
				r := outs[k].Results[0]
				// The stopping test (krylov.Settings) on the true residual;
				// 1% slack for the different summation order here.
				if rr := relResidual(as[k], bs[k], outs[k].X[0]); !r.Converged || rr > 1.01e-6 {
					t.Errorf("client %d solve %d: status %s, relative residual %g", ci, k, r.Status, rr)
				}
				mu.Lock()
				done++
				mu.Unlock()
			}
		}()
	}
	wg.Wait()
	if done != clients*solves {
		t.Fatalf("%d of %d solves verified", done, clients*solves)
	}
	jobs := h.srv.jobs.Jobs()
	finished := 0
	for _, j := range jobs {
		if j.GetState() == pb.JobState_DONE {
			finished++
		}
	}
	if finished != clients*solves {
		t.Errorf("%d finished jobs in the registry, want %d", finished, clients*solves)
	}
	items := h.srv.store.snapshot(func(k key) bool { return k.kind == kindJob })
	if len(items) != 0 {
		t.Errorf("%d job items left in the store after the streams ended", len(items))
	}
	used, budget := h.srv.store.usage()
	var sum int64
	all := h.srv.store.snapshot(func(key) bool { return true })
	for _, it := range all {
		sum += it.bytes
	}
	if used != sum || used > budget {
		t.Errorf("store accounts %d bytes, items hold %d, budget %d", used, sum, budget)
	}
}

// TestShutdown: health goes NOT_SERVING, new work is refused with
// UNAVAILABLE, a running job gets the grace period and is then cancelled
// with its history kept.
func TestShutdown(t *testing.T) {
	// The grace period must outlast the checks made during it, even on a
	// loaded machine; the job is held until it ends.
	h := startServer(t, Config{ShutdownGrace: 2 * time.Second})
	c := h.dial(t)
	id, b := slowProblem(t, c)
	started := make(chan string, 1)
	h.srv.testHookIteration = func(jctx context.Context, jobID string, _, it int) {
		if it == 3 {
			started <- jobID
			<-jctx.Done()
		}
	}
	errc := make(chan error, 1)
	go func() {
		_, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}, ProgressEvery: 1, Request: solve.Request{Preconditioner: "none"}}, nil)
		errc <- err
	}()
	jobID := <-started
	stopped := make(chan struct{})
	go func() { h.stop(); close(stopped) }()
	waitFor(t, "shutdown to begin", func() bool { return h.srv.refuseIfClosing() != nil })
	if _, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}}, nil); status.Code(err) != codes.Unavailable {
		t.Errorf("solve during shutdown: %v, want UNAVAILABLE", err)
	}
	if st, err := c.Health(context.Background()); err != nil || st != healthpb.HealthCheckResponse_NOT_SERVING {
		t.Errorf("health during shutdown: %v %v, want NOT_SERVING", st, err)
	}
	if err := <-errc; status.Code(err) != codes.Canceled {
		t.Errorf("running solve ended with %v, want CANCELED", err)
	}
	<-stopped
	j, err := h.srv.Registry().Job(jobID)
	if err != nil {
		t.Fatal(err)
	}
	if j.GetOutcome() != string(solve.Cancelled) || len(j.GetResults()) != 1 || j.GetLastProgress().GetIteration() != 3 {
		t.Errorf("job after shutdown: %v", j)
	}
	if !strings.Contains(h.logs.String(), "grace period over") {
		t.Errorf("no log line for the cancelled jobs")
	}
}

// TestPanicRecovered: a panic inside a job becomes a failed job and
// INTERNAL, with a log line, and the server keeps serving.
func TestPanicRecovered(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	id, b := slowProblem(t, c)
	h.srv.testHookIteration = func(_ context.Context, _ string, _, it int) {
		if it == 2 {
			panic("test panic in the solver loop")
		}
	}
	out, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}}, nil)
	if status.Code(err) != codes.Internal || out.Outcome != solve.Failed {
		t.Fatalf("%v (outcome %s), want INTERNAL and failed", err, out.Outcome)
	}
	if !strings.Contains(h.logs.String(), "job panicked") {
		t.Errorf("no log line for the panic")
	}
	h.srv.testHookIteration = nil
	if _, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b}}, nil); err != nil {
		t.Errorf("solve after the panic: %v", err)
	}
}

// TestReflection: server reflection lists the services, for generic gRPC
// tooling.
func TestReflection(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	stream, err := refpb.NewServerReflectionClient(c.Conn()).ServerReflectionInfo(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if err := stream.Send(&refpb.ServerReflectionRequest{MessageRequest: &refpb.ServerReflectionRequest_ListServices{}}); err != nil {
		t.Fatal(err)
	}
	resp, err := stream.Recv()
	if err != nil {
		t.Fatal(err)
	}
	stream.CloseSend()
	var names []string
	for _, s := range resp.GetListServicesResponse().GetService() {
		names = append(names, s.GetName())
	}
	for _, want := range []string{"residua.v1.Solver", "grpc.health.v1.Health"} {
		if !slices.Contains(names, want) {
			t.Errorf("reflection lists %v, not %s", names, want)
		}
	}
}

// TestMultipleRHS solves two right-hand sides in one job, the first with
// a starting guess that is already the answer (zero iterations).
func TestMultipleRHS(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	a := stencil.Poisson2D(20)
	m, err := c.UploadCSR(context.Background(), a, "p20")
	if err != nil {
		t.Fatal(err)
	}
	b1 := onesRHS(a)
	b2 := make([]float64, a.Rows)
	for i := range b2 {
		b2[i] = float64(i%7) - 3
	}
	ones := make([]float64, a.Rows)
	for i := range ones {
		ones[i] = 1
	}
	out, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b1, b2},
		X0: [][]float64{ones, make([]float64, a.Rows)}, Request: solve.Request{Preconditioner: "ic0"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(out.Results) != 2 || len(out.X) != 2 {
		t.Fatalf("%d results, %d solutions", len(out.Results), len(out.X))
	}
	// x0 = A⁻¹b exactly: the initial residual is zero, so CG stops at
	// iteration 0 (the stopping test holds before any step).
	if out.Results[0].Iterations != 0 || !slices.Equal(out.X[0], ones) {
		t.Errorf("rhs 0 with the exact start: %d iterations", out.Results[0].Iterations)
	}
	for k, b := range [][]float64{b1, b2} {
		if rr := relResidual(a, b, out.X[k]); rr > 1e-8 {
			t.Errorf("rhs %d: relative residual %g", k, rr)
		}
	}
	if fmt.Sprint(out.Accepted.GetRhsCount()) != "2" {
		t.Errorf("accepted rhs_count %d", out.Accepted.GetRhsCount())
	}
	// The server solves the two as one block (solve.SolveBlock), which
	// takes each through CG's own steps: the solution equals a local solve
	// of that right-hand side alone, bit for bit.
	x := make([]float64, a.Rows)
	if _, _, err := solve.Run(context.Background(), solve.Check(a, "p20", false), solve.Request{Preconditioner: "ic0"}, b2, nil, x, nil); err != nil {
		t.Fatal(err)
	}
	for i := range x {
		if math.Float64bits(x[i]) != math.Float64bits(out.X[1][i]) {
			t.Fatalf("rhs 1: x[%d] = %v remotely, %v locally", i, out.X[1][i], x[i])
		}
	}
}
