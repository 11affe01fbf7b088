package csrfile

import (
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/residua/residua/internal/binio"
	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

func sameCSR(a, b *sparse.CSR) bool {
	return a.Rows == b.Rows && a.Cols == b.Cols && slices.Equal(a.RowPtr, b.RowPtr) && slices.Equal(a.ColIdx, b.ColIdx) &&
		slices.EqualFunc(a.Val, b.Val, func(x, y float64) bool { return math.Float64bits(x) == math.Float64bits(y) })
}

// TestRoundTripShared writes and reads back a matrix of the SuiteSparse
// collection (bcsstk01, read by matrixio from its Matrix Market file) and
// checks the arrays bit for bit, the id against wire.MatrixID and the size
// against Bytes.
func TestRoundTripShared(t *testing.T) {
	path := filepath.Join(shared.Matrices(t), "bcsstk01.mtx")
	a, _, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		t.Fatal(err)
	}
	// The collection's index gives bcsstk01 48 rows and 400 entries with
	// both triangles (the MANIFEST's notes).
	if a.Rows != 48 || a.NNZ() != 400 {
		t.Fatalf("bcsstk01 read as %d rows, %d entries; the collection says 48 and 400", a.Rows, a.NNZ())
	}
	roundTrip(t, a)
}

func roundTrip(t *testing.T, a *sparse.CSR) {
	t.Helper()
	dir := t.TempDir()
	p := filepath.Join(dir, "m.csr")
	id, err := WriteMatrix(p, a, "", []byte("meta"))
	if err != nil {
		t.Fatal(err)
	}
	if id != wire.MatrixID(a) {
		t.Fatalf("id %s, wire.MatrixID %s", id, wire.MatrixID(a))
	}
	h, err := ReadHeader(p)
	if err != nil || h.Kind != Matrix || h.Rows != a.Rows || h.Cols != a.Cols || h.NNZ != a.NNZ() || h.ID != id || string(h.Meta) != "meta" {
		t.Fatalf("header %+v, %v", h, err)
	}
	if st, _ := os.Stat(p); st.Size() != Bytes(Matrix, a.Rows, a.NNZ(), id, []byte("meta")) {
		t.Fatalf("file of %d bytes, Bytes says %d", st.Size(), Bytes(Matrix, a.Rows, a.NNZ(), id, []byte("meta")))
	}
	b, _, err := ReadMatrix(p)
	if err != nil {
		t.Fatal(err)
	}
	if !sameCSR(a, b) {
		t.Fatal("matrix changed in the round trip")
	}
}

func TestRoundTrip(t *testing.T) {
	roundTrip(t, stencil.Poisson3D(7))
	empty := &sparse.CSR{Rows: 0, Cols: 0, RowPtr: []int{0}}
	roundTrip(t, empty)
	wide, _ := sparse.NewCSR(2, 5, []int{0, 1, 1}, []int32{4}, []float64{math.Copysign(0, -1)})
	roundTrip(t, wide)

	x := []float64{1, math.Inf(1), math.Copysign(0, -1), math.SmallestNonzeroFloat64, math.NaN()}
	p := filepath.Join(t.TempDir(), "v")
	id, err := WriteVector(p, x, "", nil)
	if err != nil || id != wire.VectorSum(x) {
		t.Fatalf("WriteVector: %s, %v", id, err)
	}
	y, h, err := ReadVector(p)
	if err != nil || h.Kind != Vector || len(y) != len(x) {
		t.Fatalf("ReadVector: %v, %+v", err, h)
	}
	for i := range x {
		if math.Float64bits(x[i]) != math.Float64bits(y[i]) {
			t.Fatalf("entry %d: %v, want %v", i, y[i], x[i])
		}
	}
	if _, _, err := ReadMatrix(p); !errors.Is(err, ErrKind) {
		t.Errorf("a vector read as a matrix: %v", err)
	}
}

// parts returns the byte ranges of the parts of a matrix file written by
// WriteMatrix, from its layout (package documentation).
func parts(rows, nnz int, id string) map[string][2]int64 {
	head := Bytes(Vector, 0, 0, id, nil) - 12 // the header alone
	rp := head + 8 + 8*int64(rows+1) + 4
	ci := rp + 8 + 4*int64(nnz) + 4
	return map[string][2]int64{
		"header":         {0, head},
		"row pointers":   {head, rp},
		"column indices": {rp, ci},
		"values":         {ci, ci + 8 + 8*int64(nnz) + 4},
	}
}

// TestDamaged truncates and corrupts every part of a matrix file and checks
// that the reader names the part and the reason.
func TestDamaged(t *testing.T) {
	a := stencil.Poisson2D(9)
	dir := t.TempDir()
	p := filepath.Join(dir, "m.csr")
	id, err := WriteMatrix(p, a, "", nil)
	if err != nil {
		t.Fatal(err)
	}
	good, _ := os.ReadFile(p)
	ranges := parts(a.Rows, a.NNZ(), id)
	if ranges["values"][1] != int64(len(good)) {
		t.Fatalf("layout: values end at %d, file has %d bytes", ranges["values"][1], len(good))
	}
	bad := filepath.Join(dir, "bad.csr")
	for part, r := range ranges {
		// Truncated inside the part: the header's sizes no longer match
		// the file's, which ReadHeader already sees.
		cut := (r[0] + r[1]) / 2
		os.WriteFile(bad, good[:cut], 0o644)
		_, _, err := ReadMatrix(bad)
		var e *Error
		if !errors.As(err, &e) || !errors.Is(err, io.ErrUnexpectedEOF) && !errors.Is(err, binio.ErrLength) {
			t.Errorf("%s cut at byte %d: %v, want a truncation", part, cut, err)
		}
		// One byte changed inside the part (not its length field): its
		// checksum catches it and the error names the part.
		for _, at := range []int64{r[0] + 9, r[1] - 5, r[1] - 1} {
			if part == "header" && at < int64(len(magic)) {
				continue
			}
			q := slices.Clone(good)
			q[at] ^= 0x10
			os.WriteFile(bad, q, 0o644)
			_, _, err := ReadMatrix(bad)
			if !errors.As(err, &e) {
				t.Errorf("%s byte %d changed: %v, want an *Error", part, at, err)
				continue
			}
			if e.Part != part && !(part == "header" && errors.Is(err, ErrFormat)) {
				t.Errorf("%s byte %d changed: blamed on %q: %v", part, at, e.Part, err)
			}
			if !errors.Is(err, binio.ErrChecksum) && !errors.Is(err, ErrFormat) && !errors.Is(err, io.ErrUnexpectedEOF) && !errors.Is(err, binio.ErrLength) {
				t.Errorf("%s byte %d changed: %v", part, at, err)
			}
		}
	}
	// Appended bytes.
	os.WriteFile(bad, append(slices.Clone(good), 0), 0o644)
	if _, err := ReadHeader(bad); !errors.Is(err, ErrFormat) {
		t.Errorf("appended byte: %v", err)
	}
	// Not a csrfile at all.
	os.WriteFile(bad, []byte("%%MatrixMarket matrix coordinate real general\n"), 0o644)
	if _, err := ReadHeader(bad); !errors.Is(err, ErrFormat) {
		t.Errorf("Matrix Market text: %v", err)
	}
	// Consistent checksums over a content that is not the id's: a file
	// written with a wrong id (as a bug or a forger would) is refused.
	other := filepath.Join(dir, "o.csr")
	if _, err := WriteMatrix(other, a, wire.MatrixID(stencil.Poisson2D(3)), nil); err != nil {
		t.Fatal(err)
	}
	if _, _, err := ReadMatrix(other); !errors.Is(err, ErrID) {
		t.Errorf("wrong id: %v", err)
	}
	// A structurally broken CSR with correct checksums (column index out of
	// range) is refused by sparse.Validate's rules.
	broken := &sparse.CSR{Rows: 1, Cols: 1, RowPtr: []int{0, 1}, ColIdx: []int32{3}, Val: []float64{1}}
	if _, err := WriteMatrix(other, broken, "x", nil); err != nil {
		t.Fatal(err)
	}
	if _, _, err := ReadMatrix(other); !errors.Is(err, ErrFormat) {
		t.Errorf("invalid CSR: %v", err)
	}
}

// TestNoTempLeft: a write that fails leaves neither the file nor a
// temporary one.
func TestNoTempLeft(t *testing.T) {
	dir := t.TempDir()
	if _, err := WriteMatrix(filepath.Join(dir, "missing", "m.csr"), stencil.Poisson2D(3), "", nil); err == nil {
		t.Fatal("writing into a missing folder succeeded")
	}
	if _, err := WriteVector(filepath.Join(dir, "v"), []float64{1, 2}, "", nil); err != nil {
		t.Fatal(err)
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 || ents[0].Name() != "v" {
		t.Fatalf("folder holds %v", ents)
	}
}
