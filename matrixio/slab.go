package matrixio

import (
	"sync"

	"github.com/residua/residua/internal/hugepage"
)

// slabs hands out the triplet arrays of the chunks of one file from a few
// large allocations rather than one small allocation per chunk.
//
// Why: the triplets are the largest memory the read touches for the first
// time (16 bytes per entry), and on a virtual machine a first touch costs a
// page fault of several microseconds per 4 KiB page, more than parsing the
// text that fills the page. A large allocation can be backed by huge pages
// (internal/hugepage), which cut the number of faults by 512.
//
// Memory stays bounded by the data: a new slab holds no more entries than
// have been handed out so far (so the total at most doubles what the text
// has justified), nor more than the size line still promises, so that an
// honest file leaves no unused tail beyond the pieces skipped when a
// chunk's estimate does not fit (each at most one chunk's lines).
type slabs struct {
	mu      sync.Mutex
	claimed int       // entries the size line announces
	given   int       // entries handed out so far
	idx     []int32   // unused part of the current index slab
	val     []float64 // unused part of the current value slab
}

// Slab sizes in entries: a slab smaller than minSlab is not worth it (the
// chunk gets arrays of its own), and none exceeds maxSlab (4 Mi entries:
// 32 MiB of indices, 32 MiB of values).
const (
	minSlab = 1 << 17
	maxSlab = 1 << 22
)

// take returns empty row-index, column-index and value arrays with room for
// n entries each.
func (s *slabs) take(n int) (I, J []int32, V []float64) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if len(s.val) < n {
		size := min(s.given, maxSlab, s.claimed-s.given)
		if size < max(n, minSlab) {
			s.given += n
			return make([]int32, 0, n), make([]int32, 0, n), make([]float64, 0, n)
		}
		s.idx = make([]int32, 2*size)
		s.val = make([]float64, size)
		hugepage.Advise(s.idx)
		hugepage.Advise(s.val)
	}
	I, J, V = s.idx[:0:n], s.idx[n:n:2*n], s.val[:0:n]
	s.idx, s.val = s.idx[2*n:], s.val[n:]
	s.given += n
	return I, J, V
}
