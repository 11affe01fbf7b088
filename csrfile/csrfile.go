// Package csrfile is residua's own compact binary file for one sparse
// matrix in CSR form or one dense vector: what `residua serve --data`
// keeps on disk, named by content, and what a checkpoint refers to.
//
// # Layout (format version 1)
//
// All numbers are little-endian; the sections are package internal/binio's,
// each closed by the CRC-32C of its bytes.
//
//	header:          magic "residua-csrfile\n", version (uint32), kind
//	                 (uint32: 1 matrix, 2 vector), rows, cols, stored
//	                 entries (int64 each), the content id (string), the
//	                 writer's description (bytes, opaque here)
//	row pointers:    Rows+1 int64 (matrix only)
//	column indices:  NNZ int32 (matrix only)
//	values:          NNZ float64 (a vector: Rows of them)
//
// A matrix's id is wire.MatrixID, the SHA-256 the server already names
// matrices by, so a file's name, its header and the id a client computes
// agree; a vector's id is wire.VectorSum. A file of 10⁷ values is 80 MB
// plus 60 bytes.
//
// # Writing and reading
//
// Write functions go through internal/atomicfile (temporary file, fsync,
// rename, folder fsync), so a crash leaves the old file or the complete new
// one. ReadHeader reads and checks the header alone, which is what a
// start-up listing needs; ReadMatrix and ReadVector read everything and
// check every section's checksum, the CSR invariants (sparse.Validate) and
// the content id. A damaged file is an *Error naming the file and the part,
// wrapping io.ErrUnexpectedEOF (truncated), binio.ErrChecksum (a part's
// bytes changed), ErrFormat (not such a file, or another version) or ErrID
// (the content does not hash to the id).
package csrfile

import (
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/internal/binio"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/wire"
)

const (
	magic   = "residua-csrfile\n"
	version = 1
)

// Kind is what a file holds.
type Kind uint32

const (
	// Matrix is a sparse.CSR.
	Matrix Kind = 1
	// Vector is a []float64.
	Vector Kind = 2
)

func (k Kind) String() string {
	switch k {
	case Matrix:
		return "matrix"
	case Vector:
		return "vector"
	}
	return fmt.Sprintf("kind(%d)", uint32(k))
}

// Named reasons a file is refused.
var (
	// ErrFormat: not a csrfile, another format version, or impossible
	// sizes in the header.
	ErrFormat = errors.New("not a readable residua csrfile")
	// ErrID: the content does not hash to the id in the header.
	ErrID = errors.New("content does not match its id")
	// ErrKind: a matrix was asked of a vector file or the other way round.
	ErrKind = errors.New("wrong kind of file")
)

// Error is a file that could not be read, with which part failed.
type Error struct {
	Path string
	Part string // "header", "row pointers", "column indices", "values", "content"
	Err  error
}

func (e *Error) Error() string { return fmt.Sprintf("%s: %s: %v", e.Path, e.Part, e.Err) }
func (e *Error) Unwrap() error { return e.Err }

// Header is what a file's first section says.
type Header struct {
	Kind            Kind
	Rows, Cols, NNZ int
	ID              string
	// Meta is what the writer chose to keep beside the arrays (the server
	// keeps the matrix's description); csrfile does not read it.
	Meta []byte
	Size int64 // the file's size in bytes
}

// Bytes returns the size a file with this header has: the payload of the
// arrays plus the header and the checksums.
func Bytes(kind Kind, rows, nnz int, id string, meta []byte) int64 {
	head := int64(len(magic)) + 4 + 4 + 3*8 + 8 + int64(len(id)) + 8 + int64(len(meta)) + 4
	if kind == Vector {
		return head + 8 + 8*int64(rows) + 4
	}
	return head + 8 + 8*int64(rows+1) + 4 + 8 + 4*int64(nnz) + 4 + 8 + 8*int64(nnz) + 4
}

func writeHeader(w *binio.Writer, h Header) {
	w.Raw([]byte(magic))
	w.Uint32(version)
	w.Uint32(uint32(h.Kind))
	w.Int64(int64(h.Rows))
	w.Int64(int64(h.Cols))
	w.Int64(int64(h.NNZ))
	w.String(h.ID)
	w.Bytes(h.Meta)
	w.EndSection()
}

// WriteMatrix writes a and meta to path atomically and durably and returns
// its id (wire.MatrixID, computed when id is ""; a caller that has it
// passes it).
func WriteMatrix(path string, a *sparse.CSR, id string, meta []byte) (string, error) {
	if id == "" {
		id = wire.MatrixID(a)
	}
	err := atomicfile.WriteDurable(path, func(out io.Writer) error {
		w := binio.NewWriter(out)
		writeHeader(w, Header{Kind: Matrix, Rows: a.Rows, Cols: a.Cols, NNZ: a.NNZ(), ID: id, Meta: meta})
		w.Int64s(a.RowPtr)
		w.EndSection()
		w.Int32s(a.ColIdx)
		w.EndSection()
		w.Float64s(a.Val)
		w.EndSection()
		return w.Flush()
	})
	return id, err
}

// WriteVector writes x and meta to path atomically and durably and returns
// its id (wire.VectorSum, computed when id is "").
func WriteVector(path string, x []float64, id string, meta []byte) (string, error) {
	if id == "" {
		id = wire.VectorSum(x)
	}
	err := atomicfile.WriteDurable(path, func(out io.Writer) error {
		w := binio.NewWriter(out)
		writeHeader(w, Header{Kind: Vector, Rows: len(x), Cols: 1, NNZ: len(x), ID: id, Meta: meta})
		w.Float64s(x)
		w.EndSection()
		return w.Flush()
	})
	return id, err
}

// reader opens path and reads its header.
type reader struct {
	f    *os.File
	r    *binio.Reader
	h    Header
	path string
}

func open(path string) (*reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, err
	}
	rd := &reader{f: f, r: binio.NewReader(f, st.Size()), path: path}
	rd.h.Size = st.Size()
	if err := rd.header(); err != nil {
		f.Close()
		return nil, err
	}
	return rd, nil
}

func (rd *reader) fail(part string, err error) error {
	return &Error{Path: rd.path, Part: part, Err: err}
}

func (rd *reader) header() error {
	r := rd.r
	r.Section("header")
	m := make([]byte, len(magic))
	if r.Raw(m) && string(m) != magic {
		return rd.fail("header", fmt.Errorf("%w: no csrfile magic at the start", ErrFormat))
	}
	if v := r.Uint32(); r.Err() == nil && v != version {
		return rd.fail("header", fmt.Errorf("%w: format version %d, this build reads %d", ErrFormat, v, version))
	}
	h := &rd.h
	h.Kind = Kind(r.Uint32())
	h.Rows, h.Cols, h.NNZ = int(r.Int64()), int(r.Int64()), int(r.Int64())
	h.ID = r.String()
	h.Meta = r.Bytes()
	if err := r.EndSection(); err != nil {
		return rd.fail("header", err)
	}
	switch {
	case h.Kind != Matrix && h.Kind != Vector:
		return rd.fail("header", fmt.Errorf("%w: unknown kind %d", ErrFormat, uint32(h.Kind)))
	case h.Rows < 0 || h.Cols < 0 || h.NNZ < 0 || h.Rows > sparse.MaxDim || h.Cols > sparse.MaxDim:
		return rd.fail("header", fmt.Errorf("%w: sizes %d×%d with %d entries", ErrFormat, h.Rows, h.Cols, h.NNZ))
	case h.Kind == Vector && (h.Cols != 1 || h.NNZ != h.Rows):
		return rd.fail("header", fmt.Errorf("%w: a vector of %d×%d with %d entries", ErrFormat, h.Rows, h.Cols, h.NNZ))
	}
	if want := Bytes(h.Kind, h.Rows, h.NNZ, h.ID, h.Meta); h.Size != want {
		// The sizes say exactly how long the file must be: a shorter one
		// is torn, a longer one has something appended.
		err := fmt.Errorf("%w: %d bytes, the header's sizes need %d", io.ErrUnexpectedEOF, h.Size, want)
		if h.Size > want {
			err = fmt.Errorf("%w: %d bytes, the header's sizes need %d", ErrFormat, h.Size, want)
		}
		return rd.fail("header", err)
	}
	return nil
}

// section reads one array section with read and checks its checksum.
func (rd *reader) section(part string, read func(r *binio.Reader) int, want int) error {
	rd.r.Section(part)
	n := read(rd.r)
	if err := rd.r.EndSection(); err != nil {
		return rd.fail(part, err)
	}
	if n != want {
		return rd.fail(part, fmt.Errorf("%w: %d entries, the header says %d", ErrFormat, n, want))
	}
	return nil
}

// ReadHeader reads and checks path's header and its size, without reading
// the arrays.
func ReadHeader(path string) (Header, error) {
	rd, err := open(path)
	if err != nil {
		return Header{}, err
	}
	rd.f.Close()
	return rd.h, nil
}

// ReadMatrix reads the matrix in path, checking every part (see the
// package documentation).
func ReadMatrix(path string) (*sparse.CSR, Header, error) {
	rd, err := open(path)
	if err != nil {
		return nil, Header{}, err
	}
	defer rd.f.Close()
	h := rd.h
	if h.Kind != Matrix {
		return nil, h, rd.fail("header", fmt.Errorf("%w: a %v, want a matrix", ErrKind, h.Kind))
	}
	a := &sparse.CSR{Rows: h.Rows, Cols: h.Cols}
	if err := rd.section("row pointers", func(r *binio.Reader) int { a.RowPtr = r.Int64s(nil); return len(a.RowPtr) }, h.Rows+1); err != nil {
		return nil, h, err
	}
	if err := rd.section("column indices", func(r *binio.Reader) int { a.ColIdx = r.Int32s(nil); return len(a.ColIdx) }, h.NNZ); err != nil {
		return nil, h, err
	}
	if err := rd.section("values", func(r *binio.Reader) int { a.Val = r.Float64s(nil); return len(a.Val) }, h.NNZ); err != nil {
		return nil, h, err
	}
	if err := a.Validate(); err != nil {
		return nil, h, rd.fail("content", fmt.Errorf("%w: %v", ErrFormat, err))
	}
	if id := wire.MatrixID(a); id != h.ID {
		return nil, h, rd.fail("content", fmt.Errorf("%w: hashes to %s, the header says %s", ErrID, id, h.ID))
	}
	return a, h, nil
}

// ReadVector reads the vector in path, checking every part.
func ReadVector(path string) ([]float64, Header, error) {
	rd, err := open(path)
	if err != nil {
		return nil, Header{}, err
	}
	defer rd.f.Close()
	h := rd.h
	if h.Kind != Vector {
		return nil, h, rd.fail("header", fmt.Errorf("%w: a %v, want a vector", ErrKind, h.Kind))
	}
	var x []float64
	if err := rd.section("values", func(r *binio.Reader) int { x = r.Float64s(nil); return len(x) }, h.Rows); err != nil {
		return nil, h, err
	}
	if id := wire.VectorSum(x); id != h.ID {
		return nil, h, rd.fail("content", fmt.Errorf("%w: hashes to %s, the header says %s", ErrID, id, h.ID))
	}
	return x, h, nil
}
