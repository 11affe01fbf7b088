package stencil

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestBrickPatch: the trilinear brick reproduces every linear displacement
// field u = G·r exactly, so its strain energy ½uᵀK_e u equals the
// continuum's ½·h³·εᵀDε with ε the (constant) strain of G — the patch test
// (Hughes, The Finite Element Method, 1987, §3.6 from memory) — and rigid
// motions (G skew, plus translations) have zero energy.
func TestBrickPatch(t *testing.T) {
	h, e, nu := 0.25, 2.0, 0.3
	ke := brickStiffness(h, e, nu)
	lam := e * nu / ((1 + nu) * (1 - 2*nu))
	mu := e / (2 * (1 + nu))
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := range 5 {
		var g [3][3]float64
		for r := range 3 {
			for c := range 3 {
				g[r][c] = rng.Float64() - 0.5
			}
		}
		u := make([]float64, 24)
		for a, c := range brickCorners {
			pos := [3]float64{float64(c[0]) * h, float64(c[1]) * h, float64(c[2]) * h}
			for d := range 3 {
				u[3*a+d] = g[d][0]*pos[0] + g[d][1]*pos[1] + g[d][2]*pos[2] + 0.1*float64(d)
			}
		}
		energy := 0.0
		for r := range 24 {
			for c := range 24 {
				energy += u[r] * ke[r*24+c] * u[c]
			}
		}
		energy /= 2
		// ε = sym(G); energy density ½(λ tr(ε)² + 2μ ε:ε).
		tr, dd := 0.0, 0.0
		for r := range 3 {
			tr += g[r][r]
			for c := range 3 {
				eps := (g[r][c] + g[c][r]) / 2
				dd += eps * eps
			}
		}
		want := 0.5 * h * h * h * (lam*tr*tr + 2*mu*dd)
		if math.Abs(energy-want) > 1e-12*math.Abs(want) {
			t.Errorf("trial %d: energy %.15g, continuum %.15g", trial, energy, want)
		}
	}
}

// TestElasticity3D: symmetric, positive definite (gonum dense Cholesky;
// Golub and Van Loan §4.2) and zero on the rigid-body modes away from the
// clamped face.
func TestElasticity3D(t *testing.T) {
	n := 3
	a := Elasticity3D(n, DefaultYoung, DefaultPoisson)
	if want := 3 * n * (n + 1) * (n + 1); a.Rows != want {
		t.Fatalf("%d rows, want %d", a.Rows, want)
	}
	s := mat.NewSymDense(a.Rows, nil)
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			j := int(a.ColIdx[p])
			if d := math.Abs(a.Val[p] - a.At(j, i)); d != 0 { // exactly: the element matrix is
				t.Fatalf("A(%d,%d) − A(%d,%d) = %g", i, j, j, i, d)
			}
			s.SetSym(i, j, a.Val[p])
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(s) {
		t.Fatal("not positive definite")
	}
	rbm := RigidBodyModes(n)
	y := make([]float64, a.Rows)
	x := make([]float64, a.Rows)
	m := n + 1
	for mode := range 6 {
		for i := range x {
			x[i] = rbm[i*6+mode]
		}
		a.MulVec(y, x)
		for k := range m {
			for j := range m {
				for i := 2; i <= n; i++ { // nodes not next to the clamped face
					nd := (i - 1) + n*(j+m*k)
					for d := range 3 {
						if v := y[3*nd+d]; math.Abs(v) > 1e-13 {
							t.Fatalf("mode %d: (K·r) at node (%d,%d,%d) dof %d = %g", mode, i, j, k, d, v)
						}
					}
				}
			}
		}
	}
}
