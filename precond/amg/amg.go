package amg

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
)

// Smoother names a multigrid smoother. Its values are the stable lower-case
// names used on the command line, in JSON and on the wire.
type Smoother string

const (
	// Chebyshev: a Chebyshev polynomial in D⁻¹A (the default).
	Chebyshev Smoother = "chebyshev"
	// L1Jacobi: one l1-Jacobi sweep x += D_l1⁻¹·(b − A·x).
	L1Jacobi Smoother = "l1jacobi"
)

// Defaults of Options; see the package documentation for their sources.
const (
	DefaultTheta     = 0.08
	DefaultDegree    = 2
	DefaultMaxCoarse = 2000
	DefaultMaxLevels = 12
	// MaxDegree bounds Options.Degree: each degree costs two products with
	// every level's matrix per cycle.
	MaxDegree = 8
	// StallRatio: a coarse level with more than this fraction of the finer
	// level's unknowns means aggregation has stalled (the strong graph is
	// too sparse, e.g. nearly diagonal rows); coarsening stops at the finer
	// level (our own choice).
	StallRatio = 0.8
	// MaxDirect is the largest coarsest level solved exactly by dense
	// Cholesky; a larger one (only when coarsening stalls early) is
	// smoothed instead. 4000 rows are 128 MB of factor and about 2·10¹⁰
	// flops to factor (our own limit).
	MaxDirect = 4000
)

// Options configure New. The zero value gives the defaults.
type Options struct {
	// Theta is the strength-of-connection threshold θ on the finest level,
	// halved on each coarser level (Vaněk, Mandel and Brezina 1996 use
	// 0.08 halved per level, from memory). 0 means DefaultTheta; it must
	// be below 1.
	Theta float64
	// Smoother is Chebyshev (the default, also for "") or L1Jacobi.
	Smoother Smoother
	// Degree is the Chebyshev polynomial degree, 1 to MaxDegree; 0 means
	// DefaultDegree. Ignored by L1Jacobi.
	Degree int
	// NearNull holds K vectors of the near-null space, row-major: unknown
	// i's entries are NearNull[i·K : (i+1)·K]. Nil means the constant
	// vector (K is then ignored).
	NearNull []float64
	K        int
	// BlockSize is the number of consecutive unknowns that form one node
	// (3 for the displacements of 3D elasticity); 0 means 1. The order
	// must be a multiple of it.
	BlockSize int
	// MaxCoarse: coarsening stops once a level has at most this many
	// unknowns; 0 means DefaultMaxCoarse.
	MaxCoarse int
	// MaxLevels bounds the number of levels; 0 means DefaultMaxLevels.
	MaxLevels int
}

// Errors of New.
var (
	// ErrNotSPD: a diagonal entry is not positive, or the coarsest
	// operator has no Cholesky factor, so A is not SPD.
	ErrNotSPD = errors.New("matrix is not symmetric positive definite")
	// ErrOptions: an option is out of range.
	ErrOptions = errors.New("invalid multigrid option")
)

// level is one level of the hierarchy: its matrix and, above the coarsest,
// the prolongator to the next coarser level and its transpose.
type level struct {
	a    *sparse.CSR
	p, r *sparse.CSR // n_l × n_{l+1} and its transpose; nil on the coarsest
	winv []float64   // the smoother's inverted diagonal: D⁻¹ or D_l1⁻¹
	lmax float64     // Lanczos estimate of λmax(D⁻¹A) (Chebyshev only)
	cheb chebyshev
	// Set-up facts for the report.
	theta float64
	omega float64
}

// levelWork holds one level's vectors for one application.
type levelWork struct {
	x, b, r, d []float64
}

type work struct {
	lv []levelWork
	y  []float64 // coarsest triangular solve
}

// AMG is a smoothed-aggregation algebraic multigrid preconditioner: one
// symmetric V(1,1) cycle per application. Build it with New. Precondition
// may be called from several goroutines at once: each call takes a set of
// work vectors from the preconditioner's free list, allocating a new set
// only when more calls run at once than ever before.
type AMG struct {
	opt    Options
	levels []level
	// Coarsest level: the dense Cholesky factor L (row-major, n×n, lower
	// triangle used), or nil when the coarsest level is smoothed instead.
	chol []float64
	nc   int
	rep  Report
	// lmaxKnown[l] is level l's λmax(D⁻¹A) when the prolongator's
	// smoothing already estimated it (zero otherwise); set-up only.
	lmaxKnown []float64
	mu        sync.Mutex // guards free
	free      []*work
}

// New builds the hierarchy for the SPD matrix a (full symmetric storage),
// which is only read and not kept beyond the finest level's reference.
// It returns an error wrapping ErrNotSPD for a diagonal entry that is
// missing, not positive or not finite, or a coarsest operator that dense
// Cholesky refuses, and one wrapping ErrOptions for options out of range.
func New(a *sparse.CSR, opt Options) (*AMG, error) {
	start := time.Now()
	opt, err := resolve(a, opt)
	if err != nil {
		return nil, err
	}
	if err := checkDiagonal(a); err != nil {
		return nil, err
	}
	h := &AMG{opt: opt}
	k := opt.K
	b := opt.NearNull
	if b == nil {
		k = 1
		b = make([]float64, a.Rows)
		for i := range b {
			b[i] = 1
		}
	}
	nd := blockNodes(a.Rows, opt.BlockSize)
	cur, theta := a, opt.Theta
	for len(h.levels)+1 < opt.MaxLevels && cur.Rows > opt.MaxCoarse {
		g := strength(cur, nd, theta)
		nn := cur.Rows
		if nd != nil {
			nn = nd.count
		}
		agg, na := aggregate(g, nn)
		pt, bc, cnd := tentative(cur.Rows, k, b, nd, agg, na)
		if pt.Cols == 0 || float64(pt.Cols) > StallRatio*float64(cur.Rows) {
			break
		}
		af := filtered(cur, nd, g)
		df := af.Diagonal(nil)
		for _, v := range df {
			if !(v > 0) {
				// Lumping made a diagonal entry of A_F non-positive
				// (possible only for matrices with positive off-diagonal
				// entries): smooth with A itself.
				af, df = cur, cur.Diagonal(nil)
				break
			}
		}
		rho := maxEigDinvA(af, df)
		if af == cur && h.opt.Smoother == Chebyshev {
			// No weak connections: D_F⁻¹A_F is the smoother's D⁻¹A, whose
			// estimate the Chebyshev set-up can reuse.
			h.lmaxKnown = append(h.lmaxKnown, rho)
		} else {
			h.lmaxKnown = append(h.lmaxKnown, 0)
		}
		omega := 4 / (3 * rho)
		p := smoothProlongator(af, pt, omega)
		r := p.Transpose()
		ac := sparse.Mul(r, sparse.Mul(cur, p))
		h.levels = append(h.levels, level{a: cur, p: p, r: r, theta: theta, omega: omega})
		cur, nd, b, theta = ac, cnd, bc, theta/2
	}
	h.levels = append(h.levels, level{a: cur, theta: theta})
	for l := range h.levels {
		if err := h.setupSmoother(l); err != nil {
			return nil, err
		}
	}
	h.nc = cur.Rows
	if cur.Rows <= MaxDirect {
		if err := h.factorCoarsest(cur); err != nil {
			return nil, err
		}
	}
	h.free = append(h.free, h.newWork())
	h.report(start)
	return h, nil
}

func resolve(a *sparse.CSR, opt Options) (Options, error) {
	if a.Rows != a.Cols {
		return opt, fmt.Errorf("amg: %w: matrix is %d×%d, not square", ErrOptions, a.Rows, a.Cols)
	}
	if opt.Theta == 0 {
		opt.Theta = DefaultTheta
	}
	if !(opt.Theta > 0 && opt.Theta < 1) {
		return opt, fmt.Errorf("amg: %w: strength threshold θ = %g, want 0 < θ < 1", ErrOptions, opt.Theta)
	}
	switch opt.Smoother {
	case "":
		opt.Smoother = Chebyshev
	case Chebyshev, L1Jacobi:
	default:
		return opt, fmt.Errorf("amg: %w: unknown smoother %q (want chebyshev or l1jacobi)", ErrOptions, string(opt.Smoother))
	}
	if opt.Degree == 0 {
		opt.Degree = DefaultDegree
	}
	if opt.Degree < 1 || opt.Degree > MaxDegree {
		return opt, fmt.Errorf("amg: %w: Chebyshev degree %d, want 1 to %d", ErrOptions, opt.Degree, MaxDegree)
	}
	if opt.BlockSize == 0 {
		opt.BlockSize = 1
	}
	if opt.BlockSize < 1 || a.Rows%opt.BlockSize != 0 {
		return opt, fmt.Errorf("amg: %w: block size %d does not divide the order %d", ErrOptions, opt.BlockSize, a.Rows)
	}
	if opt.NearNull != nil {
		if opt.K < 1 || opt.K > 64 {
			return opt, fmt.Errorf("amg: %w: %d near-null vectors, want 1 to 64", ErrOptions, opt.K)
		}
		if len(opt.NearNull) != a.Rows*opt.K {
			return opt, fmt.Errorf("amg: %w: near-null space has %d entries, want %d rows × %d vectors = %d",
				ErrOptions, len(opt.NearNull), a.Rows, opt.K, a.Rows*opt.K)
		}
		for i, v := range opt.NearNull {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return opt, fmt.Errorf("amg: %w: near-null vector %d has %g in row %d", ErrOptions, i%opt.K+1, v, i/opt.K+1)
			}
		}
	} else {
		opt.K = 1
	}
	if opt.MaxCoarse == 0 {
		opt.MaxCoarse = DefaultMaxCoarse
	}
	if opt.MaxCoarse < 1 || opt.MaxCoarse > MaxDirect {
		return opt, fmt.Errorf("amg: %w: largest coarse level %d, want 1 to %d", ErrOptions, opt.MaxCoarse, MaxDirect)
	}
	if opt.MaxLevels == 0 {
		opt.MaxLevels = DefaultMaxLevels
	}
	if opt.MaxLevels < 1 || opt.MaxLevels > 40 {
		return opt, fmt.Errorf("amg: %w: %d levels, want 1 to 40", ErrOptions, opt.MaxLevels)
	}
	return opt, nil
}

func checkDiagonal(a *sparse.CSR) error {
	for i := 0; i < a.Rows; i++ {
		v, found := 0.0, false
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			if int(a.ColIdx[p]) == i {
				v, found = a.Val[p], true
			}
		}
		switch {
		case !found:
			return fmt.Errorf("amg: %w: row %d has no diagonal entry", ErrNotSPD, i+1)
		case !(v > 0) || math.IsInf(v, 0):
			return fmt.Errorf("amg: %w: diagonal entry of row %d is %g", ErrNotSPD, i+1, v)
		}
	}
	return nil
}

// setupSmoother fills level l's inverted diagonal and, for Chebyshev, its
// λmax estimate and coefficients.
func (h *AMG) setupSmoother(l int) error {
	lv := &h.levels[l]
	a := lv.a
	d := a.Diagonal(nil)
	for i, v := range d {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("amg: %w: level %d's operator has diagonal entry %g in row %d", ErrNotSPD, l, v, i+1)
		}
	}
	switch h.opt.Smoother {
	case Chebyshev:
		if l < len(h.lmaxKnown) && h.lmaxKnown[l] > 0 {
			lv.lmax = h.lmaxKnown[l]
		} else {
			lv.lmax = maxEigDinvA(a, d)
		}
		lv.cheb = newChebyshev(lv.lmax, h.opt.Degree)
		for i, v := range d {
			d[i] = 1 / v
		}
	case L1Jacobi:
		// D_l1 = diag(Σ_j |a_ij|) (Baker, Falgout, Kolev and Yang,
		// "Multigrid smoothers for ultraparallel computing", SIAM J. Sci.
		// Comput. 33, 2011, the l1 smoother with one row per block): the
		// sweep is convergent for every SPD A without a damping factor.
		for i := range d {
			s := 0.0
			for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
				s += math.Abs(a.Val[p])
			}
			d[i] = 1 / s
		}
	}
	lv.winv = d
	return nil
}

// factorCoarsest factors the coarsest operator by dense Cholesky (gonum
// mat.Cholesky; Golub and Van Loan §4.2) and keeps L row-major.
func (h *AMG) factorCoarsest(c *sparse.CSR) error {
	n := c.Rows
	if n == 0 {
		return nil
	}
	s := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for p := c.RowPtr[i]; p < c.RowPtr[i+1]; p++ {
			if j := int(c.ColIdx[p]); j >= i {
				s.SetSym(i, j, c.Val[p])
			}
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(s) {
		return fmt.Errorf("amg: %w: dense Cholesky of the coarsest operator (level %d, %d rows) failed",
			ErrNotSPD, len(h.levels)-1, n)
	}
	var l mat.TriDense
	ch.LTo(&l)
	h.chol = make([]float64, n*n)
	for i := range n {
		for j := 0; j <= i; j++ {
			h.chol[i*n+j] = l.At(i, j)
		}
	}
	return nil
}

func (h *AMG) newWork() *work {
	w := &work{lv: make([]levelWork, len(h.levels))}
	for l, lv := range h.levels {
		n := lv.a.Rows
		w.lv[l] = levelWork{x: make([]float64, n), b: make([]float64, n), r: make([]float64, n), d: make([]float64, n)}
	}
	w.y = make([]float64, h.nc)
	return w
}

// Size returns the order of the finest level.
func (h *AMG) Size() int { return h.levels[0].a.Rows }

// Precondition sets dst = M⁻¹·r, one V(1,1) cycle from a zero start. dst
// and r may be the same slice. It allocates nothing once a set of work
// vectors is free (always, for one caller at a time). Panics if len(dst)
// or len(r) is not the order.
func (h *AMG) Precondition(dst, r []float64) {
	n := h.Size()
	if len(dst) != n || len(r) != n {
		panic(fmt.Sprintf("amg: Precondition: len(dst)=%d, len(r)=%d, want %d", len(dst), len(r), n))
	}
	h.mu.Lock()
	var w *work
	if k := len(h.free); k > 0 {
		w = h.free[k-1]
		h.free = h.free[:k-1]
	}
	h.mu.Unlock()
	if w == nil {
		w = h.newWork()
	}
	b := r
	if n > 0 && &dst[0] == &r[0] {
		copy(w.lv[0].b, r)
		b = w.lv[0].b
	}
	h.cycle(0, dst, b, w)
	h.mu.Lock()
	h.free = append(h.free, w)
	h.mu.Unlock()
}

// cycle sets x to one V(1,1) cycle's approximation of A_l⁻¹·b from a zero
// start (Briggs, Henson and McCormick, A Multigrid Tutorial 2nd ed., ch. 3;
// Saad §13.4): smooth, restrict the residual, recurse, prolongate the
// correction, smooth again with the same smoother.
func (h *AMG) cycle(l int, x, b []float64, w *work) {
	lv := &h.levels[l]
	if l == len(h.levels)-1 {
		if h.chol != nil {
			h.coarseSolve(x, b, w.y)
		} else {
			h.smooth(lv, x, b, &w.lv[l], true)
			h.smooth(lv, x, b, &w.lv[l], false)
		}
		return
	}
	lw, cw := &w.lv[l], &w.lv[l+1]
	h.smooth(lv, x, b, lw, true)
	lv.a.Residual(lw.r, b, x)
	lv.r.MulVec(cw.b, lw.r)
	h.cycle(l+1, cw.x, cw.b, w)
	lv.p.MulVec(lw.d, cw.x)
	sparse.Axpy(x, 1, lw.d)
	h.smooth(lv, x, b, lw, false)
}

// smooth applies the level's smoother to A·x = b, from x = 0 when zero is
// set (the first step then needs no product).
func (h *AMG) smooth(lv *level, x, b []float64, lw *levelWork, zero bool) {
	if h.opt.Smoother == L1Jacobi {
		if zero {
			sparse.DiagInit(x, lw.d, lv.winv, b, 1)
			return
		}
		lv.a.Residual(lw.r, b, x)
		sparse.DiagStep(x, lw.d, lv.winv, lw.r, 0, 1)
		return
	}
	// Chebyshev iteration, Saad Algorithm 12.1 with preconditioner D⁻¹:
	// σ = θ/δ, ρ₀ = 1/σ, d₀ = D⁻¹r/θ; then ρ_k = 1/(2σ − ρ_{k−1}),
	// d_k = ρ_kρ_{k−1}·d_{k−1} + (2ρ_k/δ)·D⁻¹r_k, x += d_k.
	c := lv.cheb
	if zero {
		sparse.DiagInit(x, lw.d, lv.winv, b, 1/c.theta)
	} else {
		lv.a.Residual(lw.r, b, x)
		sparse.DiagStep(x, lw.d, lv.winv, lw.r, 0, 1/c.theta)
	}
	sigma := c.theta / c.delt
	rho := 1 / sigma
	for range c.deg - 1 {
		lv.a.Residual(lw.r, b, x)
		rhoN := 1 / (2*sigma - rho)
		sparse.DiagStep(x, lw.d, lv.winv, lw.r, rhoN*rho, 2*rhoN/c.delt)
		rho = rhoN
	}
}

// coarseSolve sets x = A_c⁻¹·b with the Cholesky factor: L·y = b forward,
// then Lᵀ·x = y backward by columns of Lᵀ (rows of L), so both passes read
// L row by row.
func (h *AMG) coarseSolve(x, b, y []float64) {
	n, l := h.nc, h.chol
	for i := range n {
		row := l[i*n : i*n+i+1]
		s := b[i]
		for j, v := range row[:i] {
			s -= v * y[j]
		}
		y[i] = s / row[i]
	}
	for i := n - 1; i >= 0; i-- {
		row := l[i*n : i*n+i+1]
		xi := y[i] / row[i]
		x[i] = xi
		for j, v := range row[:i] {
			y[j] -= v * xi
		}
	}
}

// LevelMatrices are one level's operator and its prolongator to the next
// coarser level (nil on the coarsest), as Levels returns them.
type LevelMatrices struct {
	A, P *sparse.CSR
}

// Levels returns the hierarchy's matrices, finest first. They belong to
// the preconditioner and must not be modified; the finest A is the matrix
// New was given.
func (h *AMG) Levels() []LevelMatrices {
	out := make([]LevelMatrices, len(h.levels))
	for l, lv := range h.levels {
		out[l] = LevelMatrices{A: lv.a, P: lv.p}
	}
	return out
}
