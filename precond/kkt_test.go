package precond_test

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// cholSolver applies the exact inverse of an SPD block through gonum's
// dense Cholesky factorization.
type cholSolver struct{ c mat.Cholesky }

func newCholSolver(t *testing.T, a mat.Matrix) *cholSolver {
	r, _ := a.Dims()
	s := mat.NewSymDense(r, nil)
	for i := range r {
		for j := range r {
			s.SetSym(i, j, a.At(i, j))
		}
	}
	var cs cholSolver
	if !cs.c.Factorize(s) {
		t.Fatal("block is not positive definite")
	}
	return &cs
}

func (cs *cholSolver) Precondition(dst, r []float64) {
	var x mat.VecDense
	if err := cs.c.SolveVecTo(&x, mat.NewVecDense(len(r), append([]float64(nil), r...))); err != nil {
		panic(err)
	}
	copy(dst, x.RawVector().Data)
}

// TestBlockDiagonalThreeIterations: with the exact blocks H and
// S = B·H⁻¹·Bᵀ (C = 0), the preconditioned saddle-point matrix has exactly
// three distinct eigenvalues, 1 and (1 ± √5)/2 (Murphy, Golub and Wathen,
// SIAM J. Sci. Comput. 21(6), 2000), so MINRES reaches the exact solution in
// at most three iterations. Random small KKT matrices (H a random SPD
// matrix, B a random full-rank constraint matrix), exact block inverses
// from gonum's dense Cholesky.
func TestBlockDiagonalThreeIterations(t *testing.T) {
	for seed := range uint64(5) {
		rng := rand.New(rand.NewPCG(seed, 3))
		n, m := 10+rng.IntN(20), 2+rng.IntN(8)
		// H = GᵀG + I, SPD.
		g := mat.NewDense(n, n, nil)
		for i := range n {
			for j := range n {
				if rng.Float64() < 0.3 {
					g.Set(i, j, rng.NormFloat64())
				}
			}
		}
		var hd mat.Dense
		hd.Mul(g.T(), g)
		for i := range n {
			hd.Set(i, i, hd.At(i, i)+1)
		}
		h := csrOf(&hd)
		b := stencil.Constraints(m, n, 3, seed)
		k := stencil.Saddle(h, b, 0)
		if s := precond.ZeroBlockSplit(k); s != n {
			t.Fatalf("seed %d: zero block split %d, want %d", seed, s, n)
		}
		hs := newCholSolver(t, &hd)
		// S = B·H⁻¹·Bᵀ by dense solves.
		bd := mat.DenseCopyOf(b)
		var hinvBt mat.Dense
		var hc mat.Cholesky
		hc.Factorize(mat.NewSymDense(n, hd.RawMatrix().Data))
		if err := hc.SolveTo(&hinvBt, bd.T()); err != nil {
			t.Fatal(err)
		}
		var sd mat.Dense
		sd.Mul(bd, &hinvBt)
		ss := newCholSolver(t, &sd)
		pre := precond.NewBlockDiagonalOf(n+m, n, hs, ss)

		rhs := make([]float64, n+m)
		for i := range rhs {
			rhs[i] = rng.NormFloat64()
		}
		x := make([]float64, n+m)
		res, err := krylov.MINRES(context.Background(), k, rhs, x, pre, krylov.Settings{RelTol: 1e-10})
		if err != nil || res.Status != krylov.Converged {
			t.Fatalf("seed %d: %v %v", seed, res.Status, err)
		}
		if res.Iterations > 3 {
			t.Errorf("seed %d (n=%d, m=%d): %d iterations with the exact block preconditioner, want ≤ 3", seed, n, m, res.Iterations)
		}
		// The Ritz values are the three eigenvalues: the extremes
		// (1 − √5)/2 and (1 + √5)/2.
		lo, hi := (1-math.Sqrt(5))/2, (1+math.Sqrt(5))/2
		if math.Abs(res.LambdaMin-lo) > 1e-8 || math.Abs(res.LambdaMax-hi) > 1e-8 {
			t.Errorf("seed %d: Ritz range [%g, %g], want [%g, %g]", seed, res.LambdaMin, res.LambdaMax, lo, hi)
		}
	}
}

// TestBlockDiagonalPoisson: the assembled block-diagonal preconditioner
// (IC(0) or Jacobi of H, of S = C + B·diag(H)⁻¹·Bᵀ) on a Poisson saddle-point
// problem: MINRES converges on the true residual, in fewer iterations than
// without a preconditioner; the Schur approximation equals the dense
// product B·diag(H)⁻¹·Bᵀ + C (gonum).
func TestBlockDiagonalPoisson(t *testing.T) {
	h := stencil.Poisson2D(30)
	n, m := h.Rows, 300
	b := stencil.Constraints(m, n, 4, 1)
	for _, c := range []float64{0, 1e-3} {
		k := stencil.Saddle(h, b, c)
		opt := precond.BlockOptions{H: precond.KindIC0, S: precond.KindIC0}
		if c > 0 {
			opt.Split = n
		}
		bd, err := precond.NewBlockDiagonal(k, opt)
		if err != nil {
			t.Fatal(err)
		}
		if bd.Split() != n {
			t.Fatalf("split %d, want %d", bd.Split(), n)
		}
		// Dense reference of S.
		bdn := mat.DenseCopyOf(b)
		scaled := mat.DenseCopyOf(b)
		for j := range n {
			for i := range m {
				scaled.Set(i, j, scaled.At(i, j)/h.At(j, j))
			}
		}
		var s mat.Dense
		s.Mul(scaled, bdn.T())
		for i := range m {
			s.Set(i, i, s.At(i, i)+c)
		}
		if d := maxDiff(&s, bd.Schur); d > 1e-14*mat.Norm(&s, math.Inf(1)) {
			t.Errorf("c=%g: Schur approximation differs from the dense product by %g", c, d)
		}
		rhs := make([]float64, n+m)
		k.MulVec(rhs, ones(n+m))
		x := make([]float64, n+m)
		res, err := krylov.MINRES(context.Background(), k, rhs, x, bd, krylov.Settings{})
		if err != nil || res.Status != krylov.Converged {
			t.Fatalf("c=%g: %v %v", c, res.Status, err)
		}
		res0, _ := krylov.MINRES(context.Background(), k, rhs, x, nil, krylov.Settings{})
		if res.Iterations >= res0.Iterations {
			t.Errorf("c=%g: %d iterations preconditioned, %d without", c, res.Iterations, res0.Iterations)
		}
		t.Logf("c=%g: block-diagonal %d iterations, none %d", c, res.Iterations, res0.Iterations)
	}
	// No zero block to read the split from.
	if _, err := precond.NewBlockDiagonal(h, precond.BlockOptions{}); !errors.Is(err, precond.ErrNoSaddle) {
		t.Errorf("Poisson matrix: %v, want ErrNoSaddle", err)
	}
}

// TestAbsJacobi: M = |diag(A)| (Elman, Silvester and Wathen §4.2) accepts
// negative diagonal entries and refuses a zero or missing one by row.
func TestAbsJacobi(t *testing.T) {
	a := csrOf(mat.NewDense(3, 3, []float64{-2, 1, 0, 1, 4, 1, 0, 1, -0.5}))
	j, err := precond.NewAbsJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	z := make([]float64, 3)
	j.Precondition(z, []float64{1, 1, 1})
	if z[0] != 0.5 || z[1] != 0.25 || z[2] != 2 {
		t.Errorf("M⁻¹·1 = %v, want [0.5 0.25 2]", z)
	}
	k := stencil.Saddle(stencil.Poisson2D(3), stencil.Constraints(2, 9, 2, 1), 0)
	_, err = precond.NewAbsJacobi(k)
	var de *precond.DiagonalError
	if !errors.As(err, &de) || de.Row != 9 || !errors.Is(err, precond.ErrMissingDiagonal) {
		t.Errorf("zero (2,2) block: %v, want a missing diagonal at row 10", err)
	}
}

func maxDiff(d *mat.Dense, a *sparse.CSR) float64 {
	r, c := d.Dims()
	var m float64
	for i := range r {
		for j := range c {
			m = max(m, math.Abs(d.At(i, j)-a.At(i, j)))
		}
	}
	return m
}

func ones(n int) []float64 {
	v := make([]float64, n)
	for i := range v {
		v[i] = 1
	}
	return v
}

// csrOf returns the CSR holding d's nonzero entries.
func csrOf(d mat.Matrix) *sparse.CSR {
	r, c := d.Dims()
	m := &sparse.CSR{Rows: r, Cols: c, RowPtr: make([]int, r+1)}
	for i := range r {
		for j := range c {
			if v := d.At(i, j); v != 0 {
				m.ColIdx, m.Val = append(m.ColIdx, int32(j)), append(m.Val, v)
			}
		}
		m.RowPtr[i+1] = len(m.Val)
	}
	return m
}
