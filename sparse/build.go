package sparse

import (
	"errors"
	"fmt"
	"runtime"
	"sort"
)

// Symmetry says how a list of entries relates to the full matrix it
// describes: every entry is given (General), or only one triangle is given and
// the other follows from a(j,i) = a(i,j) (Symmetric) or a(j,i) = -a(i,j)
// (SkewSymmetric). The names follow the symmetry words of the Matrix Market
// format (Boisvert, Pozo, Remington, NIST, 1996).
type Symmetry int

const (
	General Symmetry = iota
	Symmetric
	SkewSymmetric
)

// String returns the Matrix Market word for s.
func (s Symmetry) String() string {
	switch s {
	case General:
		return "general"
	case Symmetric:
		return "symmetric"
	case SkewSymmetric:
		return "skew-symmetric"
	}
	return fmt.Sprintf("Symmetry(%d)", int(s))
}

// BuildOptions are the settings of FromTriplets. The zero value builds a
// general matrix and keeps explicit zeros.
type BuildOptions struct {
	// Symmetry says whether the triplets hold every entry (General, the
	// default) or one triangle of a symmetric or skew-symmetric matrix, which
	// is then expanded to full storage.
	Symmetry Symmetry
	// DropZeros removes entries whose value is zero after duplicates are
	// summed. By default they are kept: an explicit zero is part of the
	// sparsity pattern (the collection keeps them too).
	DropZeros bool
}

// BuildStats reports what FromTriplets did beyond copying.
type BuildStats struct {
	// Duplicates counts the given triplets that were added into an earlier
	// triplet with the same row and column (the finite-element assembly
	// convention). Mirrored entries are not counted twice.
	Duplicates int
	// ExplicitZeros counts the entries of the full (expanded) matrix whose
	// value is zero after summing, including those dropped.
	ExplicitZeros int
	// Dropped counts the entries of the full matrix removed by DropZeros.
	Dropped int
}

// Errors wrapped by FromTriplets. Each names a defect of the data, so callers
// such as a file reader can map them to their own positions.
var (
	ErrIndexRange    = errors.New("index out of range")
	ErrNotSquare     = errors.New("symmetric storage needs a square matrix")
	ErrBothTriangles = errors.New("entries on both sides of the diagonal in one-triangle storage")
	ErrSkewDiagonal  = errors.New("nonzero diagonal entry in a skew-symmetric matrix")
)

// Triplets is a batch of coordinate (COO) entries (I[k], J[k], V[k]) with
// 0-based indices. A reader that parses a large file in pieces hands the
// pieces to FromTripletBlocks without first joining them into one array.
type Triplets struct {
	I, J []int32
	V    []float64
}

// FromTriplets assembles a CSR matrix from coordinate (COO) triplets
// (i[k], j[k], v[k]) with 0-based indices.
//
// Triplets with the same row and column are summed in the order given, as in
// finite-element assembly, and counted in BuildStats.Duplicates. With
// opt.Symmetry Symmetric or SkewSymmetric the triplets must all lie in one
// triangle (diagonal included): each off-diagonal entry is mirrored, negated
// for skew-symmetric, and the diagonal is stored once, never doubled. A
// skew-symmetric matrix has a zero diagonal; a nonzero diagonal triplet is an
// error. Columns are sorted within each row. Zero values are kept unless
// opt.DropZeros is set.
//
// The arrays of the result are newly allocated; i, j and v are only read.
// FromTriplets panics if i, j and v differ in length. Bad data (an index out of
// range, a non-square symmetric matrix, entries in both triangles) is returned
// as an error wrapping ErrIndexRange, ErrNotSquare, ErrBothTriangles or
// ErrSkewDiagonal that names the offending triplet.
func FromTriplets(rows, cols int, i, j []int32, v []float64, opt BuildOptions) (*CSR, BuildStats, error) {
	return FromTripletBlocks(rows, cols, []Triplets{{I: i, J: j, V: v}}, opt)
}

// FromTripletBlocks is FromTriplets for triplets given in consecutive
// blocks: the result is that of FromTriplets on the blocks joined in order.
//
// To keep the peak memory of a large assembly low, FromTripletBlocks releases
// the blocks as it consumes them: on return every element of blocks has
// been set to the zero Triplets, so the caller must not need them afterwards
// (the arrays themselves are only read). It panics if a block's I, J and V
// differ in length.
func FromTripletBlocks(rows, cols int, blocks []Triplets, opt BuildOptions) (*CSR, BuildStats, error) {
	var stats BuildStats
	for b := range blocks {
		t := &blocks[b]
		if len(t.I) != len(t.J) || len(t.I) != len(t.V) {
			panic(fmt.Sprintf("sparse: triplet block %d with %d row indices, %d column indices and %d values", b, len(t.I), len(t.J), len(t.V)))
		}
	}
	sym := opt.Symmetry
	if sym != General && sym != Symmetric && sym != SkewSymmetric {
		panic(fmt.Sprintf("sparse: FromTriplets with unknown %v", sym))
	}
	defer clear(blocks)
	if rows < 0 || cols < 0 || rows > MaxDim || cols > MaxDim {
		return nil, stats, fmt.Errorf("sparse: dimensions %d×%d: %w", rows, cols, ErrIndexRange)
	}
	if sym != General && rows != cols {
		return nil, stats, fmt.Errorf("sparse: %v matrix of %d×%d: %w", sym, rows, cols, ErrNotSquare)
	}

	// First pass: check the triplets and count the entries of each row of the
	// full matrix into rowPtr[r+1].
	rowPtr := make([]int, rows+1)
	lowerAt, upperAt := -1, -1 // first strictly lower and strictly upper triplet
	var lowerRC, upperRC [2]int32
	base := 0 // index of the block's first triplet among all triplets
	for _, t := range blocks {
		for k := range t.I {
			r, c := t.I[k], t.J[k]
			if r < 0 || int(r) >= rows || c < 0 || int(c) >= cols {
				return nil, stats, fmt.Errorf("sparse: triplet %d at (%d, %d) outside %d×%d: %w", base+k, r, c, rows, cols, ErrIndexRange)
			}
			rowPtr[r+1]++
			if sym == General {
				continue
			}
			switch {
			case r > c:
				if lowerAt < 0 {
					lowerAt, lowerRC = base+k, [2]int32{r, c}
				}
				rowPtr[c+1]++
			case r < c:
				if upperAt < 0 {
					upperAt, upperRC = base+k, [2]int32{r, c}
				}
				rowPtr[c+1]++
			default:
				if sym == SkewSymmetric && t.V[k] != 0 {
					return nil, stats, fmt.Errorf("sparse: triplet %d at (%d, %d) has value %g: %w", base+k, r, c, t.V[k], ErrSkewDiagonal)
				}
			}
			if lowerAt >= 0 && upperAt >= 0 {
				return nil, stats, fmt.Errorf("sparse: triplet %d at (%d, %d) and triplet %d at (%d, %d): %w",
					lowerAt, lowerRC[0], lowerRC[1], upperAt, upperRC[0], upperRC[1], ErrBothTriangles)
			}
		}
		base += len(t.I)
	}
	for r := 0; r < rows; r++ {
		rowPtr[r+1] += rowPtr[r]
	}
	nnz := rowPtr[rows]

	// Scatter in the order given, so that duplicates are summed in that order
	// and the result depends on nothing else. The values go first and each
	// block's values are released as soon as they are placed; the column
	// indices follow in a second sweep over the same positions. Holding the
	// triplets (16 bytes each) and the whole result (12 bytes per entry) at
	// once is what this avoids: a large symmetric file would otherwise need
	// about 1.7 times the memory of its matrix.
	//
	// rowPtr[r] serves as row r's insertion point and ends at row r+1's start;
	// shiftRowPtr moves it back.
	val := make([]float64, nnz)
	released := 0
	for b := range blocks {
		t := &blocks[b]
		for k, r := range t.I {
			c, x := t.J[k], t.V[k]
			val[rowPtr[r]] = x
			rowPtr[r]++
			if sym != General && r != c {
				if sym == SkewSymmetric {
					x = -x
				}
				val[rowPtr[c]] = x
				rowPtr[c]++
			}
		}
		released += 8 * len(t.V)
		t.V = nil
	}
	shiftRowPtr(rowPtr)
	if released >= gcThreshold {
		// The released values are garbage the collector has not yet seen;
		// reclaim them before the column indices are allocated, so the peak
		// stays near the size of the result.
		runtime.GC()
	}
	colIdx := make([]int32, nnz)
	for b := range blocks {
		t := &blocks[b]
		for k, r := range t.I {
			c := t.J[k]
			colIdx[rowPtr[r]] = c
			rowPtr[r]++
			if sym != General && r != c {
				colIdx[rowPtr[c]] = r
				rowPtr[c]++
			}
		}
		*t = Triplets{}
	}
	shiftRowPtr(rowPtr)

	// Sort each row, sum duplicates and compact in place.
	lowerStored := lowerAt >= 0
	out := 0
	for r := 0; r < rows; r++ {
		lo, hi := rowPtr[r], rowPtr[r+1]
		sortRow(colIdx[lo:hi], val[lo:hi])
		start := out
		rowPtr[r] = start
		for p := lo; p < hi; p++ {
			c, x := colIdx[p], val[p]
			if out > start && colIdx[out-1] == c {
				val[out-1] += x
				// Count a duplicate once, on the side that was given.
				if sym == General || int(c) == r || (int(c) < r) == lowerStored {
					stats.Duplicates++
				}
				continue
			}
			colIdx[out], val[out] = c, x
			out++
		}
		// Count, and drop if asked, the zeros of the summed row.
		w := start
		for p := start; p < out; p++ {
			if val[p] == 0 {
				stats.ExplicitZeros++
				if opt.DropZeros {
					stats.Dropped++
					continue
				}
			}
			colIdx[w], val[w] = colIdx[p], val[p]
			w++
		}
		out = w
	}
	rowPtr[rows] = out
	if out < nnz {
		// Duplicates or dropped zeros left unused space at the end; trim the
		// capacity so that no stale entries are reachable by appending.
		colIdx = colIdx[:out:out]
		val = val[:out:out]
	}
	return &CSR{Rows: rows, Cols: cols, RowPtr: rowPtr, ColIdx: colIdx, Val: val}, stats, nil
}

// gcThreshold is the amount of released triplet values (bytes) above which
// FromTripletBlocks asks the collector to reclaim them before allocating
// again. Below it the garbage is too small to matter.
const gcThreshold = 64 << 20

// shiftRowPtr turns insertion points that have advanced to the end of each row
// (rowPtr[r] == start of row r+1) back into row starts.
func shiftRowPtr(rowPtr []int) {
	for r := len(rowPtr) - 2; r > 0; r-- {
		rowPtr[r] = rowPtr[r-1]
	}
	if len(rowPtr) > 1 {
		rowPtr[0] = 0
	}
}

// sortRow sorts one row's entries by column, keeping entries with equal
// columns in their given order so that duplicates are summed in that order.
func sortRow(c []int32, x []float64) {
	n := len(c)
	if n < 2 {
		return
	}
	sorted := true
	for k := 1; k < n; k++ {
		if c[k] < c[k-1] {
			sorted = false
			break
		}
	}
	if sorted {
		return
	}
	if n <= 32 {
		// Insertion sort: rows of stencil and finite-element matrices are short.
		for k := 1; k < n; k++ {
			ck, xk := c[k], x[k]
			m := k
			for m > 0 && c[m-1] > ck {
				c[m], x[m] = c[m-1], x[m-1]
				m--
			}
			c[m], x[m] = ck, xk
		}
		return
	}
	sort.Stable(rowEntries{c, x})
}

type rowEntries struct {
	c []int32
	x []float64
}

func (e rowEntries) Len() int           { return len(e.c) }
func (e rowEntries) Less(a, b int) bool { return e.c[a] < e.c[b] }
func (e rowEntries) Swap(a, b int) {
	e.c[a], e.c[b] = e.c[b], e.c[a]
	e.x[a], e.x[b] = e.x[b], e.x[a]
}
