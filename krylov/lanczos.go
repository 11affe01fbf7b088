package krylov

import "math"

// lanczos collects the symmetric tridiagonal matrix T_k that conjugate
// gradients builds implicitly, and computes its extreme eigenvalues.
//
// CG's step lengths α_j and direction updates β_j define the Lanczos
// tridiagonal of the (preconditioned) operator (Saad, Iterative Methods for
// Sparse Linear Systems, 2nd ed., §6.7.3, eq. 6.103; Golub and Van Loan,
// Matrix Computations, 4th ed., §11.3.5 and §11.3.6):
//
//	T(j, j)   = 1/α_j + β_{j−1}/α_{j−1}   (the second term absent for j = 0)
//	T(j, j+1) = √β_j / α_j
//
// Its eigenvalues (Ritz values) approximate those of M⁻¹A from inside the
// spectrum, the extreme ones first. The entries are written as the
// iteration produces them, into arrays allocated once before the loop, so
// the estimate costs no product with A and no allocation per iteration.
// Beyond the arrays' capacity the tridiagonal stops growing: the estimate
// is then the one of the leading part, still a valid inner estimate.
type lanczos struct {
	diag, off []float64 // T's diagonal and superdiagonal
	k         int       // rows of T filled so far
	prevAlpha float64   // α_{j−1}
	prevBeta  float64   // β_{j−1}
}

// lanczosCap bounds the tridiagonal's size, so that the history costs at most
// 2·8·lanczosCap bytes (1 MiB) whatever the iteration cap. Extreme Ritz values
// settle long before that many iterations on the problems CG is meant for.
const lanczosCap = 1 << 16

// reset prepares l for a solve of at most maxIter iterations, reusing its
// arrays when they are large enough.
func (l *lanczos) reset(maxIter int) {
	size := min(maxIter, lanczosCap)
	if cap(l.diag) < size {
		l.diag = make([]float64, size)
		l.off = make([]float64, size)
	}
	l.diag, l.off = l.diag[:size], l.off[:size]
	l.k = 0
	l.prevAlpha, l.prevBeta = 0, 0
}

// addAlpha records the step length α_j of iteration j = l.k.
func (l *lanczos) addAlpha(alpha float64) {
	if l.k >= len(l.diag) {
		return
	}
	d := 1 / alpha
	if l.k > 0 {
		d += l.prevBeta / l.prevAlpha
	}
	l.diag[l.k] = d
	l.prevAlpha = alpha
	l.k++
}

// addBeta records β_j, which follows α_j; it fills the superdiagonal entry
// linking row j to row j+1, used once α_{j+1} arrives.
func (l *lanczos) addBeta(beta float64) {
	if l.k == 0 || l.k >= len(l.diag) {
		return
	}
	l.off[l.k-1] = math.Sqrt(beta) / l.prevAlpha
	l.prevBeta = beta
}

// extremes returns the smallest and largest eigenvalues of the k×k leading
// tridiagonal collected so far, or zeros when k < 2.
func (l *lanczos) extremes() (lo, hi float64) {
	if l.k < 2 {
		return 0, 0
	}
	return tridiagExtremes(l.diag[:l.k], l.off[:l.k-1])
}

// tridiagExtremes returns the smallest and largest eigenvalues of the
// symmetric tridiagonal matrix with diagonal d and off-diagonal e
// (len(e) = len(d) − 1) by bisection on Sturm counts (Golub and Van Loan,
// Matrix Computations, 4th ed., §8.4.1), in O(len(d)) work per count and
// about 100 counts per eigenvalue, without allocating.
func tridiagExtremes(d, e []float64) (lo, hi float64) {
	n := len(d)
	// Gershgorin's theorem bounds the spectrum (Golub and Van Loan §7.2.1).
	glo, ghi := math.Inf(1), math.Inf(-1)
	var emax2 float64
	for i := range n {
		var rad float64
		if i > 0 {
			rad += math.Abs(e[i-1])
		}
		if i < n-1 {
			rad += math.Abs(e[i])
			emax2 = max(emax2, e[i]*e[i])
		}
		glo = min(glo, d[i]-rad)
		ghi = max(ghi, d[i]+rad)
	}
	// pivmin keeps the Sturm recurrence away from division by zero, as
	// LAPACK's dstebz does (from memory: a tiny multiple of max eᵢ²).
	pivmin := 0x1p-1022 * max(1, emax2)
	return kthEigen(d, e, 1, glo, ghi, pivmin), kthEigen(d, e, n, glo, ghi, pivmin)
}

// kthEigen bisects [lo, hi], which holds the whole spectrum, for the k-th
// smallest eigenvalue (1-based).
func kthEigen(d, e []float64, k int, lo, hi, pivmin float64) float64 {
	for range 200 {
		mid := lo + (hi-lo)/2
		if mid <= lo || mid >= hi {
			break // the interval cannot shrink further in floating point
		}
		if sturmCount(d, e, mid, pivmin) >= k {
			hi = mid // at least k eigenvalues lie below mid
		} else {
			lo = mid
		}
		if hi-lo <= 2*0x1p-52*max(math.Abs(lo), math.Abs(hi)) {
			break
		}
	}
	return lo + (hi-lo)/2
}

// sturmCount returns how many eigenvalues of the tridiagonal (d, e) are less
// than x: the number of negative pivots of the LDLᵀ factorization of T − x·I
// (Sylvester's law of inertia; Golub and Van Loan §8.4.1).
func sturmCount(d, e []float64, x, pivmin float64) int {
	count := 0
	q := d[0] - x
	for i := 0; ; i++ {
		if math.Abs(q) < pivmin {
			q = -pivmin
		}
		if q < 0 {
			count++
		}
		if i+1 == len(d) {
			return count
		}
		q = d[i+1] - x - e[i]*e[i]/q
	}
}

// addEntry appends the diagonal entry d of the next row of T, for a method
// that has the Lanczos tridiagonal directly (MINRES: T(j, j) = δ_j).
func (l *lanczos) addEntry(d float64) {
	if l.k >= len(l.diag) {
		return
	}
	l.diag[l.k] = d
	l.k++
}

// addOff sets the off-diagonal entry linking the last row of T to the next
// one (MINRES: T(j, j+1) = γ_{j+1}).
func (l *lanczos) addOff(e float64) {
	if l.k == 0 || l.k >= len(l.diag) {
		return
	}
	l.off[l.k-1] = e
}

// smallestMagnitude returns the smallest |eigenvalue| of the tridiagonal
// collected so far: the smaller in magnitude of the largest negative and
// the smallest non-negative eigenvalue, found by bisection from the number
// of eigenvalues below zero (Sylvester's law of inertia, as sturmCount).
// Zero when k < 2.
func (l *lanczos) smallestMagnitude() float64 {
	if l.k < 2 {
		return 0
	}
	d, e := l.diag[:l.k], l.off[:l.k-1]
	lo, hi := tridiagExtremes(d, e)
	span := max(math.Abs(lo), math.Abs(hi))
	glo, ghi := lo-span-1, hi+span+1 // encloses the spectrum
	var emax2 float64
	for _, v := range e {
		emax2 = max(emax2, v*v)
	}
	pivmin := 0x1p-1022 * max(1, emax2)
	neg := sturmCount(d, e, 0, pivmin)
	small := math.Inf(1)
	if neg > 0 {
		small = math.Abs(kthEigen(d, e, neg, glo, ghi, pivmin))
	}
	if neg < len(d) {
		small = min(small, math.Abs(kthEigen(d, e, neg+1, glo, ghi, pivmin)))
	}
	return small
}
