package ipm

import (
	"context"
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize/convex/lp"
)

// TestAgainstSimplex: Mehrotra's method, with residua solving every
// normal-equations system, reaches the optimum that gonum's simplex
// (optimize/convex/lp, an outside reference) finds for the same program,
// to 1e-6 relative in the objective, with a feasible x (A·x = b to 1e-8
// relative, x ≥ −1e-9), whichever preconditioner the normal equations get.
func TestAgainstSimplex(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		p       LP
		precond string
	}{
		{Bakery(3, 4, 1), "jacobi"},
		{Bakery(8, 25, 2), "jacobi"},
		{Bakery(8, 25, 2), "ic0"},
		{Bakery(20, 40, 3), "jacobi"},
	} {
		p := c.p
		res, err := Solve(context.Background(), p, Options{Preconditioner: c.precond})
		if err != nil {
			t.Fatalf("%s: %v", p.Name, err)
		}
		ref, _, err := lp.Simplex(p.C, mat.DenseCopyOf(p.A), p.B, 1e-10, nil)
		if err != nil {
			t.Fatalf("%s: gonum simplex: %v", p.Name, err)
		}
		rel := math.Abs(res.Objective-ref) / math.Abs(ref)
		if rel > 1e-6 {
			t.Errorf("%s: interior point %.10g, simplex %.10g (relative %g)", p.Name, res.Objective, ref, rel)
		}
		ax := make([]float64, p.A.Rows)
		p.A.MulVec(ax, res.X)
		for i := range ax {
			ax[i] -= p.B[i]
		}
		if r := norm(ax) / norm(p.B); r > 1e-8 || minOf(res.X) < -1e-9 {
			t.Errorf("%s: ‖Ax − b‖/‖b‖ = %g, min x = %g", p.Name, r, minOf(res.X))
		}
		t.Logf("%s (%s): objective %.10g (simplex %.10g, relative difference %.1g) after %d iterations, %d normal-equations solves by residua, worst relres %.2g, max d/min d up to %.2g",
			p.Name, c.precond, res.Objective, ref, rel, res.Iterations, res.Solves, res.WorstRelRes, res.WeightRatio)
	}
}

// TestIterationCap: a cap too small to converge is an error that says so.
func TestIterationCap(t *testing.T) {
	t.Parallel()
	_, err := Solve(context.Background(), Bakery(3, 4, 1), Options{MaxIter: 2})
	if err == nil || !strings.Contains(err.Error(), "did not converge") {
		t.Errorf("%v, want ErrNotConverged", err)
	}
}
