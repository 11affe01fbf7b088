package precond

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// Parallel triangular solves by level scheduling of row segments.
//
// Level scheduling (Anderson and Saad, Int. J. High Speed Computing 1, 1989;
// Saad, 2nd ed., §11.6.2) runs the rows of a triangular solve in levels: a
// row's level is one more than the highest level of the rows it reads, so the
// rows of one level are independent. Applied row by row, the levels of a
// stencil matrix in natural order are scattered rows (the anti-diagonal
// planes of a 3D grid), which cost locality and many barriers; see
// BenchmarkLevels. Here the unit of scheduling is a segment instead: a
// maximal run of consecutive rows each of which reads its predecessor
// (row i has the entry (i, i−1)). Such a run must be done in order anyway;
// it is done by one goroutine, as a contiguous stretch of memory, by the same
// loop as the sequential solve. For a 3D grid numbered x fastest the
// segments are the grid lines along x, and the levels are the diagonal
// planes of lines y+z = const: about 2n levels of up to n lines for n³
// unknowns.
//
// Every row is computed by the same arithmetic in the same order as in the
// sequential solve, so the result is bitwise identical whichever way it ran
// and at any number of goroutines.
//
// The backward solve, with Lᵀ, has the same segments (row i reads i+1 in Lᵀ
// exactly when row i+1 reads i in L) run from their last row to their first,
// and its own levels, counted from the last segment.
type schedule struct {
	segStart []int32 // segment s is rows segStart[s]..segStart[s+1]−1
	fwd, bwd levels
}

// levels lists the segments of one solve level by level, with each level
// already cut into parts of about equal rows for the goroutines.
type levels struct {
	order []int32 // segment numbers, level by level
	cuts  []int32 // part k of level l is order[cuts[l*(P+1)+k] : cuts[l*(P+1)+k+1]]
	count int     // number of levels
}

// minRowsPerLevel: below this average number of rows per level the
// barriers would cost more than the second goroutine gains, so the solve
// stays sequential. A barrier costs about as much as solving a few hundred
// rows; 2048 leaves a margin. This is an estimate, not a tuned value: 3D
// Poisson, the case measured, has about 5000 rows per level at 100³.
const minRowsPerLevel = 2048

// newSchedule returns the segment schedule of m for parts goroutines, or
// nil when it would not pay: one goroutine, or too few rows per level.
func newSchedule(m *IC0, parts int) *schedule {
	return newScheduleRows(m, parts, minRowsPerLevel)
}

// newScheduleRows is newSchedule with the rows-per-level threshold given.
func newScheduleRows(m *IC0, parts, minRows int) *schedule {
	n := m.n
	if parts < 2 || n == 0 {
		return nil
	}
	// Segments: a row without the entry (i, i−1) starts one.
	segStart := []int32{0}
	segOf := make([]int32, n)
	for i := 1; i < n; i++ {
		p, q := m.lPtr[i], m.lPtr[i+1]
		if q == p || int(m.lCol[q-1]) != i-1 {
			segStart = append(segStart, int32(i))
		}
		segOf[i] = int32(len(segStart) - 1)
	}
	nseg := len(segStart)
	segStart = append(segStart, int32(n))
	s := &schedule{segStart: segStart}

	level := make([]int32, nseg)
	// Forward: a segment reads the segments of the columns of its rows.
	for g := 0; g < nseg; g++ {
		l := int32(0)
		for _, j := range m.lCol[m.lPtr[segStart[g]]:m.lPtr[segStart[g+1]]] {
			if h := segOf[j]; h != int32(g) {
				l = max(l, level[h]+1)
			}
		}
		level[g] = l
	}
	s.fwd = groupLevels(level, segStart, parts)
	if n/s.fwd.count < minRows {
		return nil
	}
	// Backward: the same with Lᵀ, from the last segment.
	for g := nseg - 1; g >= 0; g-- {
		l := int32(0)
		for _, j := range m.uCol[m.uPtr[segStart[g]]:m.uPtr[segStart[g+1]]] {
			if h := segOf[j]; h != int32(g) {
				l = max(l, level[h]+1)
			}
		}
		level[g] = l
	}
	s.bwd = groupLevels(level, segStart, parts)
	if n/s.bwd.count < minRows {
		return nil
	}
	return s
}

// groupLevels sorts the segments by level (stably, so in increasing order
// within a level) and cuts each level into parts of about equal rows.
func groupLevels(level []int32, segStart []int32, parts int) levels {
	nlev := int32(0)
	for _, l := range level {
		nlev = max(nlev, l+1)
	}
	ptr := make([]int32, nlev+1)
	for _, l := range level {
		ptr[l+1]++
	}
	for l := int32(0); l < nlev; l++ {
		ptr[l+1] += ptr[l]
	}
	order := make([]int32, len(level))
	next := append([]int32(nil), ptr[:nlev]...)
	for g, l := range level {
		order[next[l]] = int32(g)
		next[l]++
	}
	cuts := make([]int32, int(nlev)*(parts+1))
	for l := int32(0); l < nlev; l++ {
		lo, hi := ptr[l], ptr[l+1]
		rows := 0
		for _, g := range order[lo:hi] {
			rows += int(segStart[g+1] - segStart[g])
		}
		c := cuts[int(l)*(parts+1) : int(l+1)*(parts+1)]
		c[0], c[parts] = lo, hi
		k, acc := 1, 0
		for x := lo; x < hi && k < parts; x++ {
			g := order[x]
			acc += int(segStart[g+1] - segStart[g])
			for k < parts && acc*parts >= k*rows {
				c[k] = x + 1
				k++
			}
		}
		for ; k < parts; k++ {
			c[k] = hi
		}
	}
	return levels{order: order, cuts: cuts, count: int(nlev)}
}

// Bytes returns the schedule's memory.
func (s *schedule) bytes() int64 {
	if s == nil {
		return 0
	}
	return 4 * int64(len(s.segStart)+len(s.fwd.order)+len(s.fwd.cuts)+len(s.bwd.order)+len(s.bwd.cuts))
}

// run does part k of both solves: its share of every forward level, a
// barrier, and so on, then the same for the backward levels.
func (s *schedule) run(m *IC0, dst, r []float64, k, parts int, bar *barrier) {
	for l := 0; l < s.fwd.count; l++ {
		c := s.fwd.cuts[l*(parts+1):]
		for _, g := range s.fwd.order[c[k]:c[k+1]] {
			m.forward(dst, r, int(s.segStart[g]), int(s.segStart[g+1]))
		}
		bar.wait()
	}
	for l := 0; l < s.bwd.count; l++ {
		c := s.bwd.cuts[l*(parts+1):]
		for _, g := range s.bwd.order[c[k]:c[k+1]] {
			m.backward(dst, int(s.segStart[g]), int(s.segStart[g+1]))
		}
		if l+1 < s.bwd.count {
			bar.wait()
		}
	}
}

// barrier is a reusable barrier for a fixed number of goroutines. It spins
// briefly, since the levels it separates take microseconds, then yields.
type barrier struct {
	parties int32
	count   atomic.Int32
	phase   atomic.Uint32
}

func (b *barrier) wait() {
	ph := b.phase.Load()
	if b.count.Add(1) == b.parties {
		b.count.Store(0)
		b.phase.Add(1)
		return
	}
	for spins := 0; b.phase.Load() == ph; spins++ {
		if spins >= 100 {
			runtime.Gosched()
		}
	}
}

// The helpers. One set of parallel-solve helpers serves the package: P−1
// goroutines (P = GOMAXPROCS when the first parallel apply runs), each
// parked on its own channel. A parallel apply takes the set with TryLock;
// an apply that finds it taken (another solve is using it) runs
// sequentially instead, which gives the same bits. The helpers live as long
// as the process, like sparse's worker pool.
type task struct {
	s    *schedule
	m    *IC0
	dst  []float64
	r    []float64
	k    int
	bar  *barrier
	done chan<- struct{}
}

type helperSet struct {
	mu    sync.Mutex // held by the apply using the helpers
	parts int
	jobs  []chan task
	done  chan struct{}
	bar   barrier
}

var (
	helpersOnce sync.Once
	helpers     *helperSet
)

func getHelpers() *helperSet {
	helpersOnce.Do(func() {
		p := runtime.GOMAXPROCS(0)
		h := &helperSet{parts: p, jobs: make([]chan task, p-1), done: make(chan struct{}, p)}
		h.bar.parties = int32(p)
		for k := range h.jobs {
			ch := make(chan task, 1)
			h.jobs[k] = ch
			go func() {
				for t := range ch {
					t.s.run(t.m, t.dst, t.r, t.k, t.s.parts(), t.bar)
					t.done <- struct{}{}
				}
			}()
		}
		helpers = h
	})
	return helpers
}

// parts returns the number of goroutines the schedule was cut for.
func (s *schedule) parts() int { return len(s.fwd.cuts)/s.fwd.count - 1 }

// applyParallel runs both solves on the helpers and the caller. It reports
// false, having done nothing, when the helpers are busy or were started with
// a different number of goroutines than s was cut for.
func (s *schedule) applyParallel(m *IC0, dst, r []float64) bool {
	h := getHelpers()
	if h.parts != s.parts() || !h.mu.TryLock() {
		return false
	}
	defer h.mu.Unlock()
	for k := 1; k < h.parts; k++ {
		h.jobs[k-1] <- task{s: s, m: m, dst: dst, r: r, k: k, bar: &h.bar, done: h.done}
	}
	s.run(m, dst, r, 0, h.parts, &h.bar)
	for k := 1; k < h.parts; k++ {
		<-h.done
	}
	return true
}
