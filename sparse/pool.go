package sparse

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// How the kernels split their work.
//
// A persistent pool of helper goroutines, started on the first parallel
// call and sized by GOMAXPROCS at that moment (Workers), runs the large
// kernels; the calling goroutine works too, so P workers means P−1 helpers.
// A call fills one of the pool's preallocated call records and hands its
// pointer to each helper over the helper's own buffered channel; nothing is
// allocated and no goroutine is started per call. Work below a threshold
// (inlineWork) runs on the caller alone, and so does every call made while
// another goroutine is using the pool (the pool serves one call at a time;
// a second concurrent caller does not queue, it computes by itself).
//
// Vectors are cut into fixed blocks of blockLen elements, and matrices into
// fixed blocks of blockLen rows. The work is split into P parts, each a
// contiguous run of whole blocks: for vectors part k holds blocks
// k·nb/P ≤ b < (k+1)·nb/P; for matrix products the parts are balanced by
// work rather than by rows: part k starts at the first block boundary at or
// after the row r where RowPtr[r] + r reaches k/P of nnz + rows (one unit
// per stored entry and one per row, for the row's pointer load and result
// store). Worker k (the caller is worker 0) takes the blocks of part k in
// order, one at a time from an atomic counter, then helps with what is left
// of parts k+1, k+2, ...: without interference each worker does exactly its
// own part; on a busy machine a worker that is not running delays nobody.
// The partition is a pure function of RowPtr and P, recomputed on each call
// by P binary searches over RowPtr (tens of nanoseconds), so it is fixed
// without being stored on the matrix and can never go stale.
//
// Reductions (a dot product, or the norm that a fused kernel returns) sum
// each block with dotBlock into its own slot, and the caller then adds the
// block sums in block order, left to right. A product's dst[i] is the sum of
// row i in column order. Neither depends on the partition, on which worker
// did which block, or on the number of workers, so every result is bitwise
// identical run to run at any worker count, parallel or inline.

// blockLen is the length of the fixed blocks (elements or rows) that the
// reductions sum separately. 2048 float64 are 16 KiB, so a fused kernel's
// second pass over a block it has just written (two or three vectors) still
// hits the L1 or L2 cache.
const blockLen = 2048

// inlineWork is the amount of work (vector elements, or matrix entries plus
// rows) below which a kernel runs on the caller alone: handing work to a
// parked helper costs a few microseconds of wake-up, about the time of a
// serial sweep over this many elements.
const inlineWork = 1 << 15

type opKind uint8

const (
	opMulVec opKind = iota
	opMulVecDot
	opResidual
	opDot
	opAxpy
	opAxpyDot
	opTriad
	opStep
	opTriadDot // minres_vec.go
	opStep3    // minres_vec.go
	opResidualBound
	opDiagDot
	// Kernels with several sums per block (see multiOp in multi.go).
	opAxpyDiagDot
	opBlockMulDot
	opBlockResidual
	opBlockAxpyDot
	opBlockAxpyDiagDot
	opBlockDot
	// Block kernels without a sum.
	opBlockMul
	opBlockAxpy
	opBlockTriad
	opBlockStep
	opDiagInit // amgvec.go
	opDiagStep // amgvec.go
)

// job is one kernel call's operation and operands. Block sums go to
// sums[b] for block b, or, for a kernel with nsum > 0 sums per block, to
// sums[b·nsum : (b+1)·nsum]. The block kernels work on row-major n×k
// blocks of vectors (k = width) and take per-column scalars from cs and ct.
type job struct {
	op      opKind
	a       *CSR
	d, x, y []float64
	z       []float64
	s, t    float64
	w       []float64 // fourth vector of opStep3, opDiagInit and opDiagStep
	u       float64   // third scalar of opStep3
	cs, ct  []float64
	width   int
	nsum    int
	sums    []float64
}

// call is the shared state of one parallel kernel call. Each part k of the
// partition owns the blocks bounds[k] ≤ b < bounds[k+1] and hands them out
// one at a time through next[k]; a goroutine works through its own part
// first, then takes what is left of the following parts, so a helper that
// the operating system has not scheduled yet (this machine is shared) delays
// nothing: the caller does its blocks. Which goroutine computes a block
// changes nothing in the result.
//
// A call is reused only when refs is zero: refs counts the hand-offs to
// helpers not yet finished with it, so a helper that wakes up late still
// finds its call intact (with no block left to claim).
type call struct {
	j      job
	nb     int            // number of blocks
	bounds []int          // part boundaries in blocks, parts+1 entries
	next   []atomic.Int64 // next unclaimed block of each part
	done   atomic.Int64   // blocks completed
	refs   atomic.Int32   // hand-offs to helpers not yet finished
	// finished receives one token per use, from whoever completes the last
	// block; the caller takes it before returning.
	finished chan struct{}
}

type workerPool struct {
	parts   int
	blk     int          // block length, blockLen except in tests
	minWork int          // inline below this much work, inlineWork except in tests
	jobs    []chan *call // one per helper, capacity 1

	// mu is held by the one caller using the helpers; it guards calls and
	// sums (the helpers reach them only through a call handed to them).
	mu    sync.Mutex
	calls []*call   // 2·parts+1: each helper holds at most two (one running, one queued)
	sums  []float64 // block sums, grown to the longest call seen
}

var (
	poolOnce sync.Once
	thePool  *workerPool
)

func getPool() *workerPool {
	poolOnce.Do(func() { thePool = newPool(runtime.GOMAXPROCS(0), blockLen, inlineWork) })
	return thePool
}

// Workers returns the number of goroutines (the caller included) that the
// parallel kernels use: GOMAXPROCS when the first parallel kernel ran. It
// starts the pool if it is not running yet.
func Workers() int { return getPool().parts }

// newPool starts parts−1 helper goroutines. They live as long as the
// process; a pool is never stopped (tests make small private pools and
// leave them parked).
func newPool(parts, blk, minWork int) *workerPool {
	if parts < 1 {
		parts = 1
	}
	p := &workerPool{
		parts:   parts,
		blk:     blk,
		minWork: minWork,
		jobs:    make([]chan *call, parts-1),
	}
	for range 2*parts + 1 {
		p.calls = append(p.calls, &call{
			bounds:   make([]int, parts+1),
			next:     make([]atomic.Int64, parts),
			finished: make(chan struct{}, 1),
		})
	}
	for h := range p.jobs {
		ch := make(chan *call, 1)
		p.jobs[h] = ch
		go func() {
			for c := range ch {
				c.work(h+1, p.blk)
				c.refs.Add(-1)
			}
		}()
	}
	return p
}

// work claims and computes blocks, starting with part k.
func (c *call) work(k, blk int) {
	parts := len(c.next)
	for i := range parts {
		part := (k + i) % parts
		end := int64(c.bounds[part+1])
		for {
			b := c.next[part].Add(1) - 1
			if b >= end {
				break
			}
			if ns := c.j.nsum; ns > 0 {
				c.j.multiBlock(int(b), blk, c.j.sums[int(b)*ns:(int(b)+1)*ns])
			} else {
				c.j.sums[b] = c.j.block(int(b), blk)
			}
			if c.done.Add(1) == int64(c.nb) {
				c.finished <- struct{}{}
			}
		}
	}
}

// run hands c to the helpers, works on it, and waits until every block is
// done. p.mu must be held, c filled in except for the counters, and
// c.nb > 0.
func (p *workerPool) run(c *call) float64 {
	for k := range c.next {
		c.next[k].Store(int64(c.bounds[k]))
	}
	c.done.Store(0)
	for _, ch := range p.jobs {
		c.refs.Add(1)
		select {
		case ch <- c:
		default:
			// The helper still has an earlier call queued; it is busy or
			// not scheduled, and will find this one's blocks taken anyway.
			c.refs.Add(-1)
		}
	}
	c.work(0, p.blk)
	// Wait for blocks that helpers have claimed but not finished (at most
	// one each, a few microseconds): spin briefly, then sleep on the
	// channel rather than take the CPU from a helper that the operating
	// system has descheduled.
	for spin := 0; spin < 1000 && c.done.Load() < int64(c.nb); spin++ {
	}
	<-c.finished
	if c.j.nsum > 0 {
		return 0 // multiOp adds the sums column by column
	}
	return sumBlocks(c.j.sums)
}

// freeCall returns a call that no helper holds, or nil.
func (p *workerPool) freeCall() *call {
	for _, c := range p.calls {
		if c.refs.Load() == 0 {
			return c
		}
	}
	return nil
}

// sumBlocks adds the block sums in block order.
func sumBlocks(sums []float64) float64 {
	s := 0.0
	for _, v := range sums {
		s += v
	}
	return s
}

// vecOp runs a vector kernel over n elements and returns the sum of its
// block sums (zero for kernels without a reduction).
func (p *workerPool) vecOp(j job, n int) float64 {
	nb := (n + p.blk - 1) / p.blk
	if nb == 0 || n < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		return j.inline(nb, p.blk)
	}
	defer p.mu.Unlock()
	c := p.freeCall()
	if c == nil {
		return j.inline(nb, p.blk)
	}
	for k := range c.bounds {
		c.bounds[k] = k * nb / p.parts
	}
	j.sums = p.blockSums(nb)
	c.j, c.nb = j, nb
	return p.run(c)
}

// matOp runs a matrix kernel over the rows of j.a and returns the sum of its
// block sums.
func (p *workerPool) matOp(j job) float64 {
	a := j.a
	nb := (a.Rows + p.blk - 1) / p.blk
	if nb == 0 || a.NNZ()+a.Rows < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		return j.inline(nb, p.blk)
	}
	defer p.mu.Unlock()
	c := p.freeCall()
	if c == nil {
		return j.inline(nb, p.blk)
	}
	rowPartition(c.bounds, a.RowPtr, a.Rows, p.blk)
	j.sums = p.blockSums(nb)
	c.j, c.nb = j, nb
	return p.run(c)
}

// blockSums returns the pool's scratch for nb block sums, growing it when a
// longer vector than before comes along (the only allocation, once per
// size). p.mu must be held.
func (p *workerPool) blockSums(nb int) []float64 {
	if cap(p.sums) < nb {
		p.sums = make([]float64, nb)
	}
	return p.sums[:nb]
}

// inline runs a kernel over all nb blocks on the caller, adding the block
// sums in block order as they come: the same additions as the parallel
// path.
func (j job) inline(nb, blk int) float64 {
	s := 0.0
	for b := range nb {
		s += j.block(b, blk)
	}
	return s
}

// rowPartition fills bounds (P+1 entries) with block boundaries for the
// parts of a matrix product, balanced by entries plus rows (see the comment
// at the top of this file): part k starts at the block holding the first
// row r with rowPtr[r] + r ≥ k/P of the total, rounded up to the next block
// boundary.
func rowPartition(bounds, rowPtr []int, rows, blk int) {
	parts := len(bounds) - 1
	work := rowPtr[rows] + rows
	nb := (rows + blk - 1) / blk
	bounds[0] = 0
	for k := 1; k < parts; k++ {
		target := int(int64(k) * int64(work) / int64(parts))
		// Smallest r with rowPtr[r] + r >= target.
		lo, hi := 0, rows
		for lo < hi {
			m := int(uint(lo+hi) >> 1)
			if rowPtr[m]+m < target {
				lo = m + 1
			} else {
				hi = m
			}
		}
		bounds[k] = min(max((lo+blk-1)/blk, bounds[k-1]), nb)
	}
	bounds[parts] = nb
}

// rowBlock computes rows lo..hi of a matrix kernel and returns the block's
// sum (zero for MulVec).
func (j job) rowBlock(lo, hi int) float64 {
	switch j.op {
	case opResidualBound:
		return residualBoundRows(j.a, j.x, j.y, lo, hi)
	case opBlockMul:
		mulRowsBlock(j.a, j.d, j.x, j.width, lo, hi)
		return 0
	}
	mulRows(j.a, j.d, j.x, lo, hi)
	switch j.op {
	case opMulVecDot:
		// xᵀ(A·x) over the block just written, still in cache.
		return dotBlock(j.x[lo:hi], j.d[lo:hi])
	case opResidual:
		// d = b − A·x; y holds b.
		return subNormBlock(j.d[lo:hi], j.y[lo:hi])
	}
	return 0
}

// block computes block b of a kernel (rows or elements b·blk up to
// (b+1)·blk) and returns its sum (zero for kernels without a reduction).
func (j job) block(b, blk int) float64 {
	lo := b * blk
	if j.a != nil {
		return j.rowBlock(lo, min(lo+blk, j.a.Rows))
	}
	if j.width > 0 {
		j.blockRows(lo, min(lo+blk, len(j.d)/j.width))
		return 0
	}
	hi := min(lo+blk, len(j.d))
	switch j.op {
	case opDot:
		return dotBlock(j.d[lo:hi], j.x[lo:hi])
	case opAxpy:
		axpyBlock(j.d[lo:hi], j.s, j.x[lo:hi])
	case opAxpyDot:
		d := j.d[lo:hi]
		axpyBlock(d, j.s, j.x[lo:hi])
		return dotBlock(d, d)
	case opTriad:
		triadBlock(j.d[lo:hi], j.x[lo:hi], j.y[lo:hi], j.s)
	case opStep:
		stepBlock(j.d[lo:hi], j.x[lo:hi], j.y[lo:hi], j.s, j.t)
	case opTriadDot:
		d := j.d[lo:hi]
		triadDotBlock(d, j.x[lo:hi], j.y[lo:hi], j.s, j.t)
		return dotBlock(d, d)
	case opStep3:
		step3Block(j.d[lo:hi], j.x[lo:hi], j.y[lo:hi], j.w[lo:hi], j.s, j.t, j.u)
	case opDiagDot:
		// d = x∘y (x the diagonal), then yᵀd like Dot(y, d).
		d, x, y := j.d[lo:hi], j.x[lo:hi], j.y[lo:hi]
		for i := range d {
			d[i] = x[i] * y[i]
		}
		return dotBlock(y, d)
	case opDiagInit:
		diagInitBlock(j.d[lo:hi], j.x[lo:hi], j.w[lo:hi], j.y[lo:hi], j.s)
	case opDiagStep:
		diagStepBlock(j.d[lo:hi], j.x[lo:hi], j.w[lo:hi], j.y[lo:hi], j.s, j.t)
	}
	return 0
}
