package wire

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"

	"github.com/residua/residua/sparse"
)

// CSRBytes is the size of a matrix's CSR_RAW encoding: rows+1 int64 row
// pointers, nnz int32 column indices and nnz float64 values.
func CSRBytes(rows, nnz int64) int64 { return 8*(rows+1) + 12*nnz }

// Chunker packs little-endian values into chunks of about a fixed size and
// sends each full one. A fresh buffer is used per chunk, because gRPC may
// hold a sent message's bytes after Send returns.
type Chunker struct {
	Size int
	Send func([]byte) error
	buf  []byte
	err  error
}

// room makes space in the current chunk for up to want values of size
// bytes, sending the chunk first if it has no room for one, and returns
// how many fit (at least one).
func (w *Chunker) room(size, want int) int {
	if len(w.buf)+size > w.Size && len(w.buf) > 0 {
		w.emit()
	}
	if w.buf == nil {
		w.buf = make([]byte, 0, max(w.Size, size))
	}
	return max(1, min(want, (cap(w.buf)-len(w.buf))/size))
}

func (w *Chunker) emit() {
	if w.err == nil && len(w.buf) > 0 {
		w.err = w.Send(w.buf)
	}
	w.buf = nil
}

// Flush sends what is buffered and returns the first error of Send.
func (w *Chunker) Flush() error {
	w.emit()
	return w.err
}

// Int64s, Int32s and Float64s append values in little-endian form.
func (w *Chunker) Int64s(v []int) {
	for len(v) > 0 && w.err == nil {
		k := w.room(8, len(v))
		for _, p := range v[:k] {
			w.buf = binary.LittleEndian.AppendUint64(w.buf, uint64(p))
		}
		v = v[k:]
	}
}

func (w *Chunker) Int32s(v []int32) {
	for len(v) > 0 && w.err == nil {
		k := w.room(4, len(v))
		for _, j := range v[:k] {
			w.buf = binary.LittleEndian.AppendUint32(w.buf, uint32(j))
		}
		v = v[k:]
	}
}

func (w *Chunker) Float64s(v []float64) {
	for len(v) > 0 && w.err == nil {
		k := w.room(8, len(v))
		w.buf = AppendPacked(w.buf, v[:k])
		v = v[k:]
	}
}

// EncodeCSR sends a's CSR_RAW encoding in chunks of about size bytes.
func EncodeCSR(a *sparse.CSR, size int, send func([]byte) error) error {
	w := &Chunker{Size: size, Send: send}
	w.Int64s(a.RowPtr)
	w.Int32s(a.ColIdx)
	w.Float64s(a.Val)
	return w.Flush()
}

// RawError is a malformed CSR_RAW encoding: the byte offset where the
// problem lies, the array and the entry (and the row it belongs to, once
// the row pointers are known), and why.
type RawError struct {
	Offset int64  // byte offset in the encoding
	Array  string // "row pointers", "column indices" or "values"
	Index  int    // entry of the array (0-based)
	Row    int    // the row concerned (0-based), or -1 for a matrix without rows
	Err    error
}

func (e *RawError) Error() string {
	where := fmt.Sprintf("byte %d (%s entry %d", e.Offset, e.Array, e.Index)
	if e.Row >= 0 {
		where += fmt.Sprintf(", row %d", e.Row+1)
	}
	return where + "): " + e.Err.Error()
}

func (e *RawError) Unwrap() error { return e.Err }

// Reasons of a RawError, for errors.Is.
var (
	ErrRowPointer = errors.New("row pointer out of order or out of range")
	ErrColumn     = errors.New("column index out of range or not increasing within its row")
	ErrValue      = errors.New("value is not finite")
)

// DecodeCSR reads a CSR_RAW encoding of the given sizes from r, a buffer at
// a time, into a new matrix, checking every entry as it arrives, so the
// error names the byte offset and row of the first bad one. Data that ends
// early is a *RawError wrapping io.ErrUnexpectedEOF. The caller checks the
// sizes against its limits first: DecodeCSR allocates the arrays at once
// (see DecodeCSRCharged for a server's alternative).
func DecodeCSR(r io.Reader, rows, cols, nnz int) (*sparse.CSR, error) {
	return DecodeCSRCharged(r, rows, cols, nnz, nil)
}

// DecodeCSRCharged is DecodeCSR with each array grown as its bytes arrive
// (Grow) and every allocation charged first: an error of charge ends the
// decoding and is returned as it is. With a nil charge it allocates the
// arrays at once. The finished matrix's arrays are exactly CSRBytes long.
func DecodeCSRCharged(r io.Reader, rows, cols, nnz int, charge Charge) (*sparse.CSR, error) {
	a := &sparse.CSR{Rows: rows, Cols: cols}
	if charge == nil {
		a.RowPtr, a.ColIdx, a.Val = make([]int, 0, rows+1), make([]int32, 0, nnz), make([]float64, 0, nnz)
	}
	buf := make([]byte, 1<<20)
	var off int64
	next := func(array string, i, count, size int) ([]byte, error) {
		k := min(len(buf)/size, count-i)
		b := buf[:k*size]
		if n, err := io.ReadFull(r, b); err != nil {
			if err == io.EOF || err == io.ErrUnexpectedEOF {
				idx := i + n/size
				row := max(idx-1, 0) // a row pointer: the row it ends
				if array != "row pointers" {
					// The row pointers are all known: the row holding entry idx.
					row = min(sort.SearchInts(a.RowPtr[1:], idx+1), rows-1)
				}
				if rows == 0 {
					row = -1
				}
				return nil, &RawError{Offset: off + int64(n), Array: array, Index: idx, Row: row,
					Err: fmt.Errorf("the data ends, but the sizes need %d bytes: %w", CSRBytes(int64(rows), int64(nnz)), io.ErrUnexpectedEOF)}
			}
			return nil, err
		}
		off += int64(len(b))
		return b, nil
	}
	for i := 0; i <= rows; {
		start := off
		b, err := next("row pointers", i, rows+1, 8)
		if err != nil {
			return nil, err
		}
		if a.RowPtr, err = Grow(a.RowPtr, i+len(b)/8, rows+1, 8, charge); err != nil {
			return nil, err
		}
		for k := 0; len(b) >= 8; b, k = b[8:], k+1 {
			v := int64(binary.LittleEndian.Uint64(b))
			prev := int64(0)
			if i > 0 {
				prev = int64(a.RowPtr[i-1])
			}
			if (i == 0 && v != 0) || v < prev || v > int64(nnz) || (i == rows && v != int64(nnz)) {
				return nil, &RawError{Offset: start + int64(8*k), Array: "row pointers", Index: i, Row: max(i-1, 0),
					Err: fmt.Errorf("%w: %d (previous %d, %d entries)", ErrRowPointer, v, prev, nnz)}
			}
			a.RowPtr[i] = int(v)
			i++
		}
	}
	row := 0
	for i := 0; i < nnz; {
		start := off
		b, err := next("column indices", i, nnz, 4)
		if err != nil {
			return nil, err
		}
		if a.ColIdx, err = Grow(a.ColIdx, i+len(b)/4, nnz, 4, charge); err != nil {
			return nil, err
		}
		for k := 0; len(b) >= 4; b, k = b[4:], k+1 {
			for a.RowPtr[row+1] <= i {
				row++
			}
			c := int32(binary.LittleEndian.Uint32(b))
			if c < 0 || int(c) >= cols || (i > a.RowPtr[row] && c <= a.ColIdx[i-1]) {
				return nil, &RawError{Offset: start + int64(4*k), Array: "column indices", Index: i, Row: row,
					Err: fmt.Errorf("%w: %d (%d columns)", ErrColumn, c, cols)}
			}
			a.ColIdx[i] = c
			i++
		}
	}
	row = 0
	for i := 0; i < nnz; {
		start := off
		b, err := next("values", i, nnz, 8)
		if err != nil {
			return nil, err
		}
		if a.Val, err = Grow(a.Val, i+len(b)/8, nnz, 8, charge); err != nil {
			return nil, err
		}
		for k := 0; len(b) >= 8; b, k = b[8:], k+1 {
			for a.RowPtr[row+1] <= i {
				row++
			}
			v := math.Float64frombits(binary.LittleEndian.Uint64(b))
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, &RawError{Offset: start + int64(8*k), Array: "values", Index: i, Row: row,
					Err: fmt.Errorf("%w: %g", ErrValue, v)}
			}
			a.Val[i] = v
			i++
		}
	}
	// A matrix without entries has empty, not nil, arrays.
	if a.ColIdx == nil {
		a.ColIdx, a.Val = []int32{}, []float64{}
	}
	return a, nil
}

// MatrixID is the content hash that is a stored matrix's id: SHA-256 over
// a version tag, the dimensions and the three arrays in little-endian form,
// as lowercase hex. Equal matrices have equal ids whatever encoding they
// arrived in, so a client can compute it and ask the server whether it
// holds the matrix before uploading it.
func MatrixID(a *sparse.CSR) string {
	h := sha256.New()
	h.Write([]byte("residua csr v1\n"))
	w := &Chunker{Size: 64 << 10, Send: func(b []byte) error { h.Write(b); return nil }}
	w.Int64s([]int{a.Rows, a.Cols})
	w.Int64s(a.RowPtr)
	w.Int32s(a.ColIdx)
	w.Float64s(a.Val)
	w.Flush()
	return hex.EncodeToString(h.Sum(nil))
}
