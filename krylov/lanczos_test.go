package krylov

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestTridiagExtremes checks the Sturm-count bisection against gonum's dense
// symmetric eigensolver (mat.EigenSym) on fixed-seed random tridiagonals,
// including ones with tiny and zero off-diagonal entries, where the Sturm
// recurrence meets zero pivots.
func TestTridiagExtremes(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	cases := []struct {
		name string
		d, e []float64
	}{
		{"2x2 diagonal", []float64{3, 1}, []float64{0}},
		{"2x2 coupled", []float64{2, 2}, []float64{1}},             // eigenvalues 1 and 3
		{"zero pivot at x=0", []float64{0, 0, 0}, []float64{1, 1}}, // eigenvalues −√2, 0, √2
	}
	for _, n := range []int{2, 3, 7, 50, 400} {
		d, e := make([]float64, n), make([]float64, n-1)
		for i := range d {
			d[i] = 4 * rng.Float64()
		}
		for i := range e {
			e[i] = rng.NormFloat64()
			if i%5 == 3 {
				e[i] *= 1e-12 // nearly decoupled blocks
			}
		}
		cases = append(cases, struct {
			name string
			d, e []float64
		}{fmt.Sprintf("random n=%d", n), d, e})
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			n := len(c.d)
			sym := mat.NewSymDense(n, nil)
			for i := range n {
				sym.SetSym(i, i, c.d[i])
				if i+1 < n {
					sym.SetSym(i, i+1, c.e[i])
				}
			}
			var eig mat.EigenSym
			if !eig.Factorize(sym, false) {
				t.Fatal("gonum EigenSym failed")
			}
			vals := eig.Values(nil) // ascending
			lo, hi := tridiagExtremes(c.d, c.e)
			// Bisection resolves each eigenvalue to a few ulps of the
			// spectrum's scale; the dense QR algorithm is backward stable
			// to about n·ε·‖T‖ (Golub and Van Loan §8.3.4), hence the bound.
			scale := math.Max(math.Abs(vals[0]), math.Abs(vals[n-1]))
			tol := 1e-13*scale*float64(n) + 1e-300
			if math.Abs(lo-vals[0]) > tol || math.Abs(hi-vals[n-1]) > tol {
				t.Errorf("extremes (%.17g, %.17g), gonum (%.17g, %.17g)", lo, hi, vals[0], vals[n-1])
			}
		})
	}
}

// TestLanczosFromCGCoefficients builds T from the α, β that CG produces on a
// diagonal matrix and checks its Ritz values lie inside the spectrum and
// reach its ends once CG has run n iterations in exact arithmetic terms
// (the Lanczos tridiagonal of full size is similar to A: Golub and Van Loan
// §10.1.1; Saad §6.7.3).
func TestLanczosFromCGCoefficients(t *testing.T) {
	const n = 6
	lambda := []float64{1, 2, 3, 5, 8, 13}
	b := []float64{1, 1, 1, 1, 1, 1}
	var l lanczos
	l.reset(100)
	// Plain CG (Saad Algorithm 6.18) on diag(lambda), written out here so the
	// test does not depend on cg.go.
	x, r, p := make([]float64, n), append([]float64(nil), b...), append([]float64(nil), b...)
	rr := 6.0
	for range n {
		var pq float64
		for i := range p {
			pq += p[i] * lambda[i] * p[i]
		}
		alpha := rr / pq
		l.addAlpha(alpha)
		var rrNew float64
		for i := range r {
			x[i] += alpha * p[i]
			r[i] -= alpha * lambda[i] * p[i]
			rrNew += r[i] * r[i]
		}
		beta := rrNew / rr
		rr = rrNew
		l.addBeta(beta)
		for i := range p {
			p[i] = r[i] + beta*p[i]
		}
	}
	lo, hi := l.extremes()
	if math.Abs(lo-1) > 1e-8 || math.Abs(hi-13) > 1e-8 {
		t.Errorf("Ritz extremes after n steps (%g, %g), want (1, 13)", lo, hi)
	}
}

// TestLanczosCap checks that the history stops growing at its capacity
// instead of writing past it.
func TestLanczosCap(t *testing.T) {
	var l lanczos
	l.reset(3)
	for range 10 {
		l.addAlpha(0.5)
		l.addBeta(0.25)
	}
	if l.k != 3 {
		t.Fatalf("k = %d, want 3", l.k)
	}
	// T = tridiag with diagonal 2, 2.5, 2.5 and off-diagonal 1, 1: the
	// extremes are finite and inside Gershgorin's [0.5, 4.5].
	lo, hi := l.extremes()
	if !(lo >= 0.5 && hi <= 4.5 && lo < hi) {
		t.Errorf("extremes (%g, %g) outside Gershgorin bounds", lo, hi)
	}
}
