package solve

import (
	"context"
	"encoding/json"
	"math"
	"testing"

	"github.com/residua/residua/sparse/stencil"
)

// TestRunBlock: RunBlock gives each right-hand side the summary and the
// solution Run gives it alone (the block method takes each through CG's
// own steps, krylov's TestCGBlockMatchesCG), apart from the timings, for
// the preconditioners of a system and for least squares; and a set-up that
// fails gives every right-hand side Failure's summary.
func TestRunBlock(t *testing.T) {
	t.Parallel()
	a := stencil.Jump3D(12, 1e3)
	n := a.Rows
	m := Check(a, "jump3d-12", false)
	bs := make([][]float64, 5)
	for c := range bs {
		bs[c] = make([]float64, n)
		for i := range bs[c] {
			bs[c][i] = math.Sin(float64((c+1)*i) * 0.01)
		}
	}
	for _, req := range []Request{
		{Preconditioner: "none"}, {Preconditioner: "jacobi", RelTol: 1e-10}, {Preconditioner: "ic0"},
		{LeastSquares: true, Preconditioner: "none"},
	} {
		xs := make([][]float64, len(bs))
		for c := range xs {
			xs[c] = make([]float64, n)
		}
		sums, _, err := RunBlock(context.Background(), m, req, bs, nil, xs, nil)
		if err != nil {
			t.Fatal(err)
		}
		for c := range bs {
			x := make([]float64, n)
			want, _, err := Run(context.Background(), m, req, bs[c], nil, x, nil)
			if err != nil {
				t.Fatal(err)
			}
			got := sums[c]
			if got.RHSIndex != c {
				t.Errorf("%s: summary %d has rhs_index %d", req.Preconditioner, c, got.RHSIndex)
			}
			for _, s := range []*Summary{&got, &want} {
				s.RHSIndex, s.SetupSeconds, s.SolveSeconds, s.SecondsPerIteration = 0, 0, 0, 0
				s.Headline = ""
			}
			gj, _ := json.Marshal(got)
			wj, _ := json.Marshal(want)
			if string(gj) != string(wj) {
				t.Errorf("%s column %d:\nblock %s\nalone %s", req.Preconditioner, c, gj, wj)
			}
			for i := range x {
				if math.Float64bits(x[i]) != math.Float64bits(xs[c][i]) {
					t.Fatalf("%s column %d: x[%d] %v, alone %v", req.Preconditioner, c, i, xs[c][i], x[i])
				}
			}
		}
	}
	pa := stencil.Poisson2D(3)
	pa.Val[0] = 0 // a zero diagonal entry: Jacobi refuses it
	bad := Check(pa, "zero diagonal", false)
	sums, setup, err := RunBlock(context.Background(), bad, Request{Preconditioner: "jacobi"}, bs[:2], nil, [][]float64{nil, nil}, nil)
	if err == nil || setup != nil || len(sums) != 2 || sums[1].Status != string(SetupFailed) || sums[1].RHSIndex != 1 {
		t.Fatalf("failed set-up: %v, %v, %+v", err, setup, sums)
	}
}
