package precond

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/residua/residua/sparse/stencil"
)

// TestIC0PreconditionBlock: the block apply gives every column bitwise
// what Precondition gives on that column alone (the same subtractions in
// the same order), sequential and parallel factors alike (Precondition's
// parallel schedule is bitwise its sequential path), in place or not. The
// reference Precondition is itself checked against gonum's dense
// triangular solves in TestIC0PreconditionInvertsFactors.
func TestIC0PreconditionBlock(t *testing.T) {
	a := stencil.Poisson3D(12)
	n := a.Rows
	for _, par := range []bool{false, true} {
		m, err := NewIC0(a, IC0Options{Parallel: par})
		if err != nil {
			t.Fatal(err)
		}
		for _, k := range []int{1, 3, 8, 17} {
			t.Run(fmt.Sprintf("parallel=%v/k=%d", par, k), func(t *testing.T) {
				rng := rand.New(rand.NewPCG(uint64(k), 1))
				r := make([]float64, n*k)
				for i := range r {
					r[i] = 2*rng.Float64() - 1
				}
				z := make([]float64, n*k)
				m.PreconditionBlock(z, r, k)
				inPlace := append([]float64(nil), r...)
				m.PreconditionBlock(inPlace, inPlace, k)
				rc, zc := make([]float64, n), make([]float64, n)
				for c := range k {
					for i := range rc {
						rc[i] = r[i*k+c]
					}
					m.Precondition(zc, rc)
					for i, v := range zc {
						if math.Float64bits(z[i*k+c]) != math.Float64bits(v) || math.Float64bits(inPlace[i*k+c]) != math.Float64bits(v) {
							t.Fatalf("column %d, row %d: block %v (in place %v), alone %v", c, i, z[i*k+c], inPlace[i*k+c], v)
						}
					}
				}
			})
		}
	}
}

// TestJacobiFusedForms: PreconditionDot and InverseDiagonal agree with
// Precondition and sparse's Dot bit for bit, as krylov's interfaces
// require.
func TestJacobiFusedForms(t *testing.T) {
	a := stencil.Jump3D(20, 1e3)
	j, err := NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	n := a.Rows
	r := make([]float64, n)
	rng := rand.New(rand.NewPCG(3, 4))
	for i := range r {
		r[i] = rng.Float64() - 0.5
	}
	z1, z2 := make([]float64, n), make([]float64, n)
	j.Precondition(z1, r)
	s := j.PreconditionDot(z2, r)
	var ref float64
	for i := range z1 {
		if math.Float64bits(z1[i]) != math.Float64bits(z2[i]) || math.Float64bits(z1[i]) != math.Float64bits(r[i]*j.InverseDiagonal()[i]) {
			t.Fatalf("row %d: %v, %v", i, z1[i], z2[i])
		}
		ref += r[i] * z1[i]
	}
	// The pooled sum adds in fixed blocks, so it agrees with the plain
	// left-to-right sum only to rounding: n·ε relative (Higham §3.1).
	if math.Abs(s-ref) > float64(n)*0x1p-52*math.Abs(ref) {
		t.Errorf("rᵀz %v, plain sum %v", s, ref)
	}
}
