package sparse

import (
	"errors"
	"fmt"
	"runtime"
	"sort"
	"sync"
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

	// Check the triplets, in order, so that an error names the first bad one.
	lowerAt, upperAt := -1, -1 // first strictly lower and strictly upper triplet
	var lowerRC, upperRC [2]int32
	total := 0 // triplets before the current block, then in all
	for _, t := range blocks {
		for k, r := range t.I {
			c := t.J[k]
			if r < 0 || int(r) >= rows || c < 0 || int(c) >= cols {
				return nil, stats, fmt.Errorf("sparse: triplet %d at (%d, %d) outside %d×%d: %w", total+k, r, c, rows, cols, ErrIndexRange)
			}
			if sym == General {
				continue
			}
			switch {
			case r > c:
				if lowerAt < 0 {
					lowerAt, lowerRC = total+k, [2]int32{r, c}
				}
			case r < c:
				if upperAt < 0 {
					upperAt, upperRC = total+k, [2]int32{r, c}
				}
			default:
				if sym == SkewSymmetric && t.V[k] != 0 {
					return nil, stats, fmt.Errorf("sparse: triplet %d at (%d, %d) has value %g: %w", total+k, r, c, t.V[k], ErrSkewDiagonal)
				}
			}
			if lowerAt >= 0 && upperAt >= 0 {
				return nil, stats, fmt.Errorf("sparse: triplet %d at (%d, %d) and triplet %d at (%d, %d): %w",
					lowerAt, lowerRC[0], lowerRC[1], upperAt, upperRC[0], upperRC[1], ErrBothTriangles)
			}
		}
		total += len(t.I)
	}

	// The passes below run in parallel over contiguous ranges of rows: every
	// worker reads all triplets and handles those that land in its rows, so
	// no two workers write the same place and the order of the entries
	// within a row (hence the order in which duplicates are summed) is the
	// order given, whatever the number of workers.
	w := 1
	if total >= parallelMin {
		w = min(runtime.GOMAXPROCS(0), total/parallelMin, max(rows, 1))
	}
	first := make([]int, w+1) // worker k owns rows first[k] to first[k+1]-1
	for k := range first {
		first[k] = int(int64(rows) * int64(k) / int64(w))
	}
	mirror := sym != General

	// Count the entries of each row of the full matrix into rowPtr[r+1].
	rowPtr := make([]int, rows+1)
	parallel(w, func(k int) {
		lo, n := int32(first[k]), uint32(first[k+1]-first[k])
		for _, t := range blocks {
			for q, r := range t.I {
				if uint32(r-lo) < n {
					rowPtr[r+1]++
				}
				if c := t.J[q]; mirror && r != c && uint32(c-lo) < n {
					rowPtr[c+1]++
				}
			}
		}
	})
	for r := 0; r < rows; r++ {
		rowPtr[r+1] += rowPtr[r]
	}
	nnz := rowPtr[rows]

	// Scatter the values, then the column indices, each in one sweep.
	// Holding the triplets (16 bytes each) and the whole result (12 bytes
	// per entry) at once is what this avoids: between the sweeps the
	// triplets' values are released, so that a large symmetric file needs
	// about 1.4 rather than 1.7 times the memory of its matrix.
	//
	// rowPtr[r] serves as row r's insertion point and ends at row r+1's start;
	// shiftRowPtr moves it back.
	val := make([]float64, nnz)
	skew := sym == SkewSymmetric
	parallel(w, func(k int) {
		lo, n := int32(first[k]), uint32(first[k+1]-first[k])
		for _, t := range blocks {
			for q, r := range t.I {
				c, x := t.J[q], t.V[q]
				if uint32(r-lo) < n {
					val[rowPtr[r]] = x
					rowPtr[r]++
				}
				if mirror && r != c && uint32(c-lo) < n {
					if skew {
						x = -x
					}
					val[rowPtr[c]] = x
					rowPtr[c]++
				}
			}
		}
	})
	shiftRowPtr(rowPtr)
	for b := range blocks {
		blocks[b].V = nil
	}
	if 8*total >= gcThreshold {
		// The released values are garbage the collector has not yet seen;
		// reclaim them before the column indices are allocated, so the peak
		// stays near the size of the result.
		runtime.GC()
	}
	colIdx := make([]int32, nnz)
	parallel(w, func(k int) {
		lo, n := int32(first[k]), uint32(first[k+1]-first[k])
		for _, t := range blocks {
			for q, r := range t.I {
				c := t.J[q]
				if uint32(r-lo) < n {
					colIdx[rowPtr[r]] = c
					rowPtr[r]++
				}
				if mirror && r != c && uint32(c-lo) < n {
					colIdx[rowPtr[c]] = r
					rowPtr[c]++
				}
			}
		}
	})
	shiftRowPtr(rowPtr)
	clear(blocks)

	// Sort each row, sum duplicates, count and drop zeros. Each worker
	// compacts its rows toward the start of its own range and records the
	// end in ends[k]; the ranges are then moved together if anything shrank.
	lowerStored := lowerAt >= 0
	parts := make([]BuildStats, w)
	ends := make([]int, w)
	parallel(w, func(k int) {
		st := &parts[k]
		lo, hi := first[k], first[k+1]
		out := rowPtr[lo]
		next := rowPtr[lo] // original start of row r
		for r := lo; r < hi; r++ {
			start, end := next, rowPtr[r+1]
			next = end
			sortRow(colIdx[start:end], val[start:end])
			rowStart := out
			for p := start; p < end; p++ {
				c, x := colIdx[p], val[p]
				if out > rowStart && colIdx[out-1] == c {
					val[out-1] += x
					// Count a duplicate once, on the side that was given.
					if sym == General || int(c) == r || (int(c) < r) == lowerStored {
						st.Duplicates++
					}
					continue
				}
				colIdx[out], val[out] = c, x
				out++
			}
			wr := rowStart
			for p := rowStart; p < out; p++ {
				if val[p] == 0 {
					st.ExplicitZeros++
					if opt.DropZeros {
						st.Dropped++
						continue
					}
				}
				colIdx[wr], val[wr] = colIdx[p], val[p]
				wr++
			}
			out = wr
			if r+1 < hi {
				rowPtr[r+1] = out
			}
		}
		ends[k] = out
	})
	dst := 0
	for k := 0; k < w; k++ {
		stats.Duplicates += parts[k].Duplicates
		stats.ExplicitZeros += parts[k].ExplicitZeros
		stats.Dropped += parts[k].Dropped
		lo, hi := first[k], first[k+1]
		if lo == hi {
			continue
		}
		src := rowPtr[lo]
		if src != dst {
			copy(colIdx[dst:], colIdx[src:ends[k]])
			copy(val[dst:], val[src:ends[k]])
			for r := lo + 1; r < hi; r++ {
				rowPtr[r] -= src - dst
			}
			rowPtr[lo] = dst
		}
		dst += ends[k] - src
	}
	rowPtr[rows] = dst
	if dst < nnz {
		// Duplicates or dropped zeros left unused space at the end; trim the
		// capacity so that no stale entries are reachable by appending.
		colIdx = colIdx[:dst:dst]
		val = val[:dst:dst]
	}
	return &CSR{Rows: rows, Cols: cols, RowPtr: rowPtr, ColIdx: colIdx, Val: val}, stats, nil
}

// parallelMin is the number of triplets per worker below which assembly
// runs on the caller's goroutine alone.
const parallelMin = 1 << 16

// parallel runs f(0), ..., f(w-1) at once, f(0) on the caller's goroutine.
func parallel(w int, f func(k int)) {
	if w == 1 {
		f(0)
		return
	}
	var wg sync.WaitGroup
	for k := 1; k < w; k++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			f(k)
		}()
	}
	f(0)
	wg.Wait()
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
