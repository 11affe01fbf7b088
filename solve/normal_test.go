package solve

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// TestNormalSolve: (B·D·Bᵀ + δI)·y = r solved matrix-free agrees with
// gonum's dense Cholesky solution of the same matrix formed densely, within
// κ·(relres + nε) (Higham, 2nd ed., §7.1; κ from gonum's condition
// estimate), for weights spanning 10⁻⁴…10⁴ and with each preconditioner;
// the summary reports max d/min d, δ and the forward-error estimate. With
// IC(0) the second solve reuses the pattern of B·Bᵀ.
func TestNormalSolve(t *testing.T) {
	t.Parallel()
	b := stencil.Constraints(60, 200, 4, 5)
	rng := rand.New(rand.NewPCG(9, 9))
	cache := NewNormalCache(b)
	for round, kind := range []string{"jacobi", "ic0", "ic0", "none", "auto"} {
		d := make([]float64, 200)
		for j := range d {
			d[j] = math.Pow(10, -4+8*rng.Float64())
		}
		d[0], d[1] = 1e-4, 1e4
		delta := 1e-6
		r := make([]float64, 60)
		for i := range r {
			r[i] = rng.NormFloat64()
		}
		s, err := PrepareNormal(Matrix{A: b, Name: "B"}, Request{Preconditioner: kind}, Weights{D: d, Delta: delta}, cache)
		if err != nil {
			t.Fatalf("%s: %v", kind, err)
		}
		y := make([]float64, 60)
		sum, err := s.Solve(context.Background(), r, nil, y, nil)
		if err != nil || !sum.Converged {
			t.Fatalf("%s: %v %s", kind, err, sum.Headline)
		}
		if kind == "ic0" && round == 2 && !strings.Contains(sum.PreconditionerReason, "reused the pattern") {
			t.Errorf("second ic0 solve: %s", sum.PreconditionerReason)
		}
		if sum.WeightRatio == nil || math.Abs(float64(*sum.WeightRatio)-1e8) > 1 || sum.Regularization == nil || float64(*sum.Regularization) != delta ||
			sum.Rows != 60 || sum.ForwardErrorEstimate == nil || !strings.Contains(sum.Operator, "B·D·Bᵀ") {
			t.Errorf("%s: summary %+v", kind, sum)
		}
		nd := normalDenseOf(b, d, delta)
		var ch mat.Cholesky
		if !ch.Factorize(nd) {
			t.Fatal("dense N not positive definite")
		}
		var yd mat.VecDense
		if err := ch.SolveVecTo(&yd, mat.NewVecDense(60, append([]float64(nil), r...))); err != nil {
			t.Fatal(err)
		}
		kappa := ch.Cond()
		var diff, yn float64
		for i := range y {
			diff = max(diff, math.Abs(y[i]-yd.AtVec(i)))
			yn = max(yn, math.Abs(yd.AtVec(i)))
		}
		if bound := 10 * kappa * (float64(sum.RelativeResidual) + 60*0x1p-52); diff/yn > bound {
			t.Errorf("%s: ‖y − y_dense‖∞/‖y_dense‖∞ = %g above 10κ(relres + nε) = %g", kind, diff/yn, bound)
		}
	}
}

// TestNormalRefusals: bad weights, δ and methods are refused by name.
func TestNormalRefusals(t *testing.T) {
	t.Parallel()
	b := stencil.Constraints(5, 10, 2, 1)
	m := Matrix{A: b, Name: "B"}
	d := make([]float64, 10)
	for i := range d {
		d[i] = 1
	}
	for _, c := range []struct {
		name  string
		req   Request
		w     Weights
		field string
	}{
		{"short weights", Request{}, Weights{D: d[:9]}, "weights"},
		{"negative weight", Request{}, Weights{D: append(append([]float64(nil), d[:4]...), -1, 1, 1, 1, 1, 1)}, "weights"},
		{"NaN delta", Request{}, Weights{D: d, Delta: math.NaN()}, "reg"},
		{"least squares", Request{Method: LSQR}, Weights{D: d}, "method"},
	} {
		_, err := PrepareNormal(m, c.req, c.w, nil)
		var fe *FieldError
		if !errors.As(err, &fe) || fe.Field != c.field {
			t.Errorf("%s: %v, want a FieldError on %s", c.name, err, c.field)
		}
	}
}

func normalDenseOf(b *sparse.CSR, d []float64, delta float64) *mat.SymDense {
	bd := mat.DenseCopyOf(b)
	r, c := bd.Dims()
	scaled := mat.DenseCopyOf(b)
	for i := range r {
		for j := range c {
			scaled.Set(i, j, scaled.At(i, j)*d[j])
		}
	}
	var n mat.Dense
	n.Mul(scaled, bd.T())
	s := mat.NewSymDense(r, nil)
	for i := range r {
		for j := i; j < r; j++ {
			v := (n.At(i, j) + n.At(j, i)) / 2
			if i == j {
				v += delta
			}
			s.SetSym(i, j, v)
		}
	}
	return s
}
