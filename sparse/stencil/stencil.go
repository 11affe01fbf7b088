package stencil

import (
	"fmt"
	"math"
	"runtime"
	"sync"

	"github.com/residua/residua/internal/hugepage"
	"github.com/residua/residua/sparse"
)

// offset is a stencil neighbour's displacement on the grid.
type offset struct{ dx, dy, dz int }

// 5-point, 7-point and 27-point stencils, each listed in increasing order of
// (dz, dy, dx). Because a row number is x + n·y + n²·z with 0 ≤ x, y < n,
// that order is the order of the neighbours' row numbers, so each row's
// columns come out sorted without a sort.
var (
	offsets5 = []offset{{0, -1, 0}, {-1, 0, 0}, {0, 0, 0}, {1, 0, 0}, {0, 1, 0}}
	offsets7 = []offset{{0, 0, -1}, {0, -1, 0}, {-1, 0, 0}, {0, 0, 0}, {1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
)

var offsets27 = func() []offset {
	var o []offset
	for dz := -1; dz <= 1; dz++ {
		for dy := -1; dy <= 1; dy++ {
			for dx := -1; dx <= 1; dx++ {
				o = append(o, offset{dx, dy, dz})
			}
		}
	}
	return o
}()

// coefFunc writes the values of the stencil at grid point (x, y, z) into
// vals, one per offset (in the order of the offsets). Values for neighbours
// outside the grid are ignored. It is called concurrently from several
// goroutines and must not keep vals.
type coefFunc func(x, y, z int, vals []float64)

// build assembles the matrix of a stencil on an nx×ny×nz grid. Row numbers
// are x + nx·y + nx·ny·z. If coef is nil, the constant values in fixed are
// used at every point.
//
// Work is split over grid lines (fixed y and z, all x): the row pointers are
// counted line by line in parallel, summed sequentially into line offsets,
// then each goroutine fills whole lines. Each entry is written exactly once
// and depends only on its grid point, so the result does not depend on the
// number of goroutines.
func build(nx, ny, nz int, offs []offset, fixed []float64, coef coefFunc) *sparse.CSR {
	nrows := nx * ny * nz
	if nx < 1 || ny < 1 || nz < 1 || nrows/nx/ny != nz || nrows > sparse.MaxDim {
		panic(fmt.Sprintf("stencil: grid %d×%d×%d has too many points (at most %d)", nx, ny, nz, sparse.MaxDim))
	}
	lines := ny * nz
	// lineNNZ[l] is the number of entries of grid line l; after the prefix
	// sum it is the position of the line's first entry.
	lineNNZ := make([]int, lines+1)
	parallelLines(lines, func(l int) {
		y, z := l%ny, l/ny
		cnt := 0
		for x := 0; x < nx; x++ {
			for _, o := range offs {
				if inside(x+o.dx, y+o.dy, z+o.dz, nx, ny, nz) {
					cnt++
				}
			}
		}
		lineNNZ[l+1] = cnt
	})
	for l := 0; l < lines; l++ {
		lineNNZ[l+1] += lineNNZ[l]
	}
	nnz := lineNNZ[lines]
	a := &sparse.CSR{
		Rows:   nrows,
		Cols:   nrows,
		RowPtr: make([]int, nrows+1),
		ColIdx: make([]int32, nnz),
		Val:    make([]float64, nnz),
	}
	// Before the first write: a large problem's build time is otherwise
	// mostly first-touch page faults (see internal/hugepage).
	hugepage.Advise(a.RowPtr)
	hugepage.Advise(a.ColIdx)
	hugepage.Advise(a.Val)
	// Row-number displacement of each offset.
	delta := make([]int, len(offs))
	for k, o := range offs {
		delta[k] = o.dx + nx*o.dy + nx*ny*o.dz
	}
	parallelLines(lines, func(l int) {
		y, z := l%ny, l/ny
		vals := make([]float64, len(offs))
		if coef == nil {
			copy(vals, fixed)
		}
		p := lineNNZ[l]
		row := nx * l
		for x := 0; x < nx; x++ {
			if coef != nil {
				coef(x, y, z, vals)
			}
			a.RowPtr[row] = p
			for k, o := range offs {
				if inside(x+o.dx, y+o.dy, z+o.dz, nx, ny, nz) {
					a.ColIdx[p] = int32(row + delta[k])
					a.Val[p] = vals[k]
					p++
				}
			}
			row++
		}
	})
	a.RowPtr[nrows] = nnz
	return a
}

func inside(x, y, z, nx, ny, nz int) bool {
	return uint(x) < uint(nx) && uint(y) < uint(ny) && uint(z) < uint(nz)
}

// parallelLines calls f(l) for every l in [0, lines), on GOMAXPROCS
// goroutines each taking a contiguous range of lines.
func parallelLines(lines int, f func(l int)) {
	w := runtime.GOMAXPROCS(0)
	if w > lines {
		w = lines
	}
	if w <= 1 || lines < 64 {
		for l := 0; l < lines; l++ {
			f(l)
		}
		return
	}
	var wg sync.WaitGroup
	for k := 0; k < w; k++ {
		lo, hi := k*lines/w, (k+1)*lines/w
		wg.Add(1)
		go func() {
			defer wg.Done()
			for l := lo; l < hi; l++ {
				f(l)
			}
		}()
	}
	wg.Wait()
}

func checkSide(n int) {
	if n < 1 {
		panic(fmt.Sprintf("stencil: grid side %d < 1", n))
	}
}

func checkCoef(name string, v float64) {
	if !(v > 0) || math.IsInf(v, 0) {
		panic(fmt.Sprintf("stencil: %s = %v is not positive and finite", name, v))
	}
}

// Poisson2D returns the 5-point finite-difference Laplacian on the n×n
// interior points of the unit square with homogeneous Dirichlet conditions,
// unscaled: 4 on the diagonal and −1 for each of the up to four grid
// neighbours (LeVeque, Finite Difference Methods for Ordinary and Partial
// Differential Equations, SIAM 2007, chapter 3).
// It has n² rows and 5n² − 4n entries; it is symmetric positive definite.
func Poisson2D(n int) *sparse.CSR {
	checkSide(n)
	return build(n, n, 1, offsets5, []float64{-1, -1, 4, -1, -1}, nil)
}

// Poisson3D returns the 7-point finite-difference Laplacian on the n×n×n
// interior points of the unit cube with homogeneous Dirichlet conditions,
// unscaled: 6 on the diagonal and −1 for each of the up to six grid
// neighbours (the 5-point stencil of LeVeque chapter 3 carried to three
// dimensions).
// It has n³ rows and 7n³ − 6n² entries; it is symmetric positive definite.
func Poisson3D(n int) *sparse.CSR {
	checkSide(n)
	return build(n, n, n, offsets7, []float64{-1, -1, -1, 6, -1, -1, -1}, nil)
}

// Stencil27 returns a 27-point operator on the n×n×n interior grid with
// Dirichlet conditions: 26 on the diagonal and −1 for each of the up to 26
// neighbours that share a face, an edge or a corner with the point. It is
// symmetric and positive definite: it equals 27·I − T⊗T⊗T with T the n×n
// tridiagonal matrix of ones, whose eigenvalues 1 + 2cos(kπ/(n+1)) lie in
// (−1, 3), so its eigenvalues 27 − μ_p·μ_q·μ_r are positive (Horn and
// Johnson, Topics in Matrix Analysis, Theorem 4.2.12, for the eigenvalues of
// a Kronecker product). Interior rows sum to zero, like a Laplacian's.
func Stencil27(n int) *sparse.CSR {
	checkSide(n)
	vals := make([]float64, 27)
	for k := range vals {
		vals[k] = -1
	}
	vals[13] = 26 // offset (0, 0, 0) is the middle of the 27
	return build(n, n, n, offsets27, vals, nil)
}

// Anisotropic3D returns the 7-point discretisation of
// −(kx·u_xx + ky·u_yy + kz·u_zz) on the n×n×n interior grid with Dirichlet
// conditions, unscaled: 2(kx + ky + kz) on the diagonal and −kx, −ky, −kz
// for the neighbours along x, y and z. With coefficients that differ by
// orders of magnitude (for example 1, 10⁻², 10⁻⁴) the problem is strongly
// coupled along one axis, which point preconditioners handle poorly. Its
// eigenvalues are 4kx·sin²(pπ/(2(n+1))) + 4ky·sin²(qπ/(2(n+1))) +
// 4kz·sin²(rπ/(2(n+1))), 1 ≤ p, q, r ≤ n. Panics if a coefficient is not
// positive and finite.
func Anisotropic3D(n int, kx, ky, kz float64) *sparse.CSR {
	checkSide(n)
	checkCoef("kx", kx)
	checkCoef("ky", ky)
	checkCoef("kz", kz)
	return build(n, n, n, offsets7, []float64{-kz, -ky, -kx, 2 * (kx + ky + kz), -kx, -ky, -kz}, nil)
}

// Jump3D returns the 7-point finite-volume discretisation of −∇·(k∇u) on the
// n×n×n interior grid with Dirichlet conditions, where the cube is cut into
// 2×2×2 blocks (split at n/2 along each axis, the first half having ⌊n/2⌋
// points) and k is 1 or contrast in a checkerboard of blocks: k = contrast
// where the number of block coordinates in the upper half is odd, 1
// elsewhere. The coefficient on the face between neighbours p and q is the
// harmonic mean 2·k_p·k_q/(k_p + k_q), which keeps the matrix symmetric; the
// off-diagonal entry is minus that face coefficient and the diagonal is the
// sum of the six face coefficients, a face on the boundary taking k_p (the
// point's own coefficient towards the eliminated boundary value). The matrix
// is therefore symmetric, weakly diagonally dominant with strict dominance on
// boundary rows and irreducible, hence positive definite (Varga, Matrix
// Iterative Analysis, irreducibly diagonally dominant matrices). Panics if
// contrast is not positive and finite.
func Jump3D(n int, contrast float64) *sparse.CSR {
	checkSide(n)
	checkCoef("contrast", contrast)
	half := n / 2
	k := func(x, y, z int) float64 {
		odd := 0
		for _, c := range [3]int{x, y, z} {
			if c >= half {
				odd ^= 1
			}
		}
		if odd == 1 {
			return contrast
		}
		return 1
	}
	face := func(kp float64, x, y, z int) float64 {
		if !inside(x, y, z, n, n, n) {
			return kp
		}
		kq := k(x, y, z)
		if kq == kp {
			return kp
		}
		return 2 * kp * kq / (kp + kq)
	}
	coef := func(x, y, z int, vals []float64) {
		kp := k(x, y, z)
		diag := 0.0
		for i, o := range offsets7 {
			if i == 3 {
				continue
			}
			f := face(kp, x+o.dx, y+o.dy, z+o.dz)
			vals[i] = -f
			diag += f
		}
		vals[3] = diag
	}
	return build(n, n, n, offsets7, nil, coef)
}

// Ones returns b = A·1, the row sums of a, so that the system A·x = b has the
// known solution x = (1, 1, ..., 1). Each row's entries are added in column
// order, the same order as a product A·x, so the result is bit-identical to
// the product with a vector of ones.
func Ones(a *sparse.CSR) []float64 {
	b := make([]float64, a.Rows)
	for i := range b {
		s := 0.0
		for _, v := range a.Val[a.RowPtr[i]:a.RowPtr[i+1]] {
			s += v
		}
		b[i] = s
	}
	return b
}
