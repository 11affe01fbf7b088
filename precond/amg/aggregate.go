package amg

import (
	"math"

	"github.com/residua/residua/internal/hugepage"
	"github.com/residua/residua/sparse"
)

// nodes groups the unknowns of one level into nodes: the unknowns that
// belong together (the three displacements of a mesh node, or the coarse
// unknowns of one aggregate). Strength of connection and aggregation work on
// nodes, so that an aggregate never splits a node. A nil *nodes means every
// unknown is its own node.
type nodes struct {
	count int
	of    []int32 // of[i] is the node of unknown i
	ptr   []int   // unknowns of node I are dofs[ptr[I]:ptr[I+1]], increasing
	dofs  []int32
}

// blockNodes returns the nodes of consecutive blocks of bs unknowns (nil for
// bs = 1). n must be a multiple of bs.
func blockNodes(n, bs int) *nodes {
	if bs <= 1 {
		return nil
	}
	nd := &nodes{count: n / bs, of: make([]int32, n), ptr: make([]int, n/bs+1), dofs: make([]int32, n)}
	for i := range n {
		nd.of[i] = int32(i / bs)
		nd.dofs[i] = int32(i)
	}
	for k := range nd.ptr {
		nd.ptr[k] = k * bs
	}
	return nd
}

// graph is the strong part of the node graph: node I's strong neighbours
// are adj[ptr[I]:ptr[I+1]] (increasing, I itself excluded), with the
// normalised strength of each connection in w.
type graph struct {
	ptr []int
	adj []int32
	w   []float64
}

// strength returns the strong node graph of a at threshold theta.
//
// Unknowns i ≠ j are strongly connected when |a_ij| ≥ θ·√(|a_ii|·|a_jj|)
// (Vaněk, Mandel and Brezina 1996, §3, the strong ε-neighbourhood). For
// nodes of several unknowns the absolute values become Frobenius norms of
// the blocks: nodes I ≠ J are strongly connected when
// ‖A_IJ‖_F ≥ θ·√(‖A_II‖_F·‖A_JJ‖_F), which is the scalar rule when every
// node holds one unknown. The strength recorded is the left side over the
// right side's √(…), so that a larger value is a stronger connection.
func strength(a *sparse.CSR, nd *nodes, theta float64) *graph {
	if nd == nil {
		return scalarStrength(a, theta)
	}
	nn := nd.count
	diag := make([]float64, nn) // ‖A_II‖_F
	acc := make([]float64, nn)
	mark := make([]int32, nn)
	for j := range mark {
		mark[j] = -1
	}
	for I := range nn {
		s := 0.0
		for _, i := range nd.dofs[nd.ptr[I]:nd.ptr[I+1]] {
			for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
				if nd.of[a.ColIdx[p]] == int32(I) {
					s += a.Val[p] * a.Val[p]
				}
			}
		}
		diag[I] = math.Sqrt(s)
	}
	g := &graph{ptr: make([]int, nn+1)}
	var cols []int32
	for I := range nn {
		cols = cols[:0]
		for _, i := range nd.dofs[nd.ptr[I]:nd.ptr[I+1]] {
			for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
				J := nd.of[a.ColIdx[p]]
				if J == int32(I) {
					continue
				}
				if mark[J] != int32(I) {
					mark[J] = int32(I)
					acc[J] = 0
					cols = append(cols, J)
				}
				acc[J] += a.Val[p] * a.Val[p]
			}
		}
		sortInt32(cols)
		for _, J := range cols {
			ref := math.Sqrt(diag[I] * diag[J])
			if v := math.Sqrt(acc[J]); v >= theta*ref && ref > 0 {
				g.adj = append(g.adj, J)
				g.w = append(g.w, v/ref)
			}
		}
		g.ptr[I+1] = len(g.adj)
	}
	return g
}

func scalarStrength(a *sparse.CSR, theta float64) *graph {
	n := a.Rows
	d := a.Diagonal(nil)
	for i, v := range d {
		d[i] = math.Abs(v)
	}
	m := max(0, a.NNZ()-n)
	g := &graph{ptr: make([]int, n+1), adj: make([]int32, m), w: make([]float64, m)}
	hugepage.Advise(g.adj)
	hugepage.Advise(g.w)
	// Squares on both sides: a_ij² ≥ θ²·|a_ii·a_jj|, no square root; the
	// strength recorded is then the square of the normalised one, which
	// orders connections the same way.
	t2 := theta * theta
	k := 0
	for i := range n {
		di := d[i]
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			j := a.ColIdx[p]
			if int(j) == i {
				continue
			}
			ref := di * d[j]
			if v := a.Val[p] * a.Val[p]; v >= t2*ref && ref > 0 {
				g.adj[k] = j
				g.w[k] = v / ref
				k++
			}
		}
		g.ptr[i+1] = k
	}
	g.adj, g.w = g.adj[:k], g.w[:k]
	return g
}

// aggregate partitions the nodes of g into aggregates by the three greedy
// phases of Vaněk, Mandel and Brezina 1996, §3 (our reading of it), visiting
// nodes in index order so that the result is a pure function of the graph:
//
//  1. A node whose strong neighbours are all still free becomes the root of
//     a new aggregate made of it and its whole strong neighbourhood. A node
//     without strong neighbours (isolated) joins no aggregate, as in the
//     paper: its row of the prolongator is empty and only the smoother
//     treats it, which suffices since it is weakly coupled to every other
//     node. (Keeping isolated nodes as aggregates of one, as we first did,
//     carried them to every coarser level: on bcsstk18 the levels then
//     shrank by only 0.73 a level and the operator complexity reached 16.)
//  2. Each node still free joins the phase-1 aggregate of the strong
//     neighbour it is most strongly connected to (the lower-numbered
//     neighbour on a tie); only aggregates from phase 1 are considered.
//  3. Each node still free (all its strong neighbours were free or joined in
//     phase 2) becomes the root of an aggregate of itself and its strong
//     neighbours that are still free.
//
// It returns each node's aggregate (−1 for an isolated node) and the
// number of aggregates.
func aggregate(g *graph, nn int) ([]int32, int) {
	agg := make([]int32, nn)
	for i := range agg {
		agg[i] = -1
	}
	na := int32(0)
	// Phase 1.
	for i := range nn {
		if agg[i] >= 0 || g.ptr[i] == g.ptr[i+1] {
			continue
		}
		free := true
		for _, j := range g.adj[g.ptr[i]:g.ptr[i+1]] {
			if agg[j] >= 0 {
				free = false
				break
			}
		}
		if !free {
			continue
		}
		agg[i] = na
		for _, j := range g.adj[g.ptr[i]:g.ptr[i+1]] {
			agg[j] = na
		}
		na++
	}
	// Phase 2: decide every free node against the phase-1 assignment, then
	// assign, so that a node joined in this phase attracts nobody.
	phase1 := append([]int32(nil), agg...)
	for i := range nn {
		if phase1[i] >= 0 || g.ptr[i] == g.ptr[i+1] {
			continue
		}
		best, bestW := int32(-1), -1.0
		for q := g.ptr[i]; q < g.ptr[i+1]; q++ {
			j := g.adj[q]
			if phase1[j] >= 0 && g.w[q] > bestW {
				best, bestW = phase1[j], g.w[q]
			}
		}
		agg[i] = best
	}
	// Phase 3.
	for i := range nn {
		if agg[i] >= 0 || g.ptr[i] == g.ptr[i+1] {
			continue
		}
		agg[i] = na
		for _, j := range g.adj[g.ptr[i]:g.ptr[i+1]] {
			if agg[j] < 0 {
				agg[j] = na
			}
		}
		na++
	}
	return agg, int(na)
}

// filtered returns A_F: A with the entries between unknowns of weakly
// connected nodes removed and added to the diagonal, so that A_F keeps A's
// row sums (A_F·1 = A·1, hence the constant stays in the near-null space of
// A_F wherever it is in A's); entries within a node are kept. This is the
// filtered matrix of Vaněk, Mandel and Brezina 1996, §3, used only to smooth
// the prolongator. With every connection strong it is A itself (shared, not
// copied).
func filtered(a *sparse.CSR, nd *nodes, g *graph) *sparse.CSR {
	nn := a.Rows
	nodeOf := func(i int32) int32 { return i }
	if nd != nil {
		nn = nd.count
		nodeOf = func(i int32) int32 { return nd.of[i] }
	}
	// Strong pairs (I, J) are looked up with a marker per node row.
	mark := make([]int32, nn)
	for j := range mark {
		mark[j] = -1
	}
	// A first pass counts the weak entries, so that a matrix without any
	// (every Poisson problem) is returned as it is, without a copy.
	weak := 0
	for i := 0; i < a.Rows; i++ {
		I := nodeOf(int32(i))
		for _, J := range g.adj[g.ptr[I]:g.ptr[I+1]] {
			mark[J] = int32(i)
		}
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			if J := nodeOf(a.ColIdx[p]); J != I && mark[J] != int32(i) {
				weak++
			}
		}
	}
	if weak == 0 {
		return a
	}
	for j := range mark {
		mark[j] = -1
	}
	f := &sparse.CSR{Rows: a.Rows, Cols: a.Cols, RowPtr: make([]int, a.Rows+1)}
	f.ColIdx = make([]int32, 0, a.NNZ()-weak)
	f.Val = make([]float64, 0, a.NNZ()-weak)
	for i := 0; i < a.Rows; i++ {
		I := nodeOf(int32(i))
		for _, J := range g.adj[g.ptr[I]:g.ptr[I+1]] {
			mark[J] = int32(i)
		}
		lumped, dpos := 0.0, -1
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			j := a.ColIdx[p]
			J := nodeOf(j)
			if int(j) == i {
				dpos = len(f.Val)
			}
			if J == I || mark[J] == int32(i) {
				f.ColIdx = append(f.ColIdx, j)
				f.Val = append(f.Val, a.Val[p])
			} else {
				lumped += a.Val[p]
			}
		}
		if dpos >= 0 {
			f.Val[dpos] += lumped
		}
		f.RowPtr[i+1] = len(f.Val)
	}
	return f
}

func sortInt32(s []int32) {
	// Insertion sort: the lists are a node's neighbours, a few tens at most.
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
}
