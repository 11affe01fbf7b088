package sparse

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// buildDense returns the dense row-major form of a, for comparisons.
func buildDense(a *CSR) []float64 {
	d := make([]float64, a.Rows*a.Cols)
	for r := 0; r < a.Rows; r++ {
		for p := a.RowPtr[r]; p < a.RowPtr[r+1]; p++ {
			d[r*a.Cols+int(a.ColIdx[p])] += a.Val[p]
		}
	}
	return d
}

// Duplicates are summed in the order given (the finite-element assembly
// convention that the Matrix Market format leaves to the reader; Boisvert,
// Pozo, Remington, NIST 1996, say nothing against repeats) and counted once
// per merged triplet.
func TestFromTripletsDuplicates(t *testing.T) {
	i := []int32{0, 1, 0, 0, 1, 2}
	j := []int32{1, 1, 1, 0, 1, 2}
	v := []float64{1, 2, 10, 3, 20, -5}
	a, st, err := FromTriplets(3, 3, i, j, v, BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Validate(); err != nil {
		t.Fatal(err)
	}
	want := []float64{3, 11, 0, 0, 22, 0, 0, 0, -5}
	got := buildDense(a)
	for k := range want {
		if got[k] != want[k] {
			t.Fatalf("dense = %v, want %v", got, want)
		}
	}
	if st.Duplicates != 2 || a.NNZ() != 4 {
		t.Errorf("%d duplicates and %d entries, want 2 and 4", st.Duplicates, a.NNZ())
	}
}

// Summation order: a duplicate sequence whose floating-point sum depends on
// the order must give the left-to-right sum of the given order.
func TestFromTripletsSumOrder(t *testing.T) {
	v := []float64{1e16, 1, -1e16, 1}
	i := []int32{0, 0, 0, 0}
	a, _, err := FromTriplets(1, 1, i, i, v, BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	// IEEE 754 double arithmetic left to right: 1e16+1 is a tie between
	// 1e16 and 1e16+2 and rounds to even (1e16), so the sum is 1, whereas
	// exact arithmetic (or another order) would give 2.
	want := 0.0
	for _, x := range v {
		want += x
	}
	if a.Val[0] != want {
		t.Errorf("sum = %v, want %v", a.Val[0], want)
	}
}

// Symmetric expansion against a dense reference built by the definition
// a(j,i) = a(i,j) (skew: -a(i,j)), with duplicates, for random lower and
// upper triangles; the diagonal must not be doubled.
func TestFromTripletsSymmetricVsDense(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, sym := range []Symmetry{Symmetric, SkewSymmetric} {
		for _, upper := range []bool{false, true} {
			for trial := 0; trial < 50; trial++ {
				n := 1 + rng.IntN(12)
				m := rng.IntN(3 * n * n)
				var ii, jj []int32
				var vv []float64
				ref := make([]float64, n*n)
				for k := 0; k < m; k++ {
					r, c := rng.IntN(n), rng.IntN(n)
					if sym == SkewSymmetric && r == c {
						continue
					}
					if (r < c) != upper && r != c {
						r, c = c, r
					}
					x := float64(rng.IntN(7) - 3)
					ii, jj, vv = append(ii, int32(r)), append(jj, int32(c)), append(vv, x)
					ref[r*n+c] += x
					if r != c {
						if sym == SkewSymmetric {
							x = -x
						}
						ref[c*n+r] += x
					}
				}
				a, _, err := FromTriplets(n, n, ii, jj, vv, BuildOptions{Symmetry: sym})
				if err != nil {
					t.Fatal(err)
				}
				if err := a.Validate(); err != nil {
					t.Fatal(err)
				}
				got := buildDense(a)
				for k := range ref {
					if got[k] != ref[k] {
						t.Fatalf("%v upper=%v trial %d: entry (%d,%d) = %v, want %v", sym, upper, trial, k/n, k%n, got[k], ref[k])
					}
				}
			}
		}
	}
}

// A 2×2 symmetric example worked by hand: lower triangle (1,0)=4 and the
// diagonal; the full matrix holds 4 at (0,1) and (1,0), the diagonal once.
func TestFromTripletsSymmetricSmall(t *testing.T) {
	a, st, err := FromTriplets(2, 2, []int32{0, 1, 1}, []int32{0, 0, 1}, []float64{2, 4, 3}, BuildOptions{Symmetry: Symmetric})
	if err != nil {
		t.Fatal(err)
	}
	wantPtr, wantCol, wantVal := []int{0, 2, 4}, []int32{0, 1, 0, 1}, []float64{2, 4, 4, 3}
	for k := range wantPtr {
		if a.RowPtr[k] != wantPtr[k] {
			t.Fatalf("RowPtr = %v, want %v", a.RowPtr, wantPtr)
		}
	}
	for k := range wantCol {
		if a.ColIdx[k] != wantCol[k] || a.Val[k] != wantVal[k] {
			t.Fatalf("ColIdx, Val = %v, %v; want %v, %v", a.ColIdx, a.Val, wantCol, wantVal)
		}
	}
	if st != (BuildStats{}) {
		t.Errorf("stats = %+v, want zero", st)
	}
	// A duplicated off-diagonal triplet counts once, not once per triangle.
	_, st, err = FromTriplets(2, 2, []int32{1, 1}, []int32{0, 0}, []float64{1, 1}, BuildOptions{Symmetry: Symmetric})
	if err != nil || st.Duplicates != 1 {
		t.Errorf("duplicates = %d (err %v), want 1", st.Duplicates, err)
	}
}

func TestFromTripletsZeros(t *testing.T) {
	i := []int32{0, 1, 1, 2}
	j := []int32{0, 1, 1, 0}
	v := []float64{0, 1, -1, math.Copysign(0, -1)}
	a, st, err := FromTriplets(3, 3, i, j, v, BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	// (0,0)=0, (1,1)=1+(-1)=0, (2,0)=-0: three explicit zeros kept.
	if a.NNZ() != 3 || st.ExplicitZeros != 3 || st.Dropped != 0 || st.Duplicates != 1 {
		t.Errorf("nnz %d, stats %+v; want 3 entries, 3 zeros, none dropped, 1 duplicate", a.NNZ(), st)
	}
	if !math.Signbit(a.Val[2]) {
		t.Errorf("negative zero lost its sign: %v", a.Val)
	}
	a, st, err = FromTriplets(3, 3, i, j, v, BuildOptions{DropZeros: true})
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Validate(); err != nil {
		t.Fatal(err)
	}
	if a.NNZ() != 0 || st.ExplicitZeros != 3 || st.Dropped != 3 {
		t.Errorf("nnz %d, stats %+v; want 0 entries, 3 zeros, 3 dropped", a.NNZ(), st)
	}
}

func TestFromTripletsErrors(t *testing.T) {
	tests := []struct {
		name       string
		rows, cols int
		i, j       []int32
		v          []float64
		sym        Symmetry
		want       error
	}{
		{"row too large", 2, 2, []int32{2}, []int32{0}, []float64{1}, General, ErrIndexRange},
		{"negative column", 2, 2, []int32{0}, []int32{-1}, []float64{1}, General, ErrIndexRange},
		{"negative dimension", -1, 2, nil, nil, nil, General, ErrIndexRange},
		{"symmetric not square", 2, 3, nil, nil, nil, Symmetric, ErrNotSquare},
		{"both triangles", 3, 3, []int32{1, 0}, []int32{0, 2}, []float64{1, 1}, Symmetric, ErrBothTriangles},
		{"skew diagonal", 3, 3, []int32{1}, []int32{1}, []float64{2}, SkewSymmetric, ErrSkewDiagonal},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := FromTriplets(tc.rows, tc.cols, tc.i, tc.j, tc.v, BuildOptions{Symmetry: tc.sym})
			if !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v", err, tc.want)
			}
		})
	}
	// A zero on the diagonal of a skew-symmetric matrix is an explicit zero, not an error.
	if _, st, err := FromTriplets(1, 1, []int32{0}, []int32{0}, []float64{0}, BuildOptions{Symmetry: SkewSymmetric}); err != nil || st.ExplicitZeros != 1 {
		t.Errorf("skew zero diagonal: %v, %+v", err, st)
	}
}

func TestFromTripletsPanicsOnLengths(t *testing.T) {
	defer func() {
		if recover() == nil {
			t.Error("no panic for triplet arrays of different lengths")
		}
	}()
	FromTriplets(2, 2, []int32{0}, []int32{0, 1}, []float64{1}, BuildOptions{})
}

// Blocks give the same result as the joined triplets, and are released.
func TestFromTripletBlocks(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	n, m := 40, 600
	ii, jj, vv := make([]int32, m), make([]int32, m), make([]float64, m)
	for k := range ii {
		r, c := rng.IntN(n), rng.IntN(n)
		if r < c {
			r, c = c, r
		}
		ii[k], jj[k], vv[k] = int32(r), int32(c), rng.NormFloat64()
	}
	want, wst, err := FromTriplets(n, n, ii, jj, vv, BuildOptions{Symmetry: Symmetric})
	if err != nil {
		t.Fatal(err)
	}
	var blocks []Triplets
	for lo := 0; lo < m; lo += 77 {
		hi := min(lo+77, m)
		blocks = append(blocks, Triplets{I: ii[lo:hi], J: jj[lo:hi], V: vv[lo:hi]})
	}
	got, gst, err := FromTripletBlocks(n, n, blocks, BuildOptions{Symmetry: Symmetric})
	if err != nil {
		t.Fatal(err)
	}
	if gst != wst || got.NNZ() != want.NNZ() {
		t.Fatalf("blocks: %+v, %d entries; joined: %+v, %d", gst, got.NNZ(), wst, want.NNZ())
	}
	for p := range want.Val {
		if got.ColIdx[p] != want.ColIdx[p] || math.Float64bits(got.Val[p]) != math.Float64bits(want.Val[p]) {
			t.Fatalf("entry %d differs", p)
		}
	}
	for b := range blocks {
		if blocks[b].I != nil || blocks[b].V != nil {
			t.Fatalf("block %d not released", b)
		}
	}
}

// Large enough to run the assembly on several workers (parallelMin triplets
// each): the result must equal a reference built entry by entry with a map,
// summing duplicates in the order given (so bit for bit), for general and
// symmetric storage, with and without dropping zeros.
func TestFromTripletsParallel(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	n := 3000
	m := 2*parallelMin + 999
	for _, sym := range []Symmetry{General, Symmetric, SkewSymmetric} {
		for _, drop := range []bool{false, true} {
			ii, jj, vv := make([]int32, m), make([]int32, m), make([]float64, m)
			type key struct{ r, c int32 }
			ref := map[key]float64{}
			for k := range ii {
				r, c := int32(rng.IntN(n)), int32(rng.IntN(n/10)) // few columns: many duplicates
				if sym != General && r < c {
					r, c = c, r
				}
				if sym == SkewSymmetric && r == c {
					r++
					if int(r) == n {
						r, c = 1, 0
					}
				}
				x := float64(rng.IntN(5) - 2) // small integers: sums hit zero often
				ii[k], jj[k], vv[k] = r, c, x
				// The first value is taken as it is (so a lone -0 stays -0),
				// later ones are added.
				add := func(k key, x float64) {
					if old, ok := ref[k]; ok {
						x += old
					}
					ref[k] = x
				}
				add(key{r, c}, x)
				if sym != General && r != c {
					if sym == SkewSymmetric {
						x = -x
					}
					add(key{c, r}, x)
				}
			}
			a, st, err := FromTriplets(n, n, ii, jj, vv, BuildOptions{Symmetry: sym, DropZeros: drop})
			if err != nil {
				t.Fatal(err)
			}
			if err := a.Validate(); err != nil {
				t.Fatalf("%v drop=%v: %v", sym, drop, err)
			}
			zeros := 0
			for _, v := range ref {
				if v == 0 {
					zeros++
				}
			}
			want := len(ref)
			if drop {
				want -= zeros
			}
			if a.NNZ() != want || st.ExplicitZeros != zeros {
				t.Fatalf("%v drop=%v: %d entries, %d zeros; want %d, %d", sym, drop, a.NNZ(), st.ExplicitZeros, want, zeros)
			}
			for r := 0; r < n; r++ {
				for p := a.RowPtr[r]; p < a.RowPtr[r+1]; p++ {
					v, ok := ref[key{int32(r), a.ColIdx[p]}]
					if !ok || math.Float64bits(v) != math.Float64bits(a.Val[p]) {
						t.Fatalf("%v drop=%v: a(%d,%d) = %v, want %v (present %v)", sym, drop, r, a.ColIdx[p], a.Val[p], v, ok)
					}
				}
			}
		}
	}
}

// poissonLower returns the lower triangle of the 7-point Laplacian on an n³
// grid as triplets in row order, in blocks of about 50000 (the size of what
// the Matrix Market reader hands over per chunk).
func poissonLower(n int) []Triplets {
	var blocks []Triplets
	var t Triplets
	for z := 0; z < n; z++ {
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				r := int32(x + n*y + n*n*z)
				add := func(c int32, v float64) {
					t.I, t.J, t.V = append(t.I, r), append(t.J, c), append(t.V, v)
				}
				if z > 0 {
					add(r-int32(n*n), -1)
				}
				if y > 0 {
					add(r-int32(n), -1)
				}
				if x > 0 {
					add(r-1, -1)
				}
				add(r, 6)
				if len(t.I) >= 50000 {
					blocks = append(blocks, t)
					t = Triplets{}
				}
			}
		}
	}
	return append(blocks, t)
}

// BenchmarkFromTripletBlocks assembles the 7-point Poisson matrix on a 100³
// grid from its lower triangle; ns/op over the 6.9·10⁶ entries of the
// result gives the cost per entry.
func BenchmarkFromTripletBlocks(b *testing.B) {
	n := 100
	src := poissonLower(n)
	blocks := make([]Triplets, len(src))
	b.ReportAllocs()
	nnz := 0
	for b.Loop() {
		copy(blocks, src)
		a, _, err := FromTripletBlocks(n*n*n, n*n*n, blocks, BuildOptions{Symmetry: Symmetric})
		if err != nil {
			b.Fatal(err)
		}
		nnz = a.NNZ()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(nnz), "ns/entry")
}

// The Assembler gives the result of FromTriplets on the blocks joined, names
// a bad triplet by its index among all blocks, and refuses use after Build.
func TestAssembler(t *testing.T) {
	asm, err := NewAssembler(3, 3, BuildOptions{Symmetry: Symmetric})
	if err != nil {
		t.Fatal(err)
	}
	if err := asm.Add(Triplets{I: []int32{0, 1}, J: []int32{0, 0}, V: []float64{2, -1}}); err != nil {
		t.Fatal(err)
	}
	err = asm.Add(Triplets{I: []int32{2, 0}, J: []int32{2, 2}, V: []float64{1, 5}})
	if !errors.Is(err, ErrBothTriangles) || !strings.Contains(err.Error(), "triplet 3 at (0, 2)") {
		t.Errorf("err = %v, want ErrBothTriangles naming triplet 3", err)
	}

	asm, err = NewAssembler(3, 3, BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, blk := range []Triplets{{I: []int32{2}, J: []int32{1}, V: []float64{4}}, {}, {I: []int32{0, 2}, J: []int32{0, 1}, V: []float64{1, 1}}} {
		if err := asm.Add(blk); err != nil {
			t.Fatal(err)
		}
	}
	a, st, err := asm.Build()
	if err != nil {
		t.Fatal(err)
	}
	if a.NNZ() != 2 || st.Duplicates != 1 || a.At(2, 1) != 5 || a.At(0, 0) != 1 {
		t.Errorf("nnz %d, stats %+v, a(2,1) = %v", a.NNZ(), st, a.At(2, 1))
	}
	for name, f := range map[string]func(){
		"Add after Build": func() { _ = asm.Add(Triplets{}) },
		"Build twice":     func() { _, _, _ = asm.Build() },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			f()
		}()
	}
	if _, err := NewAssembler(2, 3, BuildOptions{Symmetry: SkewSymmetric}); !errors.Is(err, ErrNotSquare) {
		t.Errorf("non-square skew: %v", err)
	}
	// Many rows and few entries: nothing proportional to the rows is
	// allocated before Build (the row counts wait for the data).
	asm, err = NewAssembler(MaxDim, MaxDim, BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if err := asm.Add(Triplets{I: []int32{5}, J: []int32{7}, V: []float64{1}}); err != nil || asm.rowPtr != nil {
		t.Errorf("Add: %v; row counts allocated: %v", err, asm.rowPtr != nil)
	}
}

// A made-up truss of three joints, assembled from its members' contributions
// as a finite-element code would: entries that meet at the same place are
// summed, and one triangle is enough for a symmetric stiffness matrix.
func ExampleFromTriplets() {
	i := []int32{0, 1, 1, 1, 2, 2}
	j := []int32{0, 0, 1, 1, 1, 2}
	v := []float64{2, -1, 1, 1, -1, 1} // joint 1 gets 1 from each of its two members
	a, stats, err := FromTriplets(3, 3, i, j, v, BuildOptions{Symmetry: Symmetric})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println("row pointers:", a.RowPtr)
	fmt.Println("columns:     ", a.ColIdx)
	fmt.Println("values:      ", a.Val)
	fmt.Println("duplicates summed:", stats.Duplicates)
	// Output:
	// row pointers: [0 2 5 7]
	// columns:      [0 1 0 1 2 1 2]
	// values:       [2 -1 -1 2 -1 -1 1]
	// duplicates summed: 1
}
