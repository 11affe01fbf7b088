package amg

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/sparse"
)

// tentative builds the tentative prolongator P_tent of Vaněk, Mandel and
// Brezina 1996, §3: for each aggregate, the rows of the near-null space B
// (n×k, row-major) at the aggregate's unknowns, orthonormalised, so that
// P_tent·B_c = B exactly and P_tentᵀ·P_tent = I.
//
// An aggregate of m ≥ k unknowns gets k coarse unknowns: the Q of the thin
// QR factorisation B_agg = Q·R (gonum mat.QR, Householder; Golub and Van
// Loan, Matrix Computations 4th ed., §5.2) fills its block of P_tent and R
// its k rows of B_c. The signs are fixed so that R's diagonal is not
// negative. For k = 1 that is q = b_agg/‖b_agg‖₂, R = ‖b_agg‖₂, computed
// directly. An aggregate with m < k unknowns cannot carry k orthonormal
// columns; it keeps its m unknowns as they are (a block of the identity
// in P_tent) and passes its rows of B down unchanged.
//
// Unknowns of nodes in no aggregate (agg −1: isolated nodes) get empty
// rows. It returns P_tent, the coarse near-null space B_c (nc×k, row-major) and
// the coarse nodes: the coarse unknowns of each aggregate form one node
// (nil when every aggregate has one coarse unknown).
func tentative(n, k int, b []float64, nd *nodes, agg []int32, na int) (*sparse.CSR, []float64, *nodes) {
	// The unknowns of each aggregate, in increasing order.
	aptr := make([]int, na+1)
	nodeOf := func(i int) int32 { return int32(i) }
	if nd != nil {
		nodeOf = func(i int) int32 { return nd.of[i] }
	}
	for i := range n {
		if a := agg[nodeOf(i)]; a >= 0 {
			aptr[a+1]++
		}
	}
	for a := range na {
		aptr[a+1] += aptr[a]
	}
	members := make([]int32, aptr[na])
	next := append([]int(nil), aptr[:na]...)
	for i := range n {
		a := agg[nodeOf(i)]
		if a < 0 {
			continue
		}
		members[next[a]] = int32(i)
		next[a]++
	}
	// Coarse unknowns: k per aggregate, or m for an aggregate of m < k.
	cptr := make([]int, na+1)
	for a := range na {
		cptr[a+1] = cptr[a] + min(k, aptr[a+1]-aptr[a])
	}
	nc := cptr[na]
	p := &sparse.CSR{Rows: n, Cols: nc, RowPtr: make([]int, n+1)}
	for i := range n {
		if a := agg[nodeOf(i)]; a >= 0 {
			p.RowPtr[i+1] = cptr[a+1] - cptr[a]
		}
	}
	for i := range n {
		p.RowPtr[i+1] += p.RowPtr[i]
	}
	p.ColIdx = make([]int32, p.RowPtr[n])
	p.Val = make([]float64, p.RowPtr[n])
	bc := make([]float64, nc*k)

	var qr mat.QR
	var q, r mat.Dense
	for a := range na {
		mem := members[aptr[a]:aptr[a+1]]
		m := len(mem)
		c0 := cptr[a]
		switch {
		case m < k:
			for t, i := range mem {
				p.ColIdx[p.RowPtr[i]] = int32(c0 + t)
				p.Val[p.RowPtr[i]] = 1
				copy(bc[(c0+t)*k:(c0+t+1)*k], b[int(i)*k:(int(i)+1)*k])
			}
		case k == 1:
			s := 0.0
			for _, i := range mem {
				s += b[i] * b[i]
			}
			norm := math.Sqrt(s)
			for _, i := range mem {
				p.ColIdx[p.RowPtr[i]] = int32(c0)
				if norm > 0 {
					p.Val[p.RowPtr[i]] = b[i] / norm
				} else {
					// A near-null vector that vanishes on the whole
					// aggregate: any unit vector spans the same (empty)
					// part of it; take the constant one.
					p.Val[p.RowPtr[i]] = 1 / math.Sqrt(float64(m))
				}
			}
			bc[c0] = norm
		default:
			blk := mat.NewDense(m, k, nil)
			for t, i := range mem {
				for c := range k {
					blk.Set(t, c, b[int(i)*k+c])
				}
			}
			qr.Factorize(blk)
			q.Reset() // aggregates differ in size: let QTo and RTo resize
			r.Reset()
			qr.QTo(&q)
			qr.RTo(&r)
			for c := range k {
				sign := 1.0
				if r.At(c, c) < 0 {
					sign = -1
				}
				for t, i := range mem {
					pos := p.RowPtr[i] + c
					p.ColIdx[pos] = int32(c0 + c)
					p.Val[pos] = sign * q.At(t, c)
				}
				for c2 := range k {
					bc[(c0+c)*k+c2] = sign * r.At(c, c2)
				}
			}
		}
	}
	var cn *nodes
	if nc != na {
		cn = &nodes{count: na, of: make([]int32, nc), ptr: cptr, dofs: make([]int32, nc)}
		for a := range na {
			for c := cptr[a]; c < cptr[a+1]; c++ {
				cn.of[c] = int32(a)
				cn.dofs[c] = int32(c)
			}
		}
	}
	return p, bc, cn
}

// smoothProlongator returns P = (I − ω·D_F⁻¹·A_F)·P_tent, the smoothed
// prolongator of Vaněk, Mandel and Brezina 1996, §3 (one damped Jacobi step
// on A_F applied to the tentative prolongator's columns), with D_F the
// diagonal of A_F. The product A_F·P_tent comes from sparse.Mul; P_tent's
// pattern is contained in it, since A_F stores its diagonal.
func smoothProlongator(af, pt *sparse.CSR, omega float64) *sparse.CSR {
	d := af.Diagonal(nil)
	ap := sparse.Mul(af, pt)
	for i := 0; i < ap.Rows; i++ {
		s := -omega / d[i]
		q, qEnd := pt.RowPtr[i], pt.RowPtr[i+1]
		for p := ap.RowPtr[i]; p < ap.RowPtr[i+1]; p++ {
			v := s * ap.Val[p]
			if q < qEnd && pt.ColIdx[q] == ap.ColIdx[p] {
				v += pt.Val[q]
				q++
			}
			ap.Val[p] = v
		}
	}
	return ap
}
