package client_test

import (
	"context"
	"math"
	"testing"

	"github.com/residua/residua/api"
	"github.com/residua/residua/client"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
)

// TestSeveralRHS solves one matrix for three different right-hand sides in
// one request, with a chunk size that splits each solution over several
// messages, and checks that solution k belongs to b_k: its true residual
// ‖b_k − A·x_k‖/‖b_k‖, recomputed here by a plain loop over the CSR arrays,
// meets the requested tolerance (krylov.Settings' stopping test on the true
// residual, with 1% for the order of this sum), and the result for k says
// it is for right-hand side k. A solution filed under the wrong index fails
// the residual, since the three b differ in every entry's sign pattern.
func TestSeveralRHS(t *testing.T) {
	c := server(t, api.Config{}, client.WithChunkSize(1000))
	ctx := context.Background()
	a := stencil.Poisson2D(24)
	m, err := c.UploadCSR(ctx, a, "p24")
	if err != nil {
		t.Fatal(err)
	}
	bs := make([][]float64, 3)
	for k := range bs {
		bs[k] = make([]float64, a.Rows)
		for i := range bs[k] {
			bs[k][i] = math.Sin(float64((k+1)*(i+1))) + float64(k)
		}
	}
	const rtol = 1e-8
	out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: bs, Request: solve.Request{Preconditioner: "jacobi", RelTol: rtol}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(out.X) != len(bs) || len(out.Results) != len(bs) {
		t.Fatalf("%d solutions and %d results for %d right-hand sides", len(out.X), len(out.Results), len(bs))
	}
	for k, b := range bs {
		x := out.X[k]
		if len(x) != a.Rows {
			t.Errorf("solution %d has %d entries, want %d", k, len(x), a.Rows)
			continue
		}
		if r := out.Results[k]; r.RHSIndex != k || !r.Converged {
			t.Errorf("result %d: for right-hand side %d, converged %v", k, r.RHSIndex, r.Converged)
		}
		var rr, bb float64
		for i := range a.Rows {
			s := b[i]
			for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
				s -= a.Val[p] * x[a.ColIdx[p]]
			}
			rr += s * s
			bb += b[i] * b[i]
		}
		if rel := math.Sqrt(rr / bb); rel > 1.01*rtol {
			t.Errorf("solution %d: ‖b − A·x‖/‖b‖ = %.3g > %g", k, rel, rtol)
		}
	}
}
