package matrixio

import (
	"errors"
	"strings"
	"testing"
)

// TestMostlyEmpty: the size-line rule of Limits.RefuseMostlyEmpty and the
// Admit hook. Each entry fills at most one row and one column (after
// symmetric expansion, two), so rows or columns > 2 × entries leave more
// than half of them empty: the rule of MostlyEmpty (our own choice).
func TestMostlyEmpty(t *testing.T) {
	tests := []struct {
		name, text string
		refused    bool
	}{
		{"the issue's 72 bytes", "%%MatrixMarket matrix coordinate real general\n50000000 50000000 1\n1 1 1\n", true},
		{"rows twice the entries", "%%MatrixMarket matrix coordinate real general\n4 4 2\n1 1 1\n2 2 1\n", false},
		{"rows over twice the entries", "%%MatrixMarket matrix coordinate real general\n5 5 2\n1 1 1\n2 2 1\n", true},
		{"wide", "%%MatrixMarket matrix coordinate real general\n1 9 4\n1 1 1\n1 2 1\n1 3 1\n1 4 1\n", true},
		{"symmetric storage counts twice", "%%MatrixMarket matrix coordinate real symmetric\n4 4 1\n2 1 1\n", false},
		{"dense array files are exempt", "%%MatrixMarket matrix array real general\n2 1\n0\n0\n", false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := ReadMatrix(strings.NewReader(tc.text), &Options{Limits: Limits{RefuseMostlyEmpty: true}})
			var pe *ParseError
			if got := errors.Is(err, ErrMostlyEmpty); got != tc.refused {
				t.Fatalf("refused = %v (%v), want %v", got, err, tc.refused)
			}
			if tc.refused && (!errors.As(err, &pe) || pe.Line != 2) {
				t.Errorf("error %v: want a ParseError at the size line (2)", err)
			}
			// Without the limit every one of them reads: empty rows are legal.
			if !strings.HasPrefix(tc.name, "the issue") {
				if _, _, err := ReadMatrix(strings.NewReader(tc.text), nil); err != nil {
					t.Errorf("without the limit: %v", err)
				}
			}
		})
	}
}

// TestAdmit: the hook sees the size line before the entries are read, with
// the stored bound after symmetric expansion, and its refusal ends the
// read at the size line, wrapping its error.
func TestAdmit(t *testing.T) {
	text := "%%MatrixMarket matrix coordinate real symmetric\n% a comment\n3 3 2\n1 1 4\n3 1 1\n"
	var seen Size
	if _, _, err := ReadMatrix(strings.NewReader(text), &Options{Admit: func(s Size) error { seen = s; return nil }}); err != nil {
		t.Fatal(err)
	}
	if want := (Size{Rows: 3, Cols: 3, Entries: 2, Stored: 4, Coordinate: true}); seen != want {
		t.Errorf("Admit saw %+v, want %+v", seen, want)
	}
	full := errors.New("no room")
	_, _, err := ReadMatrix(strings.NewReader(text), &Options{Admit: func(Size) error { return full }})
	var pe *ParseError
	if !errors.Is(err, full) || !errors.As(err, &pe) || pe.Line != 3 {
		t.Errorf("refused: %v, want a ParseError at line 3 wrapping the hook's error", err)
	}
}
