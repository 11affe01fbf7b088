package precond

import (
	"math"
	"math/rand/v2"
	"sort"

	"github.com/residua/residua/sparse"
	"gonum.org/v1/gonum/mat"
)

// Test matrices built here so that the package's tests do not depend on
// the generators in sparse/stencil.

// csrFromDense returns the CSR holding a's nonzero entries.
func csrFromDense(a [][]float64) *sparse.CSR {
	n := len(a)
	m := &sparse.CSR{Rows: n, Cols: len(a[0]), RowPtr: make([]int, n+1)}
	for i, row := range a {
		for j, v := range row {
			if v != 0 {
				m.ColIdx = append(m.ColIdx, int32(j))
				m.Val = append(m.Val, v)
			}
		}
		m.RowPtr[i+1] = len(m.ColIdx)
	}
	return m
}

// csrFromTriplets builds a CSR from (i, j, v) entries, summing duplicates
// and sorting each row.
func csrFromTriplets(n int, is, js []int, vs []float64) *sparse.CSR {
	type e struct {
		j int
		v float64
	}
	rows := make([][]e, n)
	for k := range is {
		rows[is[k]] = append(rows[is[k]], e{js[k], vs[k]})
	}
	m := &sparse.CSR{Rows: n, Cols: n, RowPtr: make([]int, n+1)}
	for i, r := range rows {
		sort.SliceStable(r, func(a, b int) bool { return r[a].j < r[b].j })
		for k := 0; k < len(r); k++ {
			if k > 0 && r[k].j == r[k-1].j {
				m.Val[len(m.Val)-1] += r[k].v
				continue
			}
			m.ColIdx = append(m.ColIdx, int32(r[k].j))
			m.Val = append(m.Val, r[k].v)
		}
		m.RowPtr[i+1] = len(m.ColIdx)
	}
	return m
}

// laplace returns the (2d+1)-point finite-difference Laplacian on an
// nx×ny×nz grid with Dirichlet boundaries (nz = 1 for 2D, ny = nz = 1 for
// 1D), unknowns numbered x fastest: diagonal 2d, −1 to each neighbour.
func laplace(nx, ny, nz int) *sparse.CSR {
	n := nx * ny * nz
	dim := 0
	for _, s := range []int{nx, ny, nz} {
		if s > 1 {
			dim++
		}
	}
	m := &sparse.CSR{Rows: n, Cols: n, RowPtr: make([]int, n+1)}
	m.ColIdx = make([]int32, 0, (2*dim+1)*n)
	m.Val = make([]float64, 0, (2*dim+1)*n)
	add := func(j int, v float64) {
		m.ColIdx = append(m.ColIdx, int32(j))
		m.Val = append(m.Val, v)
	}
	for z := 0; z < nz; z++ {
		for y := 0; y < ny; y++ {
			for x := 0; x < nx; x++ {
				i := x + nx*(y+ny*z)
				if z > 0 {
					add(i-nx*ny, -1)
				}
				if y > 0 {
					add(i-nx, -1)
				}
				if x > 0 {
					add(i-1, -1)
				}
				add(i, float64(2*dim))
				if x < nx-1 {
					add(i+1, -1)
				}
				if y < ny-1 {
					add(i+nx, -1)
				}
				if z < nz-1 {
					add(i+nx*ny, -1)
				}
				m.RowPtr[i+1] = len(m.ColIdx)
			}
		}
	}
	return m
}

// randomSPD returns a sparse symmetric strictly diagonally dominant matrix
// with positive diagonal (hence SPD by Gershgorin's theorem; Golub and Van
// Loan, 4th ed., §7.2.1) with about deg off-diagonal entries per row, some
// of them positive.
func randomSPD(n, deg int, seed uint64) *sparse.CSR {
	rng := rand.New(rand.NewPCG(seed, 1))
	var is, js []int
	var vs []float64
	rowSum := make([]float64, n)
	for i := 0; i < n; i++ {
		for k := 0; k < deg/2; k++ {
			j := rng.IntN(n)
			if j == i {
				continue
			}
			v := rng.Float64()*2 - 1.5
			is, js, vs = append(is, i, j), append(js, j, i), append(vs, v, v)
		}
	}
	for k := range is {
		if v := vs[k]; v < 0 {
			rowSum[is[k]] -= v
		} else {
			rowSum[is[k]] += v
		}
	}
	for i := 0; i < n; i++ {
		is, js, vs = append(is, i), append(js, i), append(vs, rowSum[i]*(1.01+rng.Float64())+0.1)
	}
	return csrFromTriplets(n, is, js, vs)
}

// dense returns a as a gonum dense matrix.
func dense(a *sparse.CSR) *mat.Dense {
	d := mat.NewDense(a.Rows, a.Cols, nil)
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			d.Set(i, int(a.ColIdx[p]), a.Val[p])
		}
	}
	return d
}

// cholLower returns IC(0)'s Cholesky-like factor (I + L)·D^½ as a dense
// lower triangular matrix.
func (m *IC0) cholLower() *mat.TriDense {
	t := mat.NewTriDense(m.n, mat.Lower, nil)
	for i := 0; i < m.n; i++ {
		t.SetTri(i, i, 1)
		for p := m.lPtr[i]; p < m.lPtr[i+1]; p++ {
			t.SetTri(i, int(m.lCol[p]), m.lVal[p])
		}
	}
	var s mat.TriDense
	sq := make([]float64, m.n)
	for i, v := range m.dInv {
		sq[i] = 1 / math.Sqrt(v)
	}
	s.MulTri(t, mat.NewTriDense(m.n, mat.Lower, diagData(sq)))
	return &s
}

func diagData(d []float64) []float64 {
	n := len(d)
	out := make([]float64, n*n)
	for i, v := range d {
		out[i*n+i] = v
	}
	return out
}
