package amg

import (
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
)

// lanczosSteps is the number of Lanczos steps that estimate the largest
// eigenvalue of D⁻¹A (for the Chebyshev interval) and of D_F⁻¹A_F (for the
// prolongator's ω). Ten steps find the top of the spectrum of the Poisson
// matrices to within a few per cent (our own measurement, lanczos_test.go
// checks 1D Poisson against the exact 1 + cos(π/(n+1))); the Chebyshev
// interval's factor 1.1 covers what is left.
const lanczosSteps = 10

// maxEigDinvA estimates λmax(D⁻¹A) for SPD A and positive diagonal d by
// Lanczos on the symmetric D^{-1/2}·A·D^{-1/2}, which has the same
// eigenvalues (Golub and Van Loan, Matrix Computations 4th ed., §10.1; Saad,
// Iterative Methods for Sparse Linear Systems 2nd ed., §6.6). The start
// vector is pseudo-random with a fixed seed, so the estimate is the same on
// every run. The largest Ritz value is at most λmax and approaches it from
// below.
func maxEigDinvA(a *sparse.CSR, d []float64) float64 {
	n := a.Rows
	if n == 0 {
		return 1
	}
	s := make([]float64, n) // D^{-1/2}
	for i, v := range d {
		s[i] = 1 / math.Sqrt(v)
	}
	rng := rand.New(rand.NewPCG(0x616d67, uint64(n)))
	v := make([]float64, n)
	for i := range v {
		v[i] = rng.Float64() - 0.5
	}
	scale(v, 1/math.Sqrt(sparse.Dot(v, v)))
	vPrev := make([]float64, n)
	w := make([]float64, n)
	t := make([]float64, n)
	m := min(lanczosSteps, n)
	alpha := make([]float64, 0, m)
	beta := make([]float64, 0, m)
	for j := range m {
		// w = S·A·S·v − β_{j−1}·v_{j−1}
		for i := range t {
			t[i] = s[i] * v[i]
		}
		a.MulVec(w, t)
		for i := range w {
			w[i] *= s[i]
		}
		al := sparse.Dot(w, v)
		alpha = append(alpha, al)
		b := 0.0
		if j > 0 {
			b = beta[j-1]
		}
		for i := range w {
			w[i] -= al*v[i] + b*vPrev[i]
		}
		nb := math.Sqrt(sparse.Dot(w, w))
		if j == m-1 || nb <= 1e-12*math.Abs(al) {
			break
		}
		beta = append(beta, nb)
		vPrev, v, w = v, w, vPrev
		scale(v, 1/nb)
	}
	k := len(alpha)
	tri := mat.NewSymDense(k, nil)
	for i := range k {
		tri.SetSym(i, i, alpha[i])
		if i+1 < k {
			tri.SetSym(i, i+1, beta[i])
		}
	}
	var eig mat.EigenSym
	if !eig.Factorize(tri, false) {
		// Not expected for a small symmetric tridiagonal matrix; fall back
		// to the Gershgorin bound of the tridiagonal.
		g := 0.0
		for i := range k {
			r := math.Abs(alpha[i])
			if i > 0 {
				r += beta[i-1]
			}
			if i+1 < k {
				r += beta[i]
			}
			g = math.Max(g, r)
		}
		return g
	}
	vals := eig.Values(nil)
	return vals[len(vals)-1]
}

func scale(v []float64, s float64) {
	for i := range v {
		v[i] *= s
	}
}

// chebyshev holds the coefficients of one level's Chebyshev smoother: the
// polynomial of degree deg in D⁻¹A that is smallest on [lo, hi] =
// [λmax/chebRatio, chebUpper·λmax], applied by the three-term recurrence of
// Saad, Iterative Methods for Sparse Linear Systems 2nd ed., §12.3.2
// (Algorithm 12.1, with the preconditioner D⁻¹). The error propagation
// I − q(D⁻¹A)·D⁻¹A is self-adjoint in the A inner product, so the smoother
// is its own adjoint and the V-cycle with it before and after the coarse
// correction is symmetric.
type chebyshev struct {
	deg         int
	theta, delt float64 // centre and half-width of [lo, hi]
}

const (
	// chebRatio: the smoother damps the eigenvalues of D⁻¹A in
	// [λmax/30, 1.1·λmax] and leaves those below to the coarse grids
	// (common practice, from memory).
	chebRatio = 30.0
	// chebUpper covers the Lanczos estimate's shortfall (the 1.1).
	chebUpper = 1.1
)

func newChebyshev(lmax float64, deg int) chebyshev {
	hi := chebUpper * lmax
	lo := hi / (chebUpper * chebRatio)
	return chebyshev{deg: deg, theta: (hi + lo) / 2, delt: (hi - lo) / 2}
}
