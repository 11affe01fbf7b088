package sparse

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// denseOf reads the arrays directly into a gonum dense matrix, independently
// of At.
func denseOf(a *CSR) *mat.Dense {
	d := mat.NewDense(max(a.Rows, 1), max(a.Cols, 1), nil)
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			d.Set(i, int(a.ColIdx[p]), a.Val[p])
		}
	}
	return d
}

// TestMatrixMethods checks At, T, Transpose, Diagonal, Lower and Upper
// entry by entry against the dense copy of the arrays (the definitions:
// Aᵀ(i, j) = A(j, i), the triangles keep j ≤ i and j ≥ i).
func TestMatrixMethods(t *testing.T) {
	for _, tc := range conformanceCases() {
		a := tc.a
		if a.Rows == 0 || a.Cols == 0 {
			continue
		}
		t.Run(tc.name, func(t *testing.T) {
			d := denseOf(a)
			r, c := a.Dims()
			if r != a.Rows || c != a.Cols {
				t.Fatalf("Dims = %d, %d", r, c)
			}
			tr := a.Transpose()
			if err := tr.Validate(); err != nil {
				t.Fatal(err)
			}
			lo, up := a.Lower(), a.Upper()
			for _, m := range []*CSR{lo, up} {
				if err := m.Validate(); err != nil {
					t.Fatal(err)
				}
			}
			// gonum's own copy through the mat.Matrix interface.
			gd := mat.DenseCopyOf(a)
			gt := mat.DenseCopyOf(a.T())
			diag := a.Diagonal(nil)
			for i := 0; i < r; i++ {
				for j := 0; j < c; j++ {
					v := d.At(i, j)
					if a.At(i, j) != v || gd.At(i, j) != v || gt.At(j, i) != v || tr.At(j, i) != v {
						t.Fatalf("entry (%d,%d): At %v, gonum copy %v, T %v, Transpose %v, want %v",
							i, j, a.At(i, j), gd.At(i, j), gt.At(j, i), tr.At(j, i), v)
					}
					wantLo, wantUp := 0.0, 0.0
					if j <= i {
						wantLo = v
					}
					if j >= i {
						wantUp = v
					}
					if lo.At(i, j) != wantLo || up.At(i, j) != wantUp {
						t.Fatalf("entry (%d,%d): Lower %v, Upper %v, A %v", i, j, lo.At(i, j), up.At(i, j), v)
					}
					if i == j && diag[i] != v {
						t.Fatalf("Diagonal[%d] = %v, want %v", i, diag[i], v)
					}
				}
			}
			if lo.NNZ()+up.NNZ() != a.NNZ()+countDiag(a) {
				t.Fatalf("Lower %d + Upper %d entries, A %d with %d on the diagonal", lo.NNZ(), up.NNZ(), a.NNZ(), countDiag(a))
			}
			// Bytes: 8 per row pointer, 4 per column index, 8 per value.
			if want := int64(8*(a.Rows+1) + 12*a.NNZ()); a.Bytes() != want {
				t.Fatalf("Bytes = %d, want %d", a.Bytes(), want)
			}
			// Diagonal into a given slice, overwriting garbage.
			dst := randVec(min(r, c), 4)
			a.Diagonal(dst)
			sameBits(t, "Diagonal(dst)", dst, diag)
		})
	}
}

func countDiag(a *CSR) int {
	n := 0
	for i := 0; i < min(a.Rows, a.Cols); i++ {
		if a.find(i, i) >= 0 {
			n++
		}
	}
	return n
}

// TestTransposeCache checks that MulVecTrans keeps one transpose per
// matrix, recognises an exactly symmetric matrix as its own transpose, and
// notices new arrays.
func TestTransposeCache(t *testing.T) {
	g := randCSR(40, 30, 0.2, true, 1)
	x := randVec(40, 2)
	y := make([]float64, 30)
	g.MulVecTrans(y, x)
	t1 := g.cachedTranspose()
	if t1 == nil || t1 != g.cachedTranspose() {
		t.Fatal("transpose of a rectangular matrix not kept")
	}
	// Replace the values with new arrays: the cache must rebuild.
	g.Val = randVec(g.NNZ(), 3)
	g.MulVecTrans(y, x)
	sameBits(t, "after new Val", y, refMulVecTrans(g, x))
	if got, want := g.TransposeBytes(), g.cachedTranspose().Bytes(); got != want {
		t.Fatalf("TransposeBytes = %d, want the transpose's %d", got, want)
	}
	g.ForgetTranspose()
	if g.TransposeBytes() != 0 || g.memo.transOf != (arrays{}) || g.memo.trusted != (arrays{}) {
		t.Fatal("ForgetTranspose left the transpose or the trust behind")
	}

	s := randBanded(50, 2, 4)
	sym := s.Transpose() // make it symmetric: S + Sᵀ
	for i := 0; i < s.Rows; i++ {
		for p := s.RowPtr[i]; p < s.RowPtr[i+1]; p++ {
			sym.Val[p] += s.Val[p]
		}
	}
	sym.trust("test")
	if sym.cachedTranspose() != nil || sym.TransposeBytes() != 0 {
		t.Fatal("exactly symmetric matrix not used as its own transpose")
	}
}

// ColumnNorms against the definition ‖A(:, j)‖₂ computed through gonum's
// dense column view (mat.Col and floats.Norm), including an empty column.
func TestColumnNorms(t *testing.T) {
	a := &CSR{Rows: 3, Cols: 4, RowPtr: []int{0, 2, 3, 5}, ColIdx: []int32{0, 2, 2, 0, 3}, Val: []float64{3, -1, 2, 4, 0.5}}
	got := make([]float64, 4)
	a.ColumnNorms(got)
	for j := range got {
		want := floats.Norm(mat.Col(nil, j, a), 2)
		if math.Abs(got[j]-want) > 1e-15*want {
			t.Errorf("column %d: norm %v, want %v", j, got[j], want)
		}
	}
	if got[1] != 0 {
		t.Errorf("empty column 1: norm %v, want 0", got[1])
	}
}
