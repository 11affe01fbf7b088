package sparse

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// randCSR returns a rows×cols matrix with about density·cols entries per
// row at random columns, values in [−1, 1), and every fifth row (when
// emptyRows) left empty. Fixed seed per call, so failures reproduce.
func randCSR(rows, cols int, density float64, emptyRows bool, seed uint64) *CSR {
	rng := rand.New(rand.NewPCG(seed, 7))
	a := &CSR{Rows: rows, Cols: cols, RowPtr: make([]int, rows+1)}
	for i := 0; i < rows; i++ {
		if !(emptyRows && i%5 == 2) {
			for j := 0; j < cols; j++ {
				if rng.Float64() < density {
					a.ColIdx = append(a.ColIdx, int32(j))
					a.Val = append(a.Val, 2*rng.Float64()-1)
				}
			}
		}
		a.RowPtr[i+1] = len(a.ColIdx)
	}
	return a
}

// randBanded returns an n×n matrix with entries on the diagonals −w..w
// (a cheap way to make large test matrices with many rows).
func randBanded(n, w int, seed uint64) *CSR {
	rng := rand.New(rand.NewPCG(seed, 11))
	a := &CSR{Rows: n, Cols: n, RowPtr: make([]int, n+1)}
	for i := 0; i < n; i++ {
		for j := max(0, i-w); j <= min(n-1, i+w); j++ {
			a.ColIdx = append(a.ColIdx, int32(j))
			a.Val = append(a.Val, 2*rng.Float64()-1)
		}
		a.RowPtr[i+1] = len(a.ColIdx)
	}
	return a
}

func randVec(n int, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 3))
	v := make([]float64, n)
	for i := range v {
		v[i] = 2*rng.Float64() - 1
	}
	return v
}

// Reference loops: the plain textbook definitions, one loop each.

func refMulVec(a *CSR, x []float64) []float64 {
	y := make([]float64, a.Rows)
	for i := 0; i < a.Rows; i++ {
		s := 0.0
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			s += a.Val[p] * x[a.ColIdx[p]]
		}
		y[i] = s
	}
	return y
}

// refMulVecTrans scatters row i of A times x[i] into y, rows in order, so
// each y[j] is summed in increasing row order.
func refMulVecTrans(a *CSR, x []float64) []float64 {
	y := make([]float64, a.Cols)
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			y[a.ColIdx[p]] += a.Val[p] * x[i]
		}
	}
	return y
}

// refDot is the reduction order the package documents, written out
// independently: blocks of blk elements, each summed with four interleaved
// partial sums combined as (s0 + s1) + (s2 + s3), the leftover tail going to
// s0, and the block sums added left to right.
func refDot(x, y []float64, blk int) float64 {
	total := 0.0
	for lo := 0; lo < len(x); lo += blk {
		hi := min(lo+blk, len(x))
		var s [4]float64
		m := lo + (hi-lo)/4*4
		for i := lo; i < hi; i++ {
			k := 0
			if i < m {
				k = (i - lo) % 4
			}
			s[k] += x[i] * y[i]
		}
		total += (s[0] + s[1]) + (s[2] + s[3])
	}
	return total
}

// plainDot is the one-accumulator sum, for checking the blocked sum's error.
func plainDot(x, y []float64) (s, abs float64) {
	for i := range x {
		s += x[i] * y[i]
		abs += math.Abs(x[i] * y[i])
	}
	return s, abs
}

func sameBits(t *testing.T, what string, got, want []float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: length %d, want %d", what, len(got), len(want))
	}
	for i := range got {
		if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
			t.Fatalf("%s: element %d is %v, reference %v", what, i, got[i], want[i])
		}
	}
}

func sameBit(t *testing.T, what string, got, want float64) {
	t.Helper()
	if math.Float64bits(got) != math.Float64bits(want) {
		t.Fatalf("%s: %v, reference %v", what, got, want)
	}
}

// testPools are pools with tiny blocks and no inline threshold, so that
// small matrices cross many partition and block boundaries; their helpers
// stay parked for the rest of the test binary.
var testPools = func() []*workerPool {
	var ps []*workerPool
	for _, parts := range []int{1, 2, 3, 5} {
		ps = append(ps, newPool(parts, 4, 0))
	}
	return ps
}()

type conformanceCase struct {
	name string
	a    *CSR
}

// conformanceCases covers sizes on both sides of the test pools' block
// (4 rows) and partition boundaries (1, 2, 3, 5 parts), empty rows, empty
// matrices and rectangular shapes.
func conformanceCases() []conformanceCase {
	var cs []conformanceCase
	seed := uint64(1)
	for _, rows := range []int{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 11, 12, 13, 19, 20, 21, 37} {
		for _, cols := range []int{rows, 1, 7, 23} {
			if rows == 0 && cols != 0 {
				continue
			}
			for _, empty := range []bool{false, true} {
				seed++
				cs = append(cs, conformanceCase{
					name: fmt.Sprintf("%dx%d/empty=%v", rows, cols, empty),
					a:    randCSR(rows, cols, 0.4, empty, seed),
				})
			}
		}
	}
	// A row much longer than the others: the nnz-balanced partition must
	// still cover every row exactly once.
	skew := randCSR(30, 200, 0.02, false, 99)
	long := randCSR(1, 200, 1, false, 100)
	skew = stackRows(long, skew)
	cs = append(cs, conformanceCase{"skewed-row-lengths", skew})
	return cs
}

// stackRows returns the rows of a followed by the rows of b.
func stackRows(a, b *CSR) *CSR {
	c := &CSR{Rows: a.Rows + b.Rows, Cols: a.Cols}
	c.RowPtr = append(c.RowPtr, a.RowPtr...)
	for _, p := range b.RowPtr[1:] {
		c.RowPtr = append(c.RowPtr, a.NNZ()+p)
	}
	c.ColIdx = append(append(c.ColIdx, a.ColIdx...), b.ColIdx...)
	c.Val = append(append(c.Val, a.Val...), b.Val...)
	return c
}

// TestConformance runs every matrix kernel, on every test pool, against the
// reference loops: products bit for bit (each output is the same sum in the
// same order), fused reductions bit for bit against refDot.
func TestConformance(t *testing.T) {
	for _, tc := range conformanceCases() {
		t.Run(tc.name, func(t *testing.T) {
			a := tc.a
			if err := a.Validate(); err != nil {
				t.Fatal(err)
			}
			x := randVec(a.Cols, 5)
			xt := randVec(a.Rows, 6)
			want := refMulVec(a, x)
			wantT := refMulVecTrans(a, xt)
			at := a.Transpose()
			if err := at.Validate(); err != nil {
				t.Fatalf("Transpose: %v", err)
			}
			for _, p := range testPools {
				what := fmt.Sprintf("parts=%d", p.parts)
				y := randVec(a.Rows, 8) // garbage that must be overwritten
				p.matOp(job{op: opMulVec, a: a, d: y, x: x})
				sameBits(t, what+" MulVec", y, want)

				yt := randVec(a.Cols, 9)
				p.matOp(job{op: opMulVec, a: at, d: yt, x: xt})
				sameBits(t, what+" MulVec on Transpose", yt, wantT)

				if a.Rows == a.Cols {
					y := randVec(a.Rows, 10)
					s := p.matOp(job{op: opMulVecDot, a: a, d: y, x: x})
					sameBits(t, what+" MulVecDot vector", y, want)
					sameBit(t, what+" MulVecDot sum", s, refDot(x, want, p.blk))
				}

				b := randVec(a.Rows, 12)
				r := make([]float64, a.Rows)
				s := p.matOp(job{op: opResidual, a: a, d: r, x: x, y: b})
				wantR := make([]float64, a.Rows)
				for i := range wantR {
					wantR[i] = b[i] - want[i]
				}
				sameBits(t, what+" Residual vector", r, wantR)
				sameBit(t, what+" Residual norm²", s, refDot(wantR, wantR, p.blk))
			}
			// The exported methods on the package pool.
			y := make([]float64, a.Rows)
			a.MulVec(y, x)
			sameBits(t, "MulVec", y, want)
			yt := make([]float64, a.Cols)
			a.MulVecTrans(yt, xt)
			sameBits(t, "MulVecTrans", yt, wantT)
		})
	}
}

// TestConformanceLarge runs the exported kernels on the package pool with
// sizes around multiples of the real block length and above the inline
// threshold, so the parallel path with real partitions is exercised.
func TestConformanceLarge(t *testing.T) {
	for _, n := range []int{blockLen - 1, blockLen, blockLen + 1, 3*blockLen + 1, 7000, 20011} {
		for _, w := range []int{0, 3} {
			a := randBanded(n, w, uint64(n+w))
			t.Run(fmt.Sprintf("n=%d/band=%d", n, w), func(t *testing.T) {
				x := randVec(n, 1)
				want := refMulVec(a, x)
				y := make([]float64, n)
				a.MulVec(y, x)
				sameBits(t, "MulVec", y, want)
				s := a.MulVecDot(y, x)
				sameBits(t, "MulVecDot vector", y, want)
				sameBit(t, "MulVecDot sum", s, refDot(x, want, blockLen))
				sameBit(t, "MulVecDot = Dot", s, Dot(x, y))
				yt := make([]float64, n)
				a.MulVecTrans(yt, x)
				sameBits(t, "MulVecTrans", yt, refMulVecTrans(a, x))
			})
		}
	}
}

// TestAgainstGonumDense compares the products with gonum's dense
// matrix-vector product (mat.Dense via mat.VecDense.MulVec) for small random
// matrices with fixed seeds. gonum adds in its own order and includes the
// zeros, so equality holds only up to rounding: |ŷ − y| ≤ γ_n·(|A|·|x|)
// with γ_n = n·u/(1 − n·u) for each of the two sums (Higham, Accuracy and
// Stability of Numerical Algorithms, 2nd ed., §3.5); we allow twice that.
func TestAgainstGonumDense(t *testing.T) {
	for k, sz := range [][2]int{{1, 1}, {5, 5}, {17, 9}, {9, 17}, {64, 64}, {100, 33}} {
		a := randCSR(sz[0], sz[1], 0.3, k%2 == 0, uint64(100+k))
		d := mat.DenseCopyOf(a) // through At, which TestAt checks separately
		x := randVec(sz[1], 1)
		xt := randVec(sz[0], 2)

		var want, wantT mat.VecDense
		want.MulVec(d, mat.NewVecDense(len(x), x))
		wantT.MulVec(d.T(), mat.NewVecDense(len(xt), xt))
		y := make([]float64, sz[0])
		yt := make([]float64, sz[1])
		a.MulVec(y, x)
		a.MulVecTrans(yt, xt)

		absA := mat.NewDense(sz[0], sz[1], nil)
		absA.Apply(func(_, _ int, v float64) float64 { return math.Abs(v) }, d)
		absX, absXt := make([]float64, len(x)), make([]float64, len(xt))
		for i := range x {
			absX[i] = math.Abs(x[i])
		}
		for i := range xt {
			absXt[i] = math.Abs(xt[i])
		}
		var bound, boundT mat.VecDense
		bound.MulVec(absA, mat.NewVecDense(len(absX), absX))
		boundT.MulVec(absA.T(), mat.NewVecDense(len(absXt), absXt))
		u := 0x1p-53
		for i := range y {
			g := float64(sz[1]) * u / (1 - float64(sz[1])*u)
			if math.Abs(y[i]-want.AtVec(i)) > 2*g*bound.AtVec(i) {
				t.Fatalf("%dx%d: (A·x)[%d] = %v, gonum %v", sz[0], sz[1], i, y[i], want.AtVec(i))
			}
		}
		for j := range yt {
			g := float64(sz[0]) * u / (1 - float64(sz[0])*u)
			if math.Abs(yt[j]-wantT.AtVec(j)) > 2*g*boundT.AtVec(j) {
				t.Fatalf("%dx%d: (Aᵀ·x)[%d] = %v, gonum %v", sz[0], sz[1], j, yt[j], wantT.AtVec(j))
			}
		}
	}
}

// TestVectorKernels checks the vector kernels on every test pool and on the
// package pool against their one-line definitions (element results bit for
// bit) and refDot (sums bit for bit), for lengths around block boundaries.
func TestVectorKernels(t *testing.T) {
	type pooled struct {
		p    *workerPool
		lens []int
	}
	var runs []pooled
	for _, p := range testPools {
		runs = append(runs, pooled{p, []int{0, 1, 2, 3, 4, 5, 7, 8, 9, 15, 16, 17, 21, 40, 41}})
	}
	runs = append(runs, pooled{getPool(), []int{blockLen - 1, blockLen + 1, inlineWork - 1, inlineWork, 5*blockLen*4 + 3, 100003}})
	for _, r := range runs {
		p := r.p
		for _, n := range r.lens {
			what := fmt.Sprintf("parts=%d blk=%d n=%d", p.parts, p.blk, n)
			x, y, z := randVec(n, 1), randVec(n, 2), randVec(n, 3)
			const alpha, beta = 0.37, -1.25

			sameBit(t, what+" Dot", p.vecOp(job{op: opDot, d: x, x: y}, n), refDot(x, y, p.blk))
			// The blocked sum against the plain one: both are within
			// γ_n·Σ|x_i·y_i| of the exact value (Higham §3.1), so within
			// twice that of each other.
			got := p.vecOp(job{op: opDot, d: x, x: y}, n)
			plain, abs := plainDot(x, y)
			u := 0x1p-53
			if g := float64(n) * u / (1 - float64(n)*u); math.Abs(got-plain) > 2*g*abs {
				t.Fatalf("%s: Dot %v, plain sum %v", what, got, plain)
			}

			d := append([]float64(nil), y...)
			want := make([]float64, n)
			for i := range want {
				want[i] = y[i] + alpha*x[i]
			}
			p.vecOp(job{op: opAxpy, d: d, x: x, s: alpha}, n)
			sameBits(t, what+" Axpy", d, want)

			d = append(d[:0], y...)
			s := p.vecOp(job{op: opAxpyDot, d: d, x: x, s: alpha}, n)
			sameBits(t, what+" AxpyDot vector", d, want)
			sameBit(t, what+" AxpyDot sum", s, refDot(want, want, p.blk))

			a := make([]float64, n)
			for i := range want {
				want[i] = x[i] + beta*y[i]
			}
			p.vecOp(job{op: opTriad, d: a, x: x, y: y, s: beta}, n)
			sameBits(t, what+" Triad", a, want)
			// Aliased output: p = z + β·p.
			pp := append([]float64(nil), y...)
			for i := range want {
				want[i] = z[i] + beta*y[i]
			}
			p.vecOp(job{op: opTriad, d: pp, x: z, y: pp, s: beta}, n)
			sameBits(t, what+" Triad aliased", pp, want)

			xs, ps := append([]float64(nil), x...), append([]float64(nil), y...)
			wantX, wantP := make([]float64, n), make([]float64, n)
			for i := range wantX {
				wantX[i] = x[i] + alpha*y[i]
				wantP[i] = z[i] + beta*y[i]
			}
			p.vecOp(job{op: opStep, d: xs, x: ps, y: z, s: alpha, t: beta}, n)
			sameBits(t, what+" Step x", xs, wantX)
			sameBits(t, what+" Step p", ps, wantP)
		}
	}
}

// TestExportedVectorKernels checks the exported wrappers route to the right
// kernels.
func TestExportedVectorKernels(t *testing.T) {
	const n = 3*inlineWork + 5
	x, y, z := randVec(n, 1), randVec(n, 2), randVec(n, 3)
	sameBit(t, "Dot", Dot(x, y), refDot(x, y, blockLen))
	d := append([]float64(nil), y...)
	Axpy(d, 2, x)
	d2 := append([]float64(nil), y...)
	s := AxpyDot(d2, 2, x)
	sameBits(t, "Axpy vs AxpyDot", d, d2)
	sameBit(t, "AxpyDot sum", s, Dot(d2, d2))
	a := make([]float64, n)
	Triad(a, y, x, 2)
	sameBits(t, "Triad vs Axpy", a, d)
	xs, ps := append([]float64(nil), x...), append([]float64(nil), y...)
	Step(xs, ps, z, 0.5, 0.25)
	for i := range xs {
		if xs[i] != x[i]+0.5*y[i] || ps[i] != z[i]+0.25*y[i] {
			t.Fatalf("Step: element %d", i)
		}
	}
}

// TestWorkerCountIndependence checks the claim in pool.go: the same inputs
// give the same bits on pools of 1, 2, 3 and 5 parts with the real block
// length and no inline threshold.
func TestWorkerCountIndependence(t *testing.T) {
	a := randBanded(5*blockLen+17, 4, 1)
	x := randVec(a.Cols, 2)
	var refY []float64
	var refS, refD float64
	for k, parts := range []int{1, 2, 3, 5} {
		p := newPool(parts, blockLen, 0)
		y := make([]float64, a.Rows)
		s := p.matOp(job{op: opMulVecDot, a: a, d: y, x: x})
		dd := p.vecOp(job{op: opDot, d: x, x: y}, len(x))
		if k == 0 {
			refY, refS, refD = y, s, dd
			continue
		}
		sameBits(t, fmt.Sprintf("parts=%d MulVecDot vector", parts), y, refY)
		sameBit(t, fmt.Sprintf("parts=%d MulVecDot sum", parts), s, refS)
		sameBit(t, fmt.Sprintf("parts=%d Dot", parts), dd, refD)
	}
}

// TestRowPartition checks that the partition covers the blocks in order
// and balances entries plus rows to within two blocks' work.
func TestRowPartition(t *testing.T) {
	for _, a := range []*CSR{randBanded(10*blockLen+5, 3, 1), stackRows(randCSR(1, 50000, 1, false, 2), randBanded(9*blockLen, 1, 3))} {
		nb := (a.Rows + blockLen - 1) / blockLen
		for _, parts := range []int{1, 2, 3, 4, 7} {
			b := make([]int, parts+1)
			rowPartition(b, a.RowPtr, a.Rows, blockLen)
			if b[0] != 0 || b[parts] != nb {
				t.Fatalf("parts=%d: bounds %v do not span [0, %d]", parts, b, nb)
			}
			// Rounding a boundary up to a block boundary moves at most one
			// block's work (plus the row straddling the exact target).
			maxBlock := 0
			for lo := 0; lo < a.Rows; lo += blockLen {
				hi := min(lo+blockLen, a.Rows)
				maxBlock = max(maxBlock, a.RowPtr[hi]+hi-a.RowPtr[lo]-lo)
			}
			total := a.NNZ() + a.Rows
			for k := 0; k < parts; k++ {
				if b[k] > b[k+1] {
					t.Fatalf("parts=%d: bounds %v decrease", parts, b)
				}
				lo, hi := b[k]*blockLen, min(b[k+1]*blockLen, a.Rows)
				w := a.RowPtr[hi] + hi - a.RowPtr[lo] - lo
				if d := w - total/parts; d > 2*maxBlock || -d > 2*maxBlock {
					t.Fatalf("parts=%d: part %d has work %d, average %d", parts, k, w, total/parts)
				}
			}
		}
	}
}

// TestNoAllocs checks that the kernels allocate nothing per call once warm
// (testing.AllocsPerRun runs the function once before counting).
func TestNoAllocs(t *testing.T) {
	a := randBanded(40000, 3, 1)
	g := randCSR(300, 200, 0.05, true, 2)
	x, y := randVec(a.Rows, 1), make([]float64, a.Rows)
	b := randVec(a.Rows, 3)
	gx, gy := randVec(g.Rows, 1), make([]float64, g.Cols)
	for name, f := range map[string]func(){
		"MulVec":      func() { a.MulVec(y, x) },
		"MulVecDot":   func() { a.MulVecDot(y, x) },
		"Residual":    func() { a.Residual(y, b, x) },
		"MulVecTrans": func() { g.MulVecTrans(gy, gx) },
		"MulVecTrans symmetric": func() {
			a.MulVecTrans(y, x)
		},
		"Dot":     func() { Dot(x, b) },
		"Axpy":    func() { Axpy(y, 0.5, x) },
		"AxpyDot": func() { AxpyDot(y, 0.5, x) },
		"Triad":   func() { Triad(y, b, x, 0.5) },
		"Step":    func() { Step(y, b, x, 0.5, 0.5) },
	} {
		if n := testing.AllocsPerRun(20, f); n != 0 {
			t.Errorf("%s: %v allocations per call", name, n)
		}
	}
}

// TestConcurrentCallers runs kernels from several goroutines at once (the
// service solves several systems at a time): a caller that finds the pool
// busy computes on its own, with the same bits.
func TestConcurrentCallers(t *testing.T) {
	a := randBanded(30000, 3, 4)
	x := randVec(a.Cols, 5)
	want := refMulVec(a, x)
	wantS := refDot(x, want, blockLen)
	var wg sync.WaitGroup
	errs := make(chan string, 8)
	for g := 0; g < 4; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			y := make([]float64, a.Rows)
			for it := 0; it < 20; it++ {
				s := a.MulVecDot(y, x)
				if s != wantS || Dot(x, y) != wantS {
					errs <- fmt.Sprintf("sum %v, want %v", s, wantS)
					return
				}
				for i := range y {
					if y[i] != want[i] {
						errs <- fmt.Sprintf("y[%d] = %v, want %v", i, y[i], want[i])
						return
					}
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Fatal(e)
	}
}

func TestKernelPanics(t *testing.T) {
	a := randCSR(4, 3, 0.5, false, 1)
	sq := randCSR(3, 3, 0.5, false, 1)
	for name, f := range map[string]func(){
		"MulVec dst":       func() { a.MulVec(make([]float64, 3), make([]float64, 3)) },
		"MulVec x":         func() { a.MulVec(make([]float64, 4), make([]float64, 4)) },
		"MulVecTrans dst":  func() { a.MulVecTrans(make([]float64, 4), make([]float64, 4)) },
		"MulVecTrans x":    func() { a.MulVecTrans(make([]float64, 3), make([]float64, 3)) },
		"MulVecDot square": func() { a.MulVecDot(make([]float64, 4), make([]float64, 3)) },
		"MulVecDot len":    func() { sq.MulVecDot(make([]float64, 2), make([]float64, 3)) },
		"Residual b":       func() { a.Residual(make([]float64, 4), make([]float64, 3), make([]float64, 3)) },
		"Dot":              func() { Dot(make([]float64, 2), make([]float64, 3)) },
		"Axpy":             func() { Axpy(make([]float64, 2), 1, make([]float64, 3)) },
		"AxpyDot":          func() { AxpyDot(make([]float64, 2), 1, make([]float64, 3)) },
		"Triad":            func() { Triad(make([]float64, 2), make([]float64, 2), make([]float64, 3), 1) },
		"Step":             func() { Step(make([]float64, 2), make([]float64, 3), make([]float64, 2), 1, 1) },
		"At":               func() { a.At(4, 0) },
		"At col":           func() { a.At(0, -1) },
		"Diagonal":         func() { a.Diagonal(make([]float64, 4)) },
		"invalid column": func() {
			bad := &CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 1, 2}, ColIdx: []int32{0, 2}, Val: []float64{1, 1}}
			bad.MulVec(make([]float64, 2), make([]float64, 2))
		},
		"invalid row pointer": func() {
			bad := &CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 3, 2}, ColIdx: []int32{0, 1}, Val: []float64{1, 1}}
			bad.MulVecTrans(make([]float64, 2), make([]float64, 2))
		},
	} {
		t.Run(name, func(t *testing.T) {
			defer func() {
				r := recover()
				if s, ok := r.(string); !ok || len(s) < 8 || s[:8] != "sparse: " {
					t.Errorf("recovered %v, want a panic beginning \"sparse: \"", r)
				}
			}()
			f()
		})
	}
}
