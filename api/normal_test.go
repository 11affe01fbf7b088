package api

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// normalWeights returns interior-point-like weights for step k of 30: they
// spread from all ones towards 10^±(k/8) (half the columns' x_j/s_j grow,
// half shrink, as near an optimum: Nocedal and Wright, 2nd ed., §14.1),
// max d/min d up to about 10⁷, fixed seed. (Random weights spread further,
// column by column, make B·D·Bᵀ too ill-conditioned for a 1e-8 residual
// with Jacobi; a real interior-point method regularises or stops there.)
func normalWeights(n, k int) []float64 {
	rng := rand.New(rand.NewPCG(uint64(k), 5))
	d := make([]float64, n)
	for j := range d {
		e := float64(k) / 8 * rng.Float64()
		if j%2 == 1 {
			e = -e
		}
		d[j] = math.Pow(10, e)
	}
	return d
}

// normalSequence uploads B once and sends 30 normal-equations requests with
// new weights each, as an interior-point loop does, checking each answer
// against the same solve run in-process (bit for bit: the kernels are
// deterministic) and returning the per-request wall time and set-up time.
func normalSequence(tb testing.TB, c *client.Client, b *sparse.CSR, precond string, requests int) (total, setup time.Duration, iters int) {
	ctx := context.Background()
	info, err := c.UploadCSR(ctx, b, "B")
	if err != nil {
		tb.Fatal(err)
	}
	cache := solve.NewNormalCache(b)
	rhs := make([]float64, b.Rows)
	for i := range rhs {
		rhs[i] = 1 + float64(i%7)
	}
	for k := range requests {
		d := normalWeights(b.Cols, k)
		start := time.Now()
		out, err := c.Solve(ctx, client.SolveRequest{MatrixID: info.GetId(), B: [][]float64{rhs}, Weights: d, Reg: 1e-8,
			Request: solve.Request{Preconditioner: precond}}, nil)
		total += time.Since(start)
		if err != nil || len(out.Results) != 1 || !out.Results[0].Converged {
			tb.Fatalf("request %d: %v (%d results)", k, err, len(out.Results))
		}
		sum := out.Results[0]
		iters += sum.Iterations
		setup += time.Duration(float64(sum.SetupSeconds) * float64(time.Second))
		if sum.WeightRatio == nil || sum.Operator == "" {
			tb.Fatalf("request %d: summary lacks the normal-equations fields: %+v", k, sum)
		}
		if precond == "ic0" && k > 0 && !strings.Contains(sum.PreconditionerReason, "reused the pattern") {
			tb.Errorf("request %d: the pattern of B·Bᵀ was not reused: %s", k, sum.PreconditionerReason)
		}
		s, err := solve.PrepareNormal(solve.Matrix{A: b, Name: "B"}, solve.Request{Preconditioner: precond}, solve.Weights{D: d, Delta: 1e-8}, cache)
		if err != nil {
			tb.Fatal(err)
		}
		y := make([]float64, b.Rows)
		if _, err := s.Solve(ctx, rhs, nil, y, nil); err != nil {
			tb.Fatal(err)
		}
		for i := range y {
			if y[i] != out.X[0][i] {
				tb.Fatalf("request %d: remote y[%d] = %g, local %g", k, i, out.X[0][i], y[i])
			}
		}
	}
	return total, setup, iters
}

// TestNormalSequence: B is uploaded once; 30 requests carry new weights
// and δ; every one converges and agrees bit for bit with the in-process
// solve; with IC(0) the pattern of B·Bᵀ is computed once and reused. Bad
// weights are refused by name.
func TestNormalSequence(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	b := stencil.Constraints(200, 800, 4, 3)
	for _, pc := range []string{"jacobi", "ic0"} {
		total, setup, _ := normalSequence(t, c, b, pc, 30)
		t.Logf("%s: 30 requests in %v, %v per request, set-up %.0f%% of it", pc, total, total/30, 100*setup.Seconds()/total.Seconds())
	}
	info, err := c.UploadCSR(context.Background(), b, "B")
	if err != nil {
		t.Fatal(err)
	}
	bad := normalWeights(800, 3)
	bad[5] = -1
	_, err = c.Solve(context.Background(), client.SolveRequest{MatrixID: info.GetId(), B: [][]float64{make([]float64, 200)}, Weights: bad}, nil)
	if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), "weights") {
		t.Errorf("negative weight: %v, want INVALID_ARGUMENT naming the weights", err)
	}
	_, err = c.Solve(context.Background(), client.SolveRequest{MatrixID: info.GetId(), B: [][]float64{make([]float64, 200)}, Weights: bad[:10]}, nil)
	if status.Code(err) != codes.InvalidArgument {
		t.Errorf("short weights: %v, want INVALID_ARGUMENT", err)
	}
}

// BenchmarkNormalSequence is the 30-request interior-point sequence on a
// larger B (a random full-rank 50 000 × 200 000 constraint matrix, eight
// entries per row), over the in-process gRPC connection: time per request
// and the share of the preconditioner set-up in it (the first ic0 request
// includes the symbolic product), and CG iterations per request. The time
// per request is the client's Solve call: the weights' and right-hand
// side's transfer, the job, the solution's return.
func BenchmarkNormalSequence(b *testing.B) {
	c := benchServer(b, Config{})
	bm := stencil.Constraints(50000, 200000, 8, 7)
	for _, pc := range []string{"jacobi", "ic0"} {
		b.Run(pc, func(b *testing.B) {
			var total, setup time.Duration
			iters := 0
			for range b.N {
				tt, ss, it := normalSequence(b, c, bm, pc, 30)
				total, setup, iters = total+tt, setup+ss, iters+it
			}
			b.ReportMetric(total.Seconds()/float64(30*b.N)*1e3, "ms/request")
			b.ReportMetric(float64(iters)/float64(30*b.N), "iters/request")
			b.ReportMetric(setup.Seconds()/total.Seconds(), "setup-share")
		})
	}
}

// TestNormalMemoryBound: IC(0) of B·D·Bᵀ is refused with
// RESOURCE_EXHAUSTED when its bound exceeds the memory budget (a B with one
// dense column makes B·D·Bᵀ dense: 3000² entries), while Jacobi, which
// never forms it, still runs.
func TestNormalMemoryBound(t *testing.T) {
	h := startServer(t, Config{MemoryBudget: 64 << 20})
	c := h.dial(t)
	m := 3000
	ii, jj, vv := make([]int32, 0, 2*m), make([]int32, 0, 2*m), make([]float64, 0, 2*m)
	for i := range m {
		ii, jj, vv = append(ii, int32(i), int32(i)), append(jj, 0, int32(i+1)), append(vv, 1, 2)
	}
	b, _, err := sparse.FromTriplets(m, m+1, ii, jj, vv, sparse.BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	info, err := c.UploadCSR(context.Background(), b, "dense column")
	if err != nil {
		t.Fatal(err)
	}
	d := normalWeights(m+1, 4)
	rhs := make([]float64, m)
	for i := range rhs {
		rhs[i] = 1
	}
	_, err = c.Solve(context.Background(), client.SolveRequest{MatrixID: info.GetId(), B: [][]float64{rhs}, Weights: d,
		Request: solve.Request{Preconditioner: "ic0"}}, nil)
	if status.Code(err) != codes.ResourceExhausted {
		t.Errorf("ic0 on a dense B·D·Bᵀ: %v, want RESOURCE_EXHAUSTED", err)
	}
	out, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: info.GetId(), B: [][]float64{rhs}, Weights: d,
		Request: solve.Request{Preconditioner: "jacobi"}}, nil)
	if err != nil || !out.Results[0].Converged {
		t.Errorf("jacobi: %v", err)
	}
}
