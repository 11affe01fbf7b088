package precond

import (
	"fmt"
	"math"
	"testing"
	"time"

	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// This file holds the row-by-row level-scheduled triangular solves that the
// package measured against its sequential and segment-scheduled ones (see
// BenchmarkLevels and doc.go). They live beside the benchmark, not in the
// package, because they lost to both: they are the measured alternative,
// not a product. The file also tests the segment schedule of sched.go.

// Level scheduling of the triangular solves (Anderson and Saad, Int. J.
// High Speed Computing 1, 1989; Saad, 2nd ed., §11.6.2): row i of the
// forward solve can start once every row j < i it reads is done, so rows
// are grouped into levels, level(i) = 1 + max level(j) over the entries
// (i, j) of L, and the rows of one level are independent. The backward
// solve has its own levels, over the entries of Lᵀ.
//
// The scheduled factor stores each solve's rows in level order, entries
// contiguous in that order, with row and column numbers kept in the
// original numbering (no vector is permuted).
type levelSolve struct {
	rows   []int32 // the rows, level by level
	levPtr []int32 // level l is rows[levPtr[l]:levPtr[l+1]]
	ptr    []int32 // row rows[k]'s entries are col/val[ptr[k]:ptr[k+1]]
	col    []int32
	val    []float64
}

// buildLevels groups the rows of the triangular factor held in
// (ptr, col, val) into levels, visiting rows in the order the solve runs
// (increasing for the forward solve, decreasing for the backward one),
// and copies the entries into level order.
func buildLevels(n int, ptr, col []int32, val []float64, increasing bool) *levelSolve {
	level := make([]int32, n)
	nlev := int32(0)
	for t := 0; t < n; t++ {
		i := t
		if !increasing {
			i = n - 1 - t
		}
		l := int32(0)
		for _, j := range col[ptr[i]:ptr[i+1]] {
			l = max(l, level[j]+1)
		}
		level[i] = l
		nlev = max(nlev, l+1)
	}
	ls := &levelSolve{levPtr: make([]int32, nlev+1), rows: make([]int32, n)}
	for _, l := range level {
		ls.levPtr[l+1]++
	}
	for l := int32(0); l < nlev; l++ {
		ls.levPtr[l+1] += ls.levPtr[l]
	}
	next := make([]int32, nlev)
	copy(next, ls.levPtr[:nlev])
	for i, l := range level {
		ls.rows[next[l]] = int32(i)
		next[l]++
	}
	ls.ptr = make([]int32, n+1)
	ls.col = make([]int32, len(col))
	ls.val = make([]float64, len(val))
	p := int32(0)
	for k, i := range ls.rows {
		q := p + ptr[i+1] - ptr[i]
		copy(ls.col[p:q], col[ptr[i]:ptr[i+1]])
		copy(ls.val[p:q], val[ptr[i]:ptr[i+1]])
		ls.ptr[k+1] = q
		p = q
	}
	return ls
}

// forwardRange runs rows rows[lo:hi] of the forward solve (I + L)·w = r.
func (ls *levelSolve) forwardRange(w, r []float64, lo, hi int32) {
	for k := lo; k < hi; k++ {
		i := ls.rows[k]
		s := r[i]
		cs := ls.col[ls.ptr[k]:ls.ptr[k+1]]
		vs := ls.val[ls.ptr[k]:ls.ptr[k+1]]
		vs = vs[:len(cs)]
		for t, j := range cs {
			s -= vs[t] * w[j]
		}
		w[i] = s
	}
}

// backwardRange runs rows rows[lo:hi] of the backward solve
// D·(I + L)ᵀ·z = w, in place.
func (ls *levelSolve) backwardRange(z, dInv []float64, lo, hi int32) {
	for k := lo; k < hi; k++ {
		i := ls.rows[k]
		s := z[i] * dInv[i]
		cs := ls.col[ls.ptr[k]:ls.ptr[k+1]]
		vs := ls.val[ls.ptr[k]:ls.ptr[k+1]]
		vs = vs[:len(cs)]
		for t, j := range cs {
			s -= vs[t] * z[j]
		}
		z[i] = s
	}
}

// levelsApply runs both solves level by level with `parts` goroutines
// (the caller and parts−1 started for the call), each taking a contiguous
// share of every level, with a barrier between levels.
func (m *IC0) levelsApply(dst, r []float64, fw, bw *levelSolve, parts int) {
	var bar barrier
	bar.parties = int32(parts)
	run := func(k int) {
		for l := 0; l+1 < len(fw.levPtr); l++ {
			lo, hi := fw.levPtr[l], fw.levPtr[l+1]
			a := lo + (hi-lo)*int32(k)/int32(parts)
			b := lo + (hi-lo)*int32(k+1)/int32(parts)
			fw.forwardRange(dst, r, a, b)
			bar.wait()
		}
		for l := 0; l+1 < len(bw.levPtr); l++ {
			lo, hi := bw.levPtr[l], bw.levPtr[l+1]
			a := lo + (hi-lo)*int32(k)/int32(parts)
			b := lo + (hi-lo)*int32(k+1)/int32(parts)
			bw.backwardRange(dst, m.dInv, a, b)
			bar.wait()
		}
	}
	done := make(chan struct{}, parts)
	for k := 1; k < parts; k++ {
		go func() { run(k); done <- struct{}{} }()
	}
	run(0)
	for k := 1; k < parts; k++ {
		<-done
	}
}

// BenchmarkLevels compares one IC(0) application on 3D Poisson done by the
// sequential solves, by row-by-row level scheduling on one goroutine (the
// cost of level order alone) and on two, and by the segment schedule of
// sched.go on the package's helpers. Each reports its ratio to one SpMV
// (sparse.(*CSR).MulVec, parallel) measured just before it.
func BenchmarkLevels(b *testing.B) {
	for _, n := range []int{100, 160} {
		a := stencil.Poisson3D(n)
		m, _ := NewIC0(a, IC0Options{})
		fw := buildLevels(m.n, m.lPtr, m.lCol, m.lVal, true)
		bw := buildLevels(m.n, m.uPtr, m.uCol, m.uVal, false)
		seg := newSchedule(m, 2)
		r := stencil.Ones(a)
		z := make([]float64, a.Rows)
		y := make([]float64, a.Rows)
		for _, v := range []struct {
			name  string
			apply func()
		}{
			{"sequential", func() { m.forward(z, r, 0, m.n); m.backward(z, 0, m.n) }},
			{"row-levels-1", func() { m.levelsApply(z, r, fw, bw, 1) }},
			{"row-levels-2", func() { m.levelsApply(z, r, fw, bw, 2) }},
			{"segment-levels-2", func() {
				if !seg.applyParallel(m, z, r) {
					b.Fatal("helpers busy or sized differently")
				}
			}},
		} {
			b.Run(fmt.Sprintf("%s/poisson3d-%d", v.name, n), func(b *testing.B) {
				spmv := time.Duration(1 << 62)
				for k := 0; k < 5; k++ {
					t0 := time.Now()
					a.MulVec(y, r)
					spmv = min(spmv, time.Since(t0))
				}
				b.ResetTimer()
				for b.Loop() {
					v.apply()
				}
				b.StopTimer()
				b.ReportMetric(float64(b.Elapsed()/time.Duration(b.N))/float64(spmv), "spmv/op")
			})
		}
		b.Logf("poisson3d-%d: %d row levels forward, %d backward; %d segment levels forward, %d backward",
			n, len(fw.levPtr)-1, len(bw.levPtr)-1, seg.fwd.count, seg.bwd.count)
	}
}

func TestSegmentScheduleMatchesSequential(t *testing.T) {
	// The segment schedule computes every row by the same arithmetic as the
	// sequential solves, so the two must agree bit for bit.
	for _, tc := range []struct {
		name string
		a    *sparse.CSR
	}{
		{"poisson-3d-40", stencil.Poisson3D(40)},
		{"poisson-2d-300", stencil.Poisson2D(300)},
		{"jump-3d-30", stencil.Jump3D(30, 1e3)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			m, err := NewIC0(tc.a, IC0Options{})
			if err != nil {
				t.Fatal(err)
			}
			s := newScheduleRows(m, 2, 1)
			if s == nil {
				t.Fatal("no schedule")
			}
			r := make([]float64, tc.a.Rows)
			for i := range r {
				r[i] = math.Cos(float64(3 * i))
			}
			want := make([]float64, len(r))
			m.Precondition(want, r)
			got := make([]float64, len(r))
			var bar barrier
			bar.parties = 2
			done := make(chan struct{})
			go func() { s.run(m, got, r, 1, 2, &bar); close(done) }()
			s.run(m, got, r, 0, 2, &bar)
			<-done
			for i := range got {
				if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
					t.Fatalf("row %d: scheduled %v, sequential %v", i, got[i], want[i])
				}
			}
			// The row-by-row levels of BenchmarkLevels too.
			fw := buildLevels(m.n, m.lPtr, m.lCol, m.lVal, true)
			bw := buildLevels(m.n, m.uPtr, m.uCol, m.uVal, false)
			rowLevels := make([]float64, len(r))
			m.levelsApply(rowLevels, r, fw, bw, 2)
			for i := range rowLevels {
				if math.Float64bits(rowLevels[i]) != math.Float64bits(want[i]) {
					t.Fatalf("row %d: row levels %v, sequential %v", i, rowLevels[i], want[i])
				}
			}
			// And through Precondition with the helpers.
			m.sched = s
			if s.parts() == getHelpers().parts {
				clear(got)
				m.Precondition(got, r)
				for i := range got {
					if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
						t.Fatalf("row %d: parallel Precondition %v, sequential %v", i, got[i], want[i])
					}
				}
			}
		})
	}
}
