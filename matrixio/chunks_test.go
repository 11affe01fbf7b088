package matrixio

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"

	"github.com/residua/residua/sparse"
	"go.uber.org/goleak"
)

// bigText returns a general coordinate file of about 3 MB (many chunks, so
// the parallel pipeline runs) with its triplets, 0-based.
func bigText(t *testing.T, sym string) (string, []int32, []int32, []float64) {
	t.Helper()
	rng := rand.New(rand.NewPCG(99, 1))
	const n, m = 5000, 200000
	var b strings.Builder
	fmt.Fprintf(&b, "%%%%MatrixMarket matrix coordinate real %s\n%d %d %d\n", sym, n, n, m)
	ii, jj, vv := make([]int32, m), make([]int32, m), make([]float64, m)
	for k := 0; k < m; k++ {
		r, c := rng.IntN(n), rng.IntN(n)
		if sym != "general" && r < c {
			r, c = c, r
		}
		v := rng.NormFloat64()
		ii[k], jj[k], vv[k] = int32(r), int32(c), v
		fmt.Fprintf(&b, "%d %d %s\n", r+1, c+1, strconv.FormatFloat(v, 'g', -1, 64))
	}
	return b.String(), ii, jj, vv
}

// replaceLine replaces 1-based line ln of text.
func replaceLine(text string, ln int, with string) string {
	lines := strings.SplitAfter(text, "\n")
	lines[ln-1] = with + "\n"
	return strings.Join(lines, "")
}

// The pipeline must give the same matrix as assembling the triplets
// directly, and report defects deep in the file with their exact line (the
// line numbers of chunks are added up in file order). No goroutine of the
// pipeline may outlive a read, whether it fails or not (goleak).
func TestManyChunks(t *testing.T) {
	defer goleak.VerifyNone(t)
	for _, sym := range []string{"general", "symmetric"} {
		text, ii, jj, vv := bigText(t, sym)
		if len(text) < 4*chunkSize {
			t.Fatalf("text of %d bytes is too short to test chunking", len(text))
		}
		s := sparse.General
		if sym == "symmetric" {
			s = sparse.Symmetric
		}
		want, wst, err := sparse.FromTriplets(5000, 5000, ii, jj, vv, sparse.BuildOptions{Symmetry: s})
		if err != nil {
			t.Fatal(err)
		}
		got, info, err := ReadMatrix(strings.NewReader(text), nil)
		if err != nil {
			t.Fatal(err)
		}
		sameCSR(t, sym, got, want)
		if info.Duplicates != wst.Duplicates || info.Bytes != int64(len(text)) {
			t.Errorf("%s: %d duplicates, %d bytes; want %d, %d", sym, info.Duplicates, info.Bytes, wst.Duplicates, len(text))
		}
	}

	text, _, _, _ := bigText(t, "general")
	sym, _, _, _ := bigText(t, "symmetric")
	last := 200002 // the last line: 2 header lines and 200000 entries
	tests := []struct {
		name string
		text string
		opt  *Options
		line int
		want error
	}{
		{"index deep", replaceLine(text, 150001, "0 1 1"), nil, 150001, ErrIndexRange},
		{"value deep", replaceLine(text, 123457, "5 5 x"), nil, 123457, ErrValue},
		{"last line", replaceLine(text, last, "1 1 NaN"), nil, last, ErrNotFinite},
		{"upper entry deep", replaceLine(sym, 180000, "1 2 1"), nil, 180000, ErrBothTriangles},
		{"truncated", text[:len(text)/2+strings.Index(text[len(text)/2:], "\n")+1], nil, strings.Count(text[:len(text)/2], "\n") + 2, io.ErrUnexpectedEOF},
		{"one too many", text + "1 1 1\n", nil, last + 1, ErrEntryCount},
		{"blank lines then too many", text + "\n\n1 1 1\n", nil, last + 3, ErrEntryCount},
		{"byte limit", text, &Options{Limits: Limits{MaxBytes: int64(len(text) / 3)}}, strings.Count(text[:len(text)/3], "\n") + 1, ErrLimit},
		// Two defects: the first in file order wins, whichever chunk is parsed first.
		{"two defects", replaceLine(replaceLine(text, 190000, "x"), 20000, "1 1 1 1"), nil, 20000, ErrEntryFields},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := ReadMatrix(strings.NewReader(tc.text), tc.opt)
			var pe *ParseError
			if !errors.As(err, &pe) || pe.Line != tc.line || !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want line %d: %v", err, tc.line, tc.want)
			}
		})
	}
}

// A reader that fails midway: the error comes back, wrapped in a
// *ParseError with the line where the input broke off.
func TestReadFailure(t *testing.T) {
	text, _, _, _ := bigText(t, "general")
	boom := errors.New("connection reset")
	r := io.MultiReader(strings.NewReader(text[:2*chunkSize+100]), &failReader{boom})
	_, _, err := ReadMatrix(r, nil)
	var pe *ParseError
	if !errors.As(err, &pe) || !errors.Is(err, boom) {
		t.Fatalf("err = %v, want a *ParseError wrapping %v", err, boom)
	}
	if want := strings.Count(text[:2*chunkSize+100], "\n") + 1; pe.Line != want {
		t.Errorf("line %d, want %d", pe.Line, want)
	}
}

type failReader struct{ err error }

func (f *failReader) Read([]byte) (int, error) { return 0, f.err }

// A vector in coordinate format spread over many chunks.
func TestManyChunksVector(t *testing.T) {
	var b bytes.Buffer
	const n = 300000
	fmt.Fprintf(&b, "%%%%MatrixMarket matrix coordinate real general\n%d 1 %d\n", n, n)
	for i := n; i >= 1; i-- {
		fmt.Fprintf(&b, "%d 1 %d.5\n", i, i)
	}
	x, info, err := ReadVector(&b, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range x {
		if x[i] != float64(i+1)+0.5 {
			t.Fatalf("x[%d] = %v", i, x[i])
		}
	}
	if info.Nonzeros != n {
		t.Errorf("%d nonzeros", info.Nonzeros)
	}
}
