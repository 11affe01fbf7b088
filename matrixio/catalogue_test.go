package matrixio

import (
	"errors"
	"io"
	"math"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
)

// catalogue is the folder of small malformed and lenient inputs.
var catalogue = filepath.Join("..", "testdata", "mm")

// TestMalformed reads each file of the malformed-input catalogue and checks
// the *ParseError: file, line and reason. The rules come from the format
// definition (Boisvert, Pozo, Remington, "The Matrix Market Exchange Formats:
// Initial Design", NIST 1996): the banner's five words and their allowed
// values (§2), the size line of each format (§3), 1-based indices, one
// entry per line, the count given by the size line, and for symmetric and
// skew-symmetric files only the lower triangle (skew: strictly lower). Where
// the paper is silent (NaN and Inf, entries in both triangles, limits) the
// rule is residua's, stated in the package documentation.
func TestMalformed(t *testing.T) {
	maxEntries := &Options{Limits: Limits{MaxEntries: 1_000_000}}
	maxRows := &Options{Limits: Limits{MaxRows: 1_000_000}}
	maxBytes := &Options{Limits: Limits{MaxBytes: 100}}
	tests := []struct {
		file   string
		vector bool // read with ReadVectorFile
		opt    *Options
		line   int
		col    int // 0: not checked
		want   error
	}{
		{file: "banner-missing.mtx", line: 1, col: 1, want: ErrBanner},
		{file: "banner-misspelt.mtx", line: 1, col: 1, want: ErrBanner},
		{file: "banner-four-words.mtx", line: 1, want: ErrBanner},
		{file: "banner-six-words.mtx", line: 1, want: ErrBanner},
		{file: "object-tensor.mtx", line: 1, col: 16, want: ErrObject},
		{file: "format-sparse.mtx", line: 1, col: 23, want: ErrFormat},
		{file: "field-float.mtx", line: 1, col: 34, want: ErrField},
		{file: "field-complex.mtx", line: 1, col: 34, want: ErrComplex},
		{file: "symmetry-hermitian.mtx", line: 1, col: 39, want: ErrComplex},
		{file: "symmetry-unknown.mtx", line: 1, col: 39, want: ErrSymmetry},
		{file: "array-pattern.mtx", line: 1, want: ErrField},
		{file: "skew-pattern.mtx", line: 1, want: ErrSymmetry},
		{file: "empty.mtx", line: 1, want: io.ErrUnexpectedEOF},
		{file: "no-size-line.mtx", line: 4, want: io.ErrUnexpectedEOF},
		{file: "size-two-words.mtx", line: 3, want: ErrSizeLine},
		{file: "size-negative.mtx", line: 2, col: 1, want: ErrSizeLine},
		{file: "size-word.mtx", line: 2, col: 3, want: ErrSizeLine},
		{file: "size-not-square-symmetric.mtx", line: 2, want: ErrSizeLine},
		{file: "size-too-many-rows.mtx", line: 2, col: 1, want: ErrSizeLine},
		{file: "entries-truncated.mtx", line: 5, want: io.ErrUnexpectedEOF},
		{file: "entries-too-many.mtx", line: 5, want: ErrEntryCount},
		{file: "index-zero.mtx", line: 4, col: 1, want: ErrIndexRange},
		{file: "row-out-of-range.mtx", line: 4, col: 1, want: ErrIndexRange},
		{file: "column-out-of-range.mtx", line: 5, col: 3, want: ErrIndexRange},
		{file: "index-negative.mtx", line: 3, col: 1, want: ErrValue},
		{file: "index-decimal.mtx", line: 3, col: 1, want: ErrValue},
		{file: "value-nan.mtx", line: 4, col: 5, want: ErrNotFinite},
		{file: "value-inf.mtx", line: 4, col: 5, want: ErrNotFinite},
		{file: "value-overflow.mtx", line: 4, col: 5, want: ErrNotFinite},
		{file: "value-word.mtx", line: 4, col: 5, want: ErrValue},
		{file: "value-hex.mtx", line: 3, col: 5, want: ErrValue},
		{file: "value-missing.mtx", line: 4, want: ErrEntryFields},
		{file: "value-extra.mtx", line: 4, col: 7, want: ErrEntryFields},
		{file: "pattern-with-value.mtx", line: 3, col: 5, want: ErrEntryFields},
		{file: "integer-decimal.mtx", line: 3, col: 5, want: ErrValue},
		{file: "integer-overflow.mtx", line: 4, col: 5, want: ErrValue},
		{file: "symmetric-both-triangles.mtx", line: 5, want: ErrBothTriangles},
		{file: "skew-diagonal.mtx", line: 4, want: ErrSkewDiagonal},
		{file: "array-too-few.mtx", line: 6, want: io.ErrUnexpectedEOF},
		{file: "array-too-many.mtx", line: 7, want: ErrEntryCount},
		{file: "array-two-values.mtx", line: 3, col: 3, want: ErrEntryFields},
		{file: "comment-in-data.mtx", line: 5, col: 1, want: ErrValue},
		{file: "huge-claim.mtx", opt: maxEntries, line: 8, want: ErrLimit},
		// Without a limit the claim costs nothing either: storage grows with
		// the entries actually read, and the file ends 10^12 - 2 entries early.
		{file: "huge-claim.mtx", line: 11, want: io.ErrUnexpectedEOF},
		{file: "huge-rows.mtx", opt: maxRows, line: 2, col: 1, want: ErrLimit},
		{file: "long-input.mtx", opt: maxBytes, line: 5, want: ErrLimit},
		{file: "vector-of-matrix.mtx", vector: true, line: 2, want: ErrShape},
		{file: "vector-symmetric.mtx", vector: true, line: 1, want: ErrSymmetry},
		// gzip cut in the middle of the data: the reader reports the line
		// where the text broke off. Python's zlib (decompressobj(31)) gets
		// 96 complete lines out of this file and a part of line 97.
		{file: "truncated.mtx.gz", line: 97, want: io.ErrUnexpectedEOF},
		// All 200 entries arrive, but the gzip trailer (CRC-32 and length,
		// RFC 1952 §2.3) is missing: still an error, after the last line.
		{file: "truncated-trailer.mtx.gz", line: 203, want: io.ErrUnexpectedEOF},
	}
	for _, tc := range tests {
		name := tc.file
		if tc.opt != nil {
			name += "/limit"
		}
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(catalogue, tc.file)
			var err error
			if tc.vector {
				_, _, err = ReadVectorFile(path, tc.opt)
			} else {
				_, _, err = ReadMatrixFile(path, tc.opt)
			}
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("err = %v (%T), want a *ParseError", err, err)
			}
			if pe.File != path || pe.Line != tc.line || (tc.col != 0 && pe.Column != tc.col) || !errors.Is(err, tc.want) {
				t.Errorf("got %s:%d:%d %v\nwant %s:%d:%d %v", pe.File, pe.Line, pe.Column, pe.Err, path, tc.line, tc.col, tc.want)
			}
			t.Log(err)
		})
	}
}

// TestLenient reads the valid files of the catalogue, which use the freedoms
// the format allows (Boisvert, Pozo, Remington, NIST 1996): keywords in any
// case, blanks and blank lines, CRLF, comments before the size line, no
// final newline, D exponents of Fortran output; and the value conventions:
// duplicates summed, symmetric and skew-symmetric arrays as the lower
// triangle by columns, pattern values 1, upper-triangle symmetric storage.
func TestLenient(t *testing.T) {
	tests := []struct {
		file        string
		dense       [][]float64
		dups, zeros int
		header      Header
	}{
		{file: "ok-lenient.mtx", dense: [][]float64{{1.5, 0, 0}, {0, -2, 0}, {7, 0, 0}}, header: Header{"matrix", "coordinate", "real", "general"}},
		{file: "ok-no-final-newline.mtx", dense: [][]float64{{0, 0}, {0, 2.5}}},
		{file: "ok-duplicates.mtx", dense: [][]float64{{2.5, 0}, {0, 0}}, dups: 2, zeros: 1},
		{file: "ok-skew-array.mtx", dense: [][]float64{{0, -1, -2}, {1, 0, -3}, {2, 3, 0}}, zeros: 3},
		{file: "ok-symmetric-array.mtx", dense: [][]float64{{1, 2, 3}, {2, 4, 5}, {3, 5, 6}}, header: Header{"matrix", "array", "integer", "symmetric"}},
		{file: "ok-vector-coordinate.mtx", dense: [][]float64{{-0.15}, {0}, {0}, {101}}, dups: 1},
		{file: "ok-pattern-symmetric.mtx", dense: [][]float64{{1, 0, 1}, {0, 0, 1}, {1, 1, 0}}},
		{file: "ok-upper-symmetric.mtx", dense: [][]float64{{0, 5, 6}, {5, 1, 0}, {6, 0, 0}}},
	}
	for _, tc := range tests {
		t.Run(tc.file, func(t *testing.T) {
			a, info, err := ReadMatrixFile(filepath.Join(catalogue, tc.file), nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := a.Validate(); err != nil {
				t.Fatal(err)
			}
			if a.Rows != len(tc.dense) || a.Cols != len(tc.dense[0]) {
				t.Fatalf("%d×%d, want %d×%d", a.Rows, a.Cols, len(tc.dense), len(tc.dense[0]))
			}
			for i, row := range tc.dense {
				for j, want := range row {
					if got := a.At(i, j); got != want {
						t.Errorf("a(%d,%d) = %v, want %v", i+1, j+1, got, want)
					}
				}
			}
			if info.Duplicates != tc.dups || info.ExplicitZeros != tc.zeros {
				t.Errorf("%d duplicates, %d explicit zeros; want %d, %d", info.Duplicates, info.ExplicitZeros, tc.dups, tc.zeros)
			}
			if tc.header != (Header{}) && info.Header != tc.header {
				t.Errorf("header %+v, want %+v", info.Header, tc.header)
			}
		})
	}
	// The comments before the size line are kept without their '%'.
	_, info, err := ReadMatrixFile(filepath.Join(catalogue, "ok-lenient.mtx"), nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(info.Comments) != 2 || info.Comments[0] != " comment" || info.Comments[1] != " indented comment" {
		t.Errorf("comments %q", info.Comments)
	}
	// DropZeros removes the explicit zero that the duplicates left.
	a, info, err := ReadMatrixFile(filepath.Join(catalogue, "ok-duplicates.mtx"), &Options{DropZeros: true})
	if err != nil || a.NNZ() != 1 || info.Nonzeros != 1 {
		t.Errorf("DropZeros: %v, %d entries", err, info.Nonzeros)
	}
	// The coordinate vector as a vector: duplicates summed, absent entries 0.
	x, info, err := ReadVectorFile(filepath.Join(catalogue, "ok-vector-coordinate.mtx"), nil)
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{-0.15, 0, 0, 101}
	for i := range want {
		if x[i] != want[i] {
			t.Fatalf("x = %v, want %v", x, want)
		}
	}
	if info.Duplicates != 1 || info.Nonzeros != 2 {
		t.Errorf("vector: %d duplicates, %d nonzeros; want 1, 2", info.Duplicates, info.Nonzeros)
	}
	if math.Signbit(x[1]) {
		t.Errorf("absent entry is -0")
	}
	// A vector object in array format (the paper's "vector" object, size
	// line "n"), as a vector and as an n×1 matrix.
	x, info, err = ReadVectorFile(filepath.Join(catalogue, "ok-vector-array.mtx"), nil)
	if err != nil || len(x) != 3 || x[0] != 1.5 || x[1] != -2 || x[2] != 0 || info.Header.Object != "vector" {
		t.Errorf("vector array: %v, %+v, %v", x, info.Header, err)
	}
	a, _, err = ReadMatrixFile(filepath.Join(catalogue, "ok-vector-array.mtx"), nil)
	if err != nil || a.Rows != 3 || a.Cols != 1 || a.At(1, 0) != -2 {
		t.Errorf("vector array as a matrix: %v", err)
	}
}

// A short file that claims a huge matrix costs nothing: without any limit,
// reading huge-claim.mtx (10^12 entries claimed, 2 present) and files of
// 2·10^9 rows whose data end early allocate only the fixed buffers (about
// 140 KB for a stream, 1.1 MB with ReadMatrixFile's file buffers, measured
// with runtime.MemStats.TotalAlloc), nothing that grows with the claim.
func TestHugeClaimsCostNothing(t *testing.T) {
	texts := map[string]string{
		"huge-claim.mtx": "",
		"rows":           "%%MatrixMarket matrix coordinate real general\n2000000000 2000000000 5\n1 1 1\n",
		"array":          "%%MatrixMarket matrix array real general\n2000000000 2000000000\n1\n",
	}
	for name, text := range texts {
		var err error
		var ms0, ms1 runtime.MemStats
		runtime.ReadMemStats(&ms0)
		if text == "" {
			_, _, err = ReadMatrixFile(filepath.Join(catalogue, name), nil)
		} else {
			_, _, err = ReadMatrix(strings.NewReader(text), nil)
		}
		runtime.ReadMemStats(&ms1)
		if !errors.Is(err, io.ErrUnexpectedEOF) {
			t.Errorf("%s: err = %v, want io.ErrUnexpectedEOF", name, err)
		}
		// Fixed costs: the 64 KiB line buffer, a first chunk of 64 KiB and
		// the file's read buffers (2 MiB for ReadMatrixFile).
		t.Logf("%s: %d bytes allocated", name, ms1.TotalAlloc-ms0.TotalAlloc)
		if got := ms1.TotalAlloc - ms0.TotalAlloc; got > 3<<20 {
			t.Errorf("%s: allocated %d bytes", name, got)
		}
	}
}
