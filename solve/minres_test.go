package solve

import (
	"context"
	"strings"
	"testing"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// minresRows records the iteration numbers a solve reports.
type minresRows struct {
	iters    []int
	finished int
}

func (r *minresRows) Record(p krylov.Progress) error {
	r.iters = append(r.iters, p.Iteration)
	return nil
}
func (r *minresRows) Finish(*krylov.Result) { r.finished++ }

// TestAutoMINRES: the automatic method picks MINRES for a symmetric matrix
// whose diagonal shows it is not positive definite (a positive definite
// matrix has a positive diagonal: Golub and Van Loan, 4th ed., §4.2.1), and
// hands over to MINRES when conjugate gradients breaks down on one whose
// diagonal is positive; a saddle-point matrix gets the block
// preconditioner.
func TestAutoMINRES(t *testing.T) {
	t.Parallel()
	// [[1 2 0] [2 1 0] [0 0 3]]: positive diagonal, eigenvalues 3, −1, 3.
	pos, _ := sparse.NewCSR(3, 3, []int{0, 2, 4, 5}, []int32{0, 1, 0, 1, 2}, []float64{1, 2, 2, 1, 3})
	// Poisson with a sign flip on one row's diagonal.
	neg := stencil.Poisson2D(10)
	neg.Val[0] = -4 // row 0 stores its diagonal first (columns 0, 1, 10)
	kkt := stencil.Saddle(stencil.Poisson2D(12), stencil.Constraints(30, 144, 3, 2), 0)
	for _, c := range []struct {
		name, reason, precond string
		a                     *sparse.CSR
	}{
		{"positive diagonal, indefinite", "broke down", "none", pos},
		{"negative diagonal", "not positive definite", "jacobi", neg},
		{"saddle point", "not positive definite", "block", kkt},
	} {
		a := c.a
		n := a.Rows
		ones := make([]float64, n)
		for i := range ones {
			ones[i] = 1
		}
		ones[0] = 2 // b = A·(2, 1, 1, ...), not an eigenvector of pos
		b := make([]float64, n)
		a.MulVec(b, ones)
		x := make([]float64, n)
		rec := &minresRows{}
		sum, _, err := Run(context.Background(), Check(a, c.name, false), Request{}, b, nil, x, rec)
		if err != nil || !sum.Converged || sum.Method != "minres" || !strings.Contains(sum.MethodReason, c.reason) || sum.Preconditioner != c.precond {
			t.Errorf("%s: %v: method %s (%s), preconditioner %s, %s", c.name, err, sum.Method, sum.MethodReason, sum.Preconditioner, sum.Headline)
			continue
		}
		if rel := relResidual(a, b, x); rel > 1e-8 {
			t.Errorf("%s: true relative residual %g", c.name, rel)
		}
		if rec.finished != 1 {
			t.Errorf("%s: Finish called %d times", c.name, rec.finished)
		}
		for i := 1; i < len(rec.iters); i++ {
			if rec.iters[i] <= rec.iters[i-1] {
				t.Errorf("%s: progress iterations %v not increasing", c.name, rec.iters)
				break
			}
		}
		if last := rec.iters[len(rec.iters)-1]; last != sum.Iterations {
			t.Errorf("%s: last progress row at iteration %d, summary says %d", c.name, last, sum.Iterations)
		}
	}
}

// TestMINRESSingularWarning: a singular symmetric matrix with b outside its
// range (row and column 1 empty, b₁ = 1) gives a summary that says so.
func TestMINRESSingularWarning(t *testing.T) {
	t.Parallel()
	a, _ := sparse.NewCSR(3, 3, []int{0, 0, 2, 4}, []int32{1, 2, 1, 2}, []float64{2, 1, 1, -3})
	b := []float64{1, 1, 1}
	x := make([]float64, 3)
	sum, _, err := Run(context.Background(), Check(a, "singular", false), Request{Method: MINRES, Preconditioner: "none"}, b, nil, x, nil)
	if err != nil || sum.Converged || sum.Warning != WarnSingular || !strings.Contains(sum.Headline, "singular") || sum.NormalResidualNorm == nil {
		t.Errorf("%v: %s; warning %q %s", err, sum.Headline, sum.Warning, sum.WarningText)
	}
}
