package precond

import (
	"errors"
	"strings"
	"testing"

	"github.com/residua/residua/sparse"
)

func TestParseKind(t *testing.T) {
	for _, k := range Kinds {
		got, err := ParseKind(string(k))
		if err != nil || got != k {
			t.Errorf("ParseKind(%q) = %q, %v", k, got, err)
		}
	}
	for _, s := range []string{"", "IC0", "ilu", "jacobi "} {
		if _, err := ParseKind(s); err == nil {
			t.Errorf("ParseKind(%q) accepted", s)
		}
	}
}

func TestNew(t *testing.T) {
	poisson := laplace(8, 8, 8)
	diag := csrFromDense([][]float64{{2, 0}, {0, 5}})
	dominant := csrFromDense([][]float64{{4, 1, 0}, {1, 4, -1}, {0, -1, 4}})
	for _, tc := range []struct {
		name   string
		a      *sparse.CSR
		kind   Kind
		want   Kind
		reason string // prefix
	}{
		{"none", poisson, KindNone, KindNone, "none: as requested"},
		{"jacobi", poisson, KindJacobi, KindJacobi, "jacobi: as requested"},
		{"ic0", poisson, KindIC0, KindIC0, "ic0: as requested; factorization succeeded with shift 0 after 1 try"},
		{"ic0-kershaw", kershaw(), KindIC0, KindIC0, "ic0: as requested; factorization succeeded with shift 1 after 5 tries"},
		{"auto-poisson", poisson, KindAuto, KindIC0, "ic0: factorization succeeded with shift 0"},
		{"auto-diagonal", diag, KindAuto, KindJacobi, "jacobi: the matrix is diagonal"},
		{"auto-dominant", dominant, KindAuto, KindJacobi, "jacobi: every row is diagonally dominant (off-diagonal sum ≤ 0.5 × diagonal), so the Jacobi-preconditioned condition number is at most 3"},
		{"auto-kershaw", kershaw(), KindAuto, KindNone, "none: ic0 broke down at every shift up to 0.1 (4 tries; last pivot -0.802 at row 4), so it would approximate A poorly, and the diagonal is nearly constant (largest/smallest = 1)"},
		{"auto-kershaw-scaled", scaledKershaw(), KindAuto, KindJacobi, "jacobi: ic0 broke down at every shift up to 0.1 (4 tries; last pivot"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c, err := New(tc.a, tc.kind)
			if err != nil {
				t.Fatal(err)
			}
			if c.Kind != tc.want || !strings.HasPrefix(c.Reason, tc.reason) {
				t.Errorf("got %s %q, want %s %q", c.Kind, c.Reason, tc.want, tc.reason)
			}
			if (c.M == nil) != (c.Kind == KindNone) {
				t.Errorf("M = %v for kind %s", c.M, c.Kind)
			}
			if c.Kind != KindNone && (c.Bytes <= 0 || c.Setup <= 0) {
				t.Errorf("Bytes %d, Setup %v", c.Bytes, c.Setup)
			}
		})
	}
}

func TestNewErrors(t *testing.T) {
	neg := csrFromDense([][]float64{{1, 0}, {0, -1}})
	for _, k := range []Kind{KindJacobi, KindIC0, KindAuto} {
		_, err := New(neg, k)
		var de *DiagonalError
		if !errors.As(err, &de) || de.Row != 1 {
			t.Errorf("%s: got %v, want a *DiagonalError for row 1", k, err)
		}
	}
	if c, err := New(neg, KindNone); err != nil || c.M != nil {
		t.Errorf("none on a bad diagonal: %v, %v", c, err)
	}
	if _, err := New(neg, "ilu"); err == nil {
		t.Error("unknown kind accepted")
	}
	// Plain IC(0) with too few tries on Kershaw's matrix reports the
	// breakdown rather than falling back.
	if _, err := NewIC0(kershaw(), IC0Options{MaxTries: 2}); !errors.Is(err, ErrBreakdown) {
		t.Errorf("got %v, want ErrBreakdown", err)
	}
}

// scaledKershaw is S·K·S with K Kershaw's matrix and S = diag(1, 10², 10⁴,
// 10⁶): IC(0) of S·K·S is S times IC(0) of K (the recurrences scale
// row by row), so it needs the same shift, but its diagonal spans 12
// orders of magnitude.
func scaledKershaw() *sparse.CSR {
	a := kershaw()
	s := []float64{1, 1e2, 1e4, 1e6}
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			a.Val[p] *= s[i] * s[a.ColIdx[p]]
		}
	}
	return a
}

func TestEmptyMatrix(t *testing.T) {
	a := &sparse.CSR{RowPtr: []int{0}}
	for _, k := range Kinds {
		c, err := New(a, k)
		if err != nil {
			t.Fatalf("%s: %v", k, err)
		}
		if c.M != nil {
			c.M.Precondition(nil, nil)
		}
	}
}
