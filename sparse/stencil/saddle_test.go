package stencil

import (
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestConstraintsAndSaddle: B has full row rank (gonum's SVD: the m-th
// singular value is far from zero) and K = [H Bᵀ; B −cI] is symmetric with
// the blocks in place.
func TestConstraintsAndSaddle(t *testing.T) {
	h := Poisson2D(6)
	b := Constraints(12, 36, 4, 9)
	if err := b.Validate(); err != nil {
		t.Fatal(err)
	}
	var svd mat.SVD
	if !svd.Factorize(mat.DenseCopyOf(b), mat.SVDNone) {
		t.Fatal("SVD failed")
	}
	if sv := svd.Values(nil); sv[len(sv)-1] < 1e-8*sv[0] {
		t.Errorf("B is rank deficient: singular values %v", sv)
	}
	for _, c := range []float64{0, 0.5} {
		k := Saddle(h, b, c)
		if err := k.Validate(); err != nil {
			t.Fatal(err)
		}
		for i := range 48 {
			for j := range 48 {
				v := k.At(i, j)
				if v != k.At(j, i) {
					t.Fatalf("c=%g: K not symmetric at (%d, %d)", c, i, j)
				}
				var want float64
				switch {
				case i < 36 && j < 36:
					want = h.At(i, j)
				case i >= 36 && j < 36:
					want = b.At(i-36, j)
				case i < 36:
					want = b.At(j-36, i)
				case i == j:
					want = -c
				}
				if v != want {
					t.Fatalf("c=%g: K(%d, %d) = %g, want %g", c, i, j, v, want)
				}
			}
		}
	}
}
