package precond

import (
	"fmt"
	"math"
	"runtime"

	"github.com/residua/residua/sparse"
)

// IC0Options control the IC(0) set-up. The zero value works; each field's
// comment gives its default.
type IC0Options struct {
	// FirstShift is the first nonzero shift α tried, in A + α·diag(A), after
	// the unshifted factorization meets a pivot that is not positive.
	// Default 1e-3.
	FirstShift float64
	// Growth is the factor by which α grows at each further try. Default 10.
	Growth float64
	// MaxTries caps the factorizations attempted, the unshifted one
	// included. Default 8, so the last shift tried is 1e-3·10⁶ = 1e3.
	MaxTries int
	// Parallel runs the triangular solves on GOMAXPROCS goroutines by
	// level scheduling of row segments (see sched.go) when the matrix has
	// enough rows per level; otherwise, and by default, they run
	// sequentially on the caller. The result is bitwise the same either
	// way.
	Parallel bool
}

// Defaults of IC0Options.
const (
	DefaultFirstShift = 1e-3
	DefaultGrowth     = 10
	DefaultMaxTries   = 8
)

func (o IC0Options) withDefaults() IC0Options {
	if o.FirstShift <= 0 {
		o.FirstShift = DefaultFirstShift
	}
	if o.Growth <= 1 {
		o.Growth = DefaultGrowth
	}
	if o.MaxTries <= 0 {
		o.MaxTries = DefaultMaxTries
	}
	return o
}

// IC0 is the zero-fill incomplete Cholesky preconditioner, IC(0)
// (Meijerink and van der Vorst, Math. Comp. 31, 1977; Saad, 2nd ed., §10.3).
// It is held as M = (I + L)·D·(I + L)ᵀ with L strictly lower triangular on
// the pattern of A's strict lower triangle and D diagonal; the usual
// Cholesky-like factor is (I + L)·D^½.
//
// Precondition reads the factor and writes only dst, so one IC0 may serve
// several solves at once.
type IC0 struct {
	n int
	// Forward solve with I + L: row i's strictly lower entries, columns
	// increasing, so the entry next to the diagonal (the one on the critical
	// path of the recurrence) is subtracted last.
	lPtr []int32
	lCol []int32
	lVal []float64
	// Backward solve with (I + L)ᵀ: row i of Lᵀ (column i of L), columns
	// decreasing, again so the entry next to the diagonal comes last.
	uPtr []int32
	uCol []int32
	uVal []float64
	// dInv is D⁻¹, inverted once at set-up.
	dInv []float64

	// sched is the parallel schedule, nil when the solves run sequentially.
	sched *schedule

	shift float64
	tries int
}

// NewIC0 computes the IC(0) factor of the symmetric matrix a, reading only
// its lower triangle (diagonal included); the caller vouches for symmetry.
//
// It refuses a missing, zero, negative or non-finite diagonal entry with a
// *DiagonalError, since a matrix with one is not positive definite. When a
// pivot is not positive it retries with the diagonal shift A + α·diag(A),
// α = 0 at try 1 and opt.FirstShift·opt.Growth^(t−2) at try t ≥ 2
// (Manteuffel, Math. Comp. 34, 1980), and reports the α that worked (Shift)
// and the tries used (Tries).
// After opt.MaxTries failures it returns a *BreakdownError; it never falls
// back to another preconditioner by itself.
func NewIC0(a *sparse.CSR, opt IC0Options) (*IC0, error) {
	opt = opt.withDefaults()
	if a.Rows != a.Cols {
		return nil, fmt.Errorf("precond: %w (%d×%d)", ErrNotSquare, a.Rows, a.Cols)
	}
	n := a.Rows
	// Row i's strict lower triangle is the first lPtr[i+1]−lPtr[i] entries
	// of row i of A (columns are sorted), and its diagonal entry the next.
	lPtr := make([]int32, n+1)
	nnz := 0
	for i := 0; i < n; i++ {
		lo, hi := a.RowPtr[i], a.RowPtr[i+1]
		k, ok := searchInt32(a.ColIdx[lo:hi], int32(i))
		var d float64
		if ok {
			d = a.Val[lo+k]
		}
		if err := checkDiagonal(i, d, ok); err != nil {
			return nil, err
		}
		nnz += k
		if nnz > math.MaxInt32 {
			return nil, fmt.Errorf("precond: IC(0) of a %d×%d matrix: %w", n, n, ErrTooLarge)
		}
		lPtr[i+1] = int32(nnz)
	}
	lCol := make([]int32, nnz)
	for i := 0; i < n; i++ {
		src := a.ColIdx[a.RowPtr[i]:]
		dst := lCol[lPtr[i]:lPtr[i+1]]
		for k := range dst {
			dst[k] = src[k]
		}
	}

	m := &IC0{n: n, lPtr: lPtr, lCol: lCol, lVal: make([]float64, nnz), dInv: make([]float64, n)}
	alpha := 0.0
	var last *BreakdownError
	for t := 1; t <= opt.MaxTries; t++ {
		if t == 2 {
			alpha = opt.FirstShift
		} else if t > 2 {
			alpha *= opt.Growth
		}
		row, piv := m.factor(a, alpha)
		if row < 0 {
			m.shift, m.tries = alpha, t
			m.transpose()
			if opt.Parallel {
				m.sched = newSchedule(m, runtime.GOMAXPROCS(0))
			}
			return m, nil
		}
		last = &BreakdownError{Row: row, Pivot: piv, Shift: alpha, Tries: t}
	}
	return nil, last
}

// factor computes L and D for the shifted matrix A + alpha·diag(A) into
// m.lVal and m.dInv (as D⁻¹). It returns the first row whose pivot is not
// positive and finite, with that pivot, or −1 when every pivot is.
//
// This is the row-by-row (left-looking, "IKJ") form of incomplete Gaussian
// elimination restricted to the pattern of A (Saad, 2nd ed., §10.3.2,
// Algorithm 10.4), written for the symmetric LDLᵀ form: for j < i in the
// pattern of row i, in increasing j,
//
//	u_ij = a_ij − Σ_k u_ik·L_jk   (k < j in the patterns of rows i and j)
//	L_ij = u_ij / d_j
//	d_i  = (1+α)·a_ii − Σ_k u_ik·L_ik
//
// Entries outside A's pattern are dropped (zero fill). The common columns
// k of rows i and j are found by merging the two sorted rows, and every sum
// runs in increasing k, so the result is bitwise reproducible.
func (m *IC0) factor(a *sparse.CSR, alpha float64) (int, float64) {
	lPtr, lCol, lVal, dInv := m.lPtr, m.lCol, m.lVal, m.dInv
	for i := 0; i < m.n; i++ {
		p, q := lPtr[i], lPtr[i+1]
		cols := lCol[p:q]
		vals := lVal[p:q]
		vals = vals[:len(cols)]
		av := a.Val[a.RowPtr[i]:]
		av = av[:len(cols)+1]
		for k, j := range cols {
			// vals[:k] hold u_ik for the columns before j.
			u := av[k]
			jc := lCol[lPtr[j]:lPtr[j+1]]
			jv := lVal[lPtr[j]:lPtr[j+1]]
			jv = jv[:len(jc)]
			x, y := 0, 0
			for x < k && y < len(jc) {
				switch cx, cy := cols[x], jc[y]; {
				case cx < cy:
					x++
				case cx > cy:
					y++
				default:
					u -= vals[x] * jv[y]
					x++
					y++
				}
			}
			vals[k] = u
		}
		// Turn u_ik into L_ik = u_ik/d_k and take the pivot.
		di := av[len(cols)]
		di += alpha * di
		for k, j := range cols {
			u := vals[k]
			l := u * dInv[j]
			di -= u * l
			vals[k] = l
		}
		if !(di > 0) || math.IsInf(di, 1) {
			return i, di
		}
		dInv[i] = 1 / di
	}
	return -1, 0
}

// transpose builds the row-wise copy of Lᵀ used by the backward solve, each
// row's columns in decreasing order.
func (m *IC0) transpose() {
	n := m.n
	nnz := len(m.lCol)
	// uPtr[j+2] counts row j's entries first; after the prefix sum uPtr[j+1]
	// is row j's start and serves as its fill cursor, ending at row j's end.
	uPtr := make([]int32, n+2)
	for _, j := range m.lCol {
		uPtr[j+2]++
	}
	for i := 2; i < n+2; i++ {
		uPtr[i] += uPtr[i-1]
	}
	uCol := make([]int32, nnz)
	uVal := make([]float64, nnz)
	// Walking the rows of L from the last to the first fills each row of Lᵀ
	// in decreasing column order.
	for i := n - 1; i >= 0; i-- {
		p, q := m.lPtr[i], m.lPtr[i+1]
		vs := m.lVal[p:q]
		for k, j := range m.lCol[p:q] {
			x := uPtr[j+1]
			uCol[x] = int32(i)
			uVal[x] = vs[k]
			uPtr[j+1] = x + 1
		}
	}
	m.uPtr, m.uCol, m.uVal = uPtr[:n+1], uCol, uVal
}

// Shift returns the shift α of the factorization in use: M approximates
// A + α·diag(A). Zero when plain IC(0) succeeded.
func (m *IC0) Shift() float64 { return m.shift }

// Tries returns how many factorizations were attempted, the unshifted one
// included; 1 when plain IC(0) succeeded.
func (m *IC0) Tries() int { return m.tries }

// Size returns the matrix order n.
func (m *IC0) Size() int { return m.n }

// Bytes returns the memory the preconditioner holds: both copies of the
// factor (row-wise L and row-wise Lᵀ) and D⁻¹.
func (m *IC0) Bytes() int64 {
	return int64(len(m.lPtr)+len(m.lCol)+len(m.uPtr)+len(m.uCol))*4 +
		int64(len(m.lVal)+len(m.uVal)+len(m.dInv))*8 + m.sched.bytes()
}

// Parallel reports whether Precondition runs the solves on several
// goroutines when the package's helpers are free.
func (m *IC0) Parallel() bool { return m.sched != nil }

// Precondition sets dst = M⁻¹·r with M = (I + L)·D·(I + L)ᵀ: a forward
// solve with I + L, then, row by row from the last, z_i = d_i⁻¹·w_i minus
// the known part of row i of Lᵀ (Saad, 2nd ed., §10.3, applied as two
// triangular solves). Both passes work in dst, so dst and r may be the same
// slice; nothing else is written and nothing is allocated. It panics if
// len(dst) or len(r) is not the matrix order.
func (m *IC0) Precondition(dst, r []float64) {
	n := m.n
	if len(dst) != n || len(r) != n {
		panic(fmt.Sprintf("precond: IC0.Precondition: len(dst)=%d, len(r)=%d, want %d", len(dst), len(r), n))
	}
	if m.sched != nil && m.sched.applyParallel(m, dst, r) {
		return
	}
	m.forward(dst, r, 0, n)
	m.backward(dst, 0, n)
}

// forward solves (I + L)·w = r into w for rows lo..hi−1; the rows before
// lo that these rows read must be done.
//
// The recurrence's critical path runs through w_{i−1}: when row i has the
// entry (i, i−1), as every row of a stencil matrix in natural order but the
// first of each grid line has, w_{i−1} is taken from a register rather than
// reloaded from w, which would add a store-to-load forwarding delay to
// every row. The row's other entries are summed first and overlap with the
// previous row's work.
func (m *IC0) forward(w, r []float64, lo, hi int) {
	ptr, col, val := m.lPtr, m.lCol, m.lVal
	r = r[:len(w)]
	prev := 0.0 // w[i-1] once row i-1 has been done in this call
	p := ptr[lo]
	for i := lo; i < hi; i++ {
		q := ptr[i+1]
		s := r[i]
		cs := col[p:q]
		vs := val[p:q]
		vs = vs[:len(cs)]
		k := len(cs) - 1
		switch {
		case k == 2 && int(cs[2]) == i-1 && i > lo:
			// The 7-point stencil's row, unrolled: the same
			// subtractions in the same order as the loop below.
			s -= vs[0] * w[cs[0]]
			s -= vs[1] * w[cs[1]]
			s -= vs[2] * prev
		case k >= 0 && int(cs[k]) == i-1 && i > lo:
			for t, j := range cs[:k] {
				s -= vs[t] * w[j]
			}
			s -= vs[k] * prev
		default:
			for t, j := range cs {
				s -= vs[t] * w[j]
			}
		}
		w[i] = s
		prev = s
		p = q
	}
}

// backward solves D·(I + L)ᵀ·z = w in place for rows hi−1 down to lo (the
// rows after hi−1 that these read must be done):
// z_i = d_i⁻¹·w_i − Σ_{j>i} L_ji·z_j, with z_{i+1} carried in a register as
// in forward.
func (m *IC0) backward(z []float64, lo, hi int) {
	ptr, col, val, dInv := m.uPtr, m.uCol, m.uVal, m.dInv
	dInv = dInv[:len(z)]
	next := 0.0 // z[i+1] once row i+1 has been done in this call
	q := ptr[hi]
	for i := hi - 1; i >= lo; i-- {
		p := ptr[i]
		s := z[i] * dInv[i]
		cs := col[p:q]
		vs := val[p:q]
		vs = vs[:len(cs)]
		k := len(cs) - 1
		switch {
		case k == 2 && int(cs[2]) == i+1 && i < hi-1:
			s -= vs[0] * z[cs[0]]
			s -= vs[1] * z[cs[1]]
			s -= vs[2] * next
		case k >= 0 && int(cs[k]) == i+1 && i < hi-1:
			for t, j := range cs[:k] {
				s -= vs[t] * z[j]
			}
			s -= vs[k] * next
		default:
			for t, j := range cs {
				s -= vs[t] * z[j]
			}
		}
		z[i] = s
		next = s
		q = p
	}
}

// PreconditionBlock applies M⁻¹ to the k columns of the row-major n×k block
// r at once (element i of column c at i·k + c), writing dst: the two
// triangular solves of Precondition, each sweeping the factor once for all
// k columns (krylov.BlockPreconditioner), so the factor is read once per
// block instead of once per column. Every column is bitwise Precondition's
// on that column: each row's subtractions are the same, in the same
// (increasing column) order. The sweeps run sequentially on the caller,
// whatever Parallel says. dst and r may be the same slice; nothing is
// allocated for k ≤ 16. It panics if k < 1 or a length is not n·k.
func (m *IC0) PreconditionBlock(dst, r []float64, k int) {
	n := m.n
	if k < 1 || len(dst) != n*k || len(r) != n*k {
		panic(fmt.Sprintf("precond: IC0.PreconditionBlock: len(dst)=%d, len(r)=%d, k=%d, want n·k with n=%d", len(dst), len(r), k, n))
	}
	var buf [16]float64
	acc := buf[:]
	if k > len(buf) {
		acc = make([]float64, k)
	}
	acc = acc[:k]
	// Forward: (I + L)·w = r, row by row.
	for i := 0; i < n; i++ {
		copy(acc, r[i*k:(i+1)*k])
		p, q := m.lPtr[i], m.lPtr[i+1]
		cs, vs := m.lCol[p:q], m.lVal[p:q]
		vs = vs[:len(cs)]
		for t, j := range cs {
			v := vs[t]
			wj := dst[int(j)*k : int(j)*k+k]
			for c := range acc {
				acc[c] -= v * wj[c]
			}
		}
		copy(dst[i*k:(i+1)*k], acc)
	}
	// Backward: D·(I + L)ᵀ·z = w, from the last row.
	for i := n - 1; i >= 0; i-- {
		d := m.dInv[i]
		zi := dst[i*k : (i+1)*k]
		for c := range acc {
			acc[c] = zi[c] * d
		}
		p, q := m.uPtr[i], m.uPtr[i+1]
		cs, vs := m.uCol[p:q], m.uVal[p:q]
		vs = vs[:len(cs)]
		for t, j := range cs {
			v := vs[t]
			zj := dst[int(j)*k : int(j)*k+k]
			for c := range acc {
				acc[c] -= v * zj[c]
			}
		}
		copy(zi, acc)
	}
}
