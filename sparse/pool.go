package sparse

import (
	"runtime"
	"sync"
)

// How the kernels split their work.
//
// A persistent pool of helper goroutines, started on the first parallel
// call and sized by GOMAXPROCS at that moment (Workers), runs the large
// kernels; the calling goroutine always does part 0 itself, so P workers
// means P−1 helpers. A call hands each helper one plain job value over its
// own buffered channel and waits for P−1 completion signals; nothing is
// allocated and no goroutine is started per call. Work below a threshold
// (inlineWork) runs on the caller alone, and so does every call made while
// another goroutine is using the pool (the pool serves one call at a time;
// a second concurrent caller does not queue, it computes by itself).
//
// Vectors are cut into fixed blocks of blockLen elements, and matrices into
// fixed blocks of blockLen rows. A reduction (a dot product, or the norm
// that a fused kernel returns) first sums each block with dotBlock, then
// adds the block sums in block order, left to right, on the caller. The
// blocks do not depend on the number of workers (a worker gets a
// contiguous run of whole blocks), so every result is bitwise identical run
// to run at any worker count, and whether it ran in parallel or inline.
//
// Row ranges for matrix products are balanced by work rather than by rows:
// part k of P starts at the first block boundary at or after the row r where
// RowPtr[r] + r reaches k/P of nnz + rows (one unit per stored entry and one
// per row, for the row's pointer load and result store). The partition is a
// pure function of RowPtr and P, recomputed on each call by P binary
// searches over RowPtr (tens of nanoseconds), so it is fixed without being
// stored on the matrix and can never go stale. A product's rows do not
// depend on it anyway: each dst[i] is summed over row i in column order.

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
)

// job is one part of one kernel call. lo and hi are a range of blocks for
// the vector kernels and of rows for the matrix kernels. Block sums go to
// sums[b] for block b.
type job struct {
	op      opKind
	a       *CSR
	d, x, y []float64
	s, t    float64
	lo, hi  int
	sums    []float64
}

type workerPool struct {
	parts   int
	blk     int           // block length, blockLen except in tests
	minWork int           // inline below this much work, inlineWork except in tests
	jobs    []chan job    // one per helper, capacity 1
	done    chan struct{} // helpers signal completion here

	// mu is held by the one call using the helpers; it guards sums and
	// bounds.
	mu     sync.Mutex
	sums   []float64 // block sums of the current call
	bounds []int     // part boundaries of the current call, parts+1 entries
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
		jobs:    make([]chan job, parts-1),
		done:    make(chan struct{}, parts),
		bounds:  make([]int, parts+1),
	}
	for k := range p.jobs {
		ch := make(chan job, 1)
		p.jobs[k] = ch
		go func() {
			for j := range ch {
				j.run(p.blk)
				p.done <- struct{}{}
			}
		}()
	}
	return p
}

// runParts runs j over the ranges p.bounds[k]..p.bounds[k+1], part 0 on the
// caller, the others on the helpers, and waits for all. p.mu must be held.
func (p *workerPool) runParts(j job) {
	for k := 1; k < p.parts; k++ {
		jk := j
		jk.lo, jk.hi = p.bounds[k], p.bounds[k+1]
		p.jobs[k-1] <- jk
	}
	j.lo, j.hi = p.bounds[0], p.bounds[1]
	j.run(p.blk)
	for k := 1; k < p.parts; k++ {
		<-p.done
	}
}

// sumBlocks adds sums[0:nb] in block order.
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
	if n < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		return j.inline(nb, p.blk)
	}
	defer p.mu.Unlock()
	for k := 0; k <= p.parts; k++ {
		p.bounds[k] = k * nb / p.parts
	}
	j.sums = p.blockSums(nb)
	p.runParts(j)
	return sumBlocks(j.sums)
}

// matOp runs a matrix kernel over the rows of j.a and returns the sum of its
// block sums.
func (p *workerPool) matOp(j job) float64 {
	a := j.a
	nb := (a.Rows + p.blk - 1) / p.blk
	if a.NNZ()+a.Rows < p.minWork || p.parts == 1 || !p.mu.TryLock() {
		return j.inlineRows(a.Rows, p.blk)
	}
	defer p.mu.Unlock()
	rowPartition(p.bounds, a.RowPtr, a.Rows, p.blk)
	j.sums = p.blockSums(nb)
	p.runParts(j)
	return sumBlocks(j.sums)
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

// inline runs a vector kernel over all nb blocks on the caller, adding the
// block sums in block order as they come: the same additions as vecOp.
func (j job) inline(nb, blk int) float64 {
	s := 0.0
	for b := 0; b < nb; b++ {
		s += j.block(b, blk)
	}
	return s
}

// inlineRows runs a matrix kernel over all rows on the caller.
func (j job) inlineRows(rows, blk int) float64 {
	s := 0.0
	for lo := 0; lo < rows; lo += blk {
		s += j.rowBlock(lo, min(lo+blk, rows))
	}
	return s
}

// rowPartition fills bounds (P+1 entries) with row boundaries balanced by
// entries plus rows, each rounded up to a multiple of the block length blk
// (see the comment at the top of this file).
func rowPartition(bounds, rowPtr []int, rows, blk int) {
	parts := len(bounds) - 1
	work := rowPtr[rows] + rows
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
		r := (lo + blk - 1) / blk * blk
		r = min(max(r, bounds[k-1]), rows)
		bounds[k] = r
	}
	bounds[parts] = rows
}

// run executes one part of a kernel: blocks lo..hi of a vector kernel, or
// rows lo..hi (block-aligned) of a matrix kernel, storing block sums.
func (j job) run(blk int) {
	switch j.op {
	case opMulVec, opMulVecDot, opResidual:
		for lo := j.lo; lo < j.hi; lo += blk {
			j.sums[lo/blk] = j.rowBlock(lo, min(lo+blk, j.hi))
		}
	default:
		for b := j.lo; b < j.hi; b++ {
			j.sums[b] = j.block(b, blk)
		}
	}
}

// rowBlock computes rows lo..hi of a matrix kernel and returns the block's
// sum (zero for MulVec).
func (j job) rowBlock(lo, hi int) float64 {
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

// block computes block b of a vector kernel and returns its sum.
func (j job) block(b, blk int) float64 {
	lo := b * blk
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
	}
	return 0
}
