package precond

import (
	"errors"
	"math"
	"testing"

	"github.com/residua/residua/sparse"
)

type diagonalCase struct {
	name   string
	a      *sparse.CSR
	row    int // 0-based
	reason error
}

func diagonalCases() []diagonalCase {
	return []diagonalCase{
		{"zero", csrFromTriplets(3, []int{0, 1, 1, 2}, []int{0, 1, 2, 2}, []float64{1, 0, 0.5, 2}), 1, ErrZeroDiagonal},
		{"missing", csrFromDense([][]float64{{2, 1, 0}, {1, 3, 1}, {0, 1, 0}}), 2, ErrMissingDiagonal},
		{"negative", csrFromDense([][]float64{{-2, 1}, {1, 3}}), 0, ErrNegativeDiagonal},
		{"nan", csrFromDense([][]float64{{2, 0}, {0, math.NaN()}}), 1, ErrNotFiniteDiagonal},
	}
}

func checkDiagonalError(t *testing.T, err error, row int, reason error) {
	t.Helper()
	var de *DiagonalError
	if !errors.As(err, &de) || !errors.Is(err, reason) {
		t.Fatalf("got %v, want a *DiagonalError wrapping %v", err, reason)
	}
	if de.Row != row {
		t.Errorf("error names row %d (0-based), want %d", de.Row, row)
	}
	// The message counts rows from 1, as the Matrix Market file does
	// (Boisvert, Pozo and Remington, NIST, 1996: indices are 1-based).
	want := "row " + itoa(row+1) + ":"
	if !contains(err.Error(), want) {
		t.Errorf("message %q does not name %q", err.Error(), want)
	}
}

func TestJacobiDefinition(t *testing.T) {
	// Jacobi preconditioning is M = diag(A) (Saad, 2nd ed., §10.2), so
	// M⁻¹·r divides r by A's diagonal entry by entry.
	a := randomSPD(50, 6, 5)
	j, err := NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	r := make([]float64, a.Rows)
	for i := range r {
		r[i] = float64(i) - 20.5
	}
	z := make([]float64, a.Rows)
	j.Precondition(z, r)
	for i := range z {
		var d float64
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			if int(a.ColIdx[p]) == i {
				d = a.Val[p]
			}
		}
		// One division against one multiplication by the rounded
		// reciprocal: within 2 ulps.
		if want := r[i] / d; math.Abs(z[i]-want) > 2*0x1p-52*math.Abs(want) {
			t.Fatalf("z[%d] = %.17g, r/d = %.17g", i, z[i], want)
		}
	}
	if j.Bytes() != int64(8*a.Rows) {
		t.Errorf("Bytes = %d, want %d", j.Bytes(), 8*a.Rows)
	}
}

func TestJacobiRefusesDiagonal(t *testing.T) {
	for _, tc := range diagonalCases() {
		t.Run(tc.name, func(t *testing.T) {
			_, err := NewJacobi(tc.a)
			checkDiagonalError(t, err, tc.row, tc.reason)
		})
	}
	t.Run("message", func(t *testing.T) {
		_, err := NewJacobi(diagonalCases()[0].a)
		if got, want := err.Error(), "precond: row 2: diagonal entry is zero (0)"; got != want {
			t.Errorf("message %q, want %q", got, want)
		}
	})
	t.Run("not-square", func(t *testing.T) {
		a := &sparse.CSR{Rows: 2, Cols: 3, RowPtr: []int{0, 0, 0}}
		if _, err := NewJacobi(a); !errors.Is(err, ErrNotSquare) {
			t.Errorf("got %v, want ErrNotSquare", err)
		}
	})
}
