package api

import (
	"context"
	"testing"

	"github.com/residua/residua/client"
	"github.com/residua/residua/solve"
)

// TestCachedSetupKeepsEachJobsSettings: a job whose preconditioner comes
// from the cache solves with its own tolerances and limits, not those of
// the job that built the set-up (the regression the Python client's tests
// caught: a second job ran with the first one's iteration cap).
func TestCachedSetupKeepsEachJobsSettings(t *testing.T) {
	a, _ := sharedMatrix(t, "bcsstk14.mtx")
	h := startServer(t, Config{})
	c := h.dial(t)
	ctx := context.Background()
	m, err := c.UploadCSR(ctx, a, "bcsstk14")
	if err != nil {
		t.Fatal(err)
	}
	b := onesRHS(a)
	first, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b},
		Request: solve.Request{Preconditioner: "jacobi", MaxIter: 3, RelTol: 1e-6}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if r := first.Results[0]; r.Status != string(solve.IterationLimit) || r.Iterations != 3 {
		t.Fatalf("first job: %s after %d iterations, want iteration-limit after 3", r.Status, r.Iterations)
	}
	second, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b},
		Request: solve.Request{Preconditioner: "jacobi"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	r := second.Results[0]
	rtol := -1.0 // absent
	if r.RelTol != nil {
		rtol = float64(*r.RelTol)
	}
	if !second.Accepted.GetFromCache() {
		t.Fatalf("second job did not use the cached set-up")
	}
	// krylov.Settings' defaults: rtol 1e-8, at most 10·n iterations.
	if r.Status != string(solve.Converged) || r.MaxIter != 10*a.Rows || rtol != 1e-8 {
		t.Errorf("second job: %s, max_iter %d, rtol %v; want converged with the defaults (max_iter %d, rtol 1e-8)",
			r.Status, r.MaxIter, rtol, 10*a.Rows)
	}
}
