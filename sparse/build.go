package sparse

import (
	"errors"
	"fmt"
	"runtime"
	"runtime/debug"
	"sort"
	"sync"

	"github.com/residua/residua/internal/hugepage"
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
	defer clear(blocks)
	asm, err := NewAssembler(rows, cols, opt)
	if err != nil {
		return nil, BuildStats{}, err
	}
	for _, t := range blocks {
		if err := asm.Add(t); err != nil {
			return nil, BuildStats{}, err
		}
	}
	clear(blocks)
	return asm.Build()
}

// Assembler builds a CSR matrix from triplets that arrive in blocks, for
// readers that parse a large file in pieces: Add checks each block and counts
// its entries per row as it comes, so that Build has only to place them.
// The result is that of FromTriplets on all blocks joined in order.
//
// An Assembler keeps the blocks given to Add (without copying them) until
// Build, which releases them as it goes; the caller must not change them. It
// is used by one goroutine at a time. The zero value is not usable; call
// NewAssembler.
type Assembler struct {
	rows, cols int
	opt        BuildOptions
	blocks     []Triplets
	total      int   // triplets added
	rowPtr     []int // rowPtr[r+1] counts row r's entries, once allocated
	counted    int   // blocks counted into rowPtr

	lowerAt, upperAt int // first strictly lower and strictly upper triplet, or -1
	lowerRC, upperRC [2]int32
	built            bool
}

// NewAssembler returns an Assembler for a rows×cols matrix. It returns an
// error wrapping ErrIndexRange for dimensions outside [0, MaxDim] and
// ErrNotSquare for a symmetric or skew-symmetric matrix that is not square;
// it panics for an unknown opt.Symmetry. It allocates nothing that grows
// with the dimensions: storage follows the triplets actually added.
func NewAssembler(rows, cols int, opt BuildOptions) (*Assembler, error) {
	sym := opt.Symmetry
	if sym != General && sym != Symmetric && sym != SkewSymmetric {
		panic(fmt.Sprintf("sparse: assembly with unknown %v", sym))
	}
	if rows < 0 || cols < 0 || rows > MaxDim || cols > MaxDim {
		return nil, fmt.Errorf("sparse: dimensions %d×%d: %w", rows, cols, ErrIndexRange)
	}
	if sym != General && rows != cols {
		return nil, fmt.Errorf("sparse: %v matrix of %d×%d: %w", sym, rows, cols, ErrNotSquare)
	}
	return &Assembler{rows: rows, cols: cols, opt: opt, lowerAt: -1, upperAt: -1}, nil
}

// Add checks the block t and keeps it for Build. An error names the first
// bad triplet by its index among all triplets added (ErrIndexRange,
// ErrBothTriangles, ErrSkewDiagonal); after an error the Assembler must not
// be used. Add panics if t's I, J and V differ in length or if Build has
// been called.
func (a *Assembler) Add(t Triplets) error {
	if len(t.I) != len(t.J) || len(t.I) != len(t.V) {
		panic(fmt.Sprintf("sparse: triplet block %d with %d row indices, %d column indices and %d values", len(a.blocks), len(t.I), len(t.J), len(t.V)))
	}
	if a.built {
		panic("sparse: Assembler.Add after Build")
	}
	rows, cols, sym := a.rows, a.cols, a.opt.Symmetry
	for k, r := range t.I {
		c := t.J[k]
		if r < 0 || int(r) >= rows || c < 0 || int(c) >= cols {
			return fmt.Errorf("sparse: triplet %d at (%d, %d) outside %d×%d: %w", a.total+k, r, c, rows, cols, ErrIndexRange)
		}
		if sym == General {
			continue
		}
		switch {
		case r > c:
			if a.lowerAt < 0 {
				a.lowerAt, a.lowerRC = a.total+k, [2]int32{r, c}
			}
		case r < c:
			if a.upperAt < 0 {
				a.upperAt, a.upperRC = a.total+k, [2]int32{r, c}
			}
		default:
			if sym == SkewSymmetric && t.V[k] != 0 {
				return fmt.Errorf("sparse: triplet %d at (%d, %d) has value %g: %w", a.total+k, r, c, t.V[k], ErrSkewDiagonal)
			}
		}
		if a.lowerAt >= 0 && a.upperAt >= 0 {
			return fmt.Errorf("sparse: triplet %d at (%d, %d) and triplet %d at (%d, %d): %w",
				a.lowerAt, a.lowerRC[0], a.lowerRC[1], a.upperAt, a.upperRC[0], a.upperRC[1], ErrBothTriangles)
		}
	}
	a.total += len(t.I)
	if len(t.I) > 0 {
		a.blocks = append(a.blocks, t)
	}
	// Count rows as the data come, once they justify an array of row
	// counts: a file that claims many rows but holds few entries does not
	// get one until Build.
	if a.rowPtr == nil && a.rows+1 <= 8*a.total {
		a.rowPtr = make([]int, a.rows+1)
	}
	if a.rowPtr != nil {
		a.count()
	}
	return nil
}

// count adds the entries of the blocks not yet counted to rowPtr[r+1].
func (a *Assembler) count() {
	mirror := a.opt.Symmetry != General
	rowPtr := a.rowPtr
	for _, t := range a.blocks[a.counted:] {
		for k, r := range t.I {
			rowPtr[r+1]++
			if c := t.J[k]; mirror && r != c {
				rowPtr[c+1]++
			}
		}
	}
	a.counted = len(a.blocks)
}

// Build assembles the matrix from the blocks added, releasing them as it
// goes, and returns it with what the assembly did. It panics if called
// twice.
//
// Memory: Build allocates the values first and places them, then drops the
// blocks' values and, when they were large (64 MiB or more), collects them
// and returns their pages to the operating system (debug.FreeOSMemory)
// before allocating the column indices. So the triplets (16 bytes each) and the whole
// result (12 bytes per entry plus 8 per row) are never held at once. For a
// symmetric matrix stored as one triangle, with s triplets and about 2s
// entries in the result, the peak is near 16s + 16s + 8·rows bytes against a
// result of 24s + 8·rows: about 1.4 times the result. For a general matrix
// (s triplets, s entries) it is near 24s + 8·rows against 12s + 8·rows, about
// twice the result.
//
// The passes run on up to GOMAXPROCS goroutines over contiguous ranges of
// rows; the result does not depend on their number.
func (a *Assembler) Build() (*CSR, BuildStats, error) {
	if a.built {
		panic("sparse: Assembler.Build called twice")
	}
	a.built = true
	var stats BuildStats
	rows, cols, sym, opt := a.rows, a.cols, a.opt.Symmetry, a.opt
	if a.rowPtr == nil {
		a.rowPtr = make([]int, rows+1)
	}
	a.count()
	blocks, total, rowPtr := a.blocks, a.total, a.rowPtr
	a.blocks, a.rowPtr = nil, nil
	lowerAt := a.lowerAt

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
	hugepage.Advise(val) // before the first write: see internal/hugepage
	skew := sym == SkewSymmetric
	parallel(w, func(k int) {
		lo, n := int32(first[k]), uint32(first[k+1]-first[k])
		for _, t := range blocks {
			for q, r := range t.I {
				c := t.J[q]
				// The value is loaded only where this worker writes it: the
				// other workers' share of the triplets costs it no traffic
				// beyond the indices.
				if uint32(r-lo) < n {
					val[rowPtr[r]] = t.V[q]
					rowPtr[r]++
				}
				if mirror && r != c && uint32(c-lo) < n {
					x := t.V[q]
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
		// The released values are garbage the collector has not yet seen.
		// Collecting them is not enough: they lie in pieces (one per block)
		// that the contiguous column-index array cannot reuse, so the
		// process would keep their pages and take new ones. Returning them
		// to the operating system keeps the resident peak, not only the
		// heap's, near the size of the result.
		debug.FreeOSMemory()
	}
	colIdx := make([]int32, nnz)
	hugepage.Advise(colIdx)
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
