package matrixio

import (
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestEntryCountOffByOne is the off-by-one catalogue of the entry count: a
// file exactly one entry short of its size line and one exactly one entry
// past it, for coordinate and array files, plain and gzipped.
//
// The Matrix Market definition (Boisvert, Pozo, Remington, "The Matrix
// Market Exchange Formats: Initial Design", NIST 1996, §3 "coordinate
// format": the size line gives "the number of rows, columns and nonzero
// entries", followed by exactly that many entry lines; "array format": the
// size line gives rows and columns and exactly rows·columns values follow,
// by columns) makes both cases malformed. A short file is a truncated file,
// io.ErrUnexpectedEOF reported on the line after the last one; an extra
// entry is ErrEntryCount on the line of the first entry too many. Blank
// lines are not entries (the paper's data lines each hold one entry), so a
// short file padded with blank lines is still short.
//
// Each case is also read with its size line corrected to the number of
// entries present: that file must read, so the error above comes from the
// count and nothing else in the file.
func TestEntryCountOffByOne(t *testing.T) {
	tests := []struct {
		file    string
		line    int
		want    error
		present int    // entries (coordinate) or values (array) in the file
		fixed   string // the size line with the count of entries present
		nnz     int    // stored entries of the corrected file's full matrix
	}{
		{file: "count-coordinate-short.mtx", line: 7, want: io.ErrUnexpectedEOF, present: 3, fixed: "3 3 3", nnz: 3},
		{file: "count-coordinate-short.mtx.gz", line: 7, want: io.ErrUnexpectedEOF, present: 3, fixed: "3 3 3", nnz: 3},
		{file: "count-coordinate-short-blank.mtx", line: 9, want: io.ErrUnexpectedEOF, present: 3, fixed: "3 3 3", nnz: 3},
		{file: "count-symmetric-short.mtx", line: 6, want: io.ErrUnexpectedEOF, present: 2, fixed: "3 3 2", nnz: 3},
		{file: "count-coordinate-extra.mtx", line: 8, want: ErrEntryCount, present: 5, fixed: "3 3 5", nnz: 5},
		{file: "count-coordinate-extra.mtx.gz", line: 8, want: ErrEntryCount, present: 5, fixed: "3 3 5", nnz: 5},
		{file: "count-array-short.mtx", line: 9, want: io.ErrUnexpectedEOF, present: 5, fixed: "5 1", nnz: 5},
		{file: "count-array-short.mtx.gz", line: 9, want: io.ErrUnexpectedEOF, present: 5, fixed: "5 1", nnz: 5},
		{file: "count-array-extra.mtx", line: 10, want: ErrEntryCount, present: 7, fixed: "7 1", nnz: 7},
		{file: "count-array-extra.mtx.gz", line: 10, want: ErrEntryCount, present: 7, fixed: "7 1", nnz: 7},
	}
	for _, tc := range tests {
		t.Run(tc.file, func(t *testing.T) {
			path := filepath.Join(catalogue, tc.file)
			_, _, err := ReadMatrixFile(path, nil)
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("err = %v (%T), want a *ParseError", err, err)
			}
			if pe.File != path || pe.Line != tc.line || !errors.Is(err, tc.want) {
				t.Errorf("got %s:%d %v\nwant %s:%d %v", pe.File, pe.Line, pe.Err, path, tc.line, tc.want)
			}
			// The same text as a stream, without the file loader.
			text := catalogueText(t, path)
			_, _, err = ReadMatrix(bytes.NewReader(text), nil)
			if !errors.As(err, &pe) || pe.Line != tc.line || !errors.Is(err, tc.want) {
				t.Errorf("as a stream: %v, want line %d %v", err, tc.line, tc.want)
			}
			// The control: the size line corrected to what is present.
			lines := strings.Split(string(text), "\n")
			lines[2] = tc.fixed // banner, one comment, then the size line
			a, info, err := ReadMatrix(strings.NewReader(strings.Join(lines, "\n")), nil)
			if err != nil {
				t.Fatalf("with the size line %q: %v", tc.fixed, err)
			}
			if info.Entries != tc.present || a.NNZ() != tc.nnz {
				t.Errorf("with the size line %q: %d entries, %d stored; want %d, %d", tc.fixed, info.Entries, a.NNZ(), tc.present, tc.nnz)
			}
			if a.Validate() != nil {
				t.Errorf("with the size line %q: invalid CSR", tc.fixed)
			}
		})
	}
}

// catalogueText returns a catalogue file's text, gunzipped if it ends in .gz.
func catalogueText(t *testing.T, path string) []byte {
	t.Helper()
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasSuffix(path, ".gz") {
		return raw
	}
	zr, err := gzip.NewReader(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	text, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	return text
}

// TestEntryCountOffByOneAcrossChunks repeats the off-by-one cases on inputs
// of several megabytes, which the reader cuts into many chunks parsed in
// parallel (64 KiB growing to 1 MiB, see the package documentation): the
// count is kept across chunks, so one entry short or one too many in the
// last chunk is still found, and on the right line. The rule is the Matrix
// Market definition's, as in TestEntryCountOffByOne.
func TestEntryCountOffByOneAcrossChunks(t *testing.T) {
	const n = 300_000 // about 4 MB of text: several chunks at every size
	build := func(claim, present int, array bool) []byte {
		var b bytes.Buffer
		if array {
			fmt.Fprintf(&b, "%%%%MatrixMarket matrix array real general\n%d 1\n", claim)
			for k := 0; k < present; k++ {
				fmt.Fprintf(&b, "%d.25\n", k)
			}
			return b.Bytes()
		}
		fmt.Fprintf(&b, "%%%%MatrixMarket matrix coordinate real general\n%d %d %d\n", n, n, claim)
		for k := 0; k < present; k++ {
			fmt.Fprintf(&b, "%d %d %d.5\n", k%n+1, (7*k)%n+1, k)
		}
		return b.Bytes()
	}
	tests := []struct {
		name           string
		claim, present int
		array          bool
		line           int // 0: reads without error
		want           error
	}{
		{name: "coordinate/exact", claim: n, present: n},
		{name: "coordinate/one-short", claim: n, present: n - 1, line: n + 2, want: io.ErrUnexpectedEOF},
		{name: "coordinate/one-extra", claim: n, present: n + 1, line: n + 3, want: ErrEntryCount},
		{name: "array/exact", claim: n, present: n, array: true},
		{name: "array/one-short", claim: n, present: n - 1, array: true, line: n + 2, want: io.ErrUnexpectedEOF},
		{name: "array/one-extra", claim: n, present: n + 1, array: true, line: n + 3, want: ErrEntryCount},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			text := build(tc.claim, tc.present, tc.array)
			_, info, err := ReadMatrix(bytes.NewReader(text), nil)
			if tc.want == nil {
				if err != nil || info.Entries != tc.present {
					t.Fatalf("err = %v, %d entries; want nil, %d", err, info.Entries, tc.present)
				}
				return
			}
			var pe *ParseError
			if !errors.As(err, &pe) || pe.Line != tc.line || !errors.Is(err, tc.want) {
				t.Fatalf("err = %v, want line %d %v", err, tc.line, tc.want)
			}
		})
	}
}
