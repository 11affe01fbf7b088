package sparse

import (
	"errors"
	"testing"
)

// Validate must reject every way the CSR invariants documented on the type
// can fail, with ErrInvalidCSR, and never panic on inconsistent arrays.
func TestValidate(t *testing.T) {
	tests := []struct {
		name string
		a    CSR
		ok   bool
	}{
		{"good 2×3", CSR{Rows: 2, Cols: 3, RowPtr: []int{0, 2, 3}, ColIdx: []int32{0, 2, 1}, Val: []float64{1, 2, 3}}, true},
		{"empty", CSR{Rows: 0, Cols: 0, RowPtr: []int{0}}, true},
		{"negative rows", CSR{Rows: -1, RowPtr: []int{0}}, false},
		{"short row pointers", CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 1}, ColIdx: []int32{0}, Val: []float64{1}}, false},
		{"first pointer not zero", CSR{Rows: 1, Cols: 2, RowPtr: []int{1, 1}}, false},
		{"lengths disagree", CSR{Rows: 1, Cols: 2, RowPtr: []int{0, 2}, ColIdx: []int32{0, 1}, Val: []float64{1}}, false},
		{"pointer decreases", CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 2, 1}, ColIdx: []int32{0}, Val: []float64{1}}, false},
		{"pointer past the entries", CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 3, 1}, ColIdx: []int32{0}, Val: []float64{1}}, false},
		{"column out of range", CSR{Rows: 1, Cols: 2, RowPtr: []int{0, 1}, ColIdx: []int32{2}, Val: []float64{1}}, false},
		{"negative column", CSR{Rows: 1, Cols: 2, RowPtr: []int{0, 1}, ColIdx: []int32{-1}, Val: []float64{1}}, false},
		{"columns not increasing", CSR{Rows: 1, Cols: 3, RowPtr: []int{0, 2}, ColIdx: []int32{1, 1}, Val: []float64{1, 2}}, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := tt.a.Validate()
			if tt.ok && err != nil {
				t.Fatalf("Validate() = %v, want nil", err)
			}
			if !tt.ok && !errors.Is(err, ErrInvalidCSR) {
				t.Fatalf("Validate() = %v, want an ErrInvalidCSR error", err)
			}
		})
	}
}
