// Package binio reads and writes the little-endian binary records of
// residua's own files (solver checkpoints, stored matrices and vectors), with
// a checksum over each section so that a torn or corrupted file is detected
// and named rather than read as numbers.
//
// A file is a sequence of sections. The writer keeps a running CRC-32C
// (Castagnoli polynomial, the one with a hardware instruction on amd64 and
// arm64, so the checksum costs far less than the disk write it protects) of
// the bytes written since the last EndSection; EndSection appends that
// checksum as 4 bytes. The reader recomputes it and compares. Scalars are
// fixed-width little-endian; a slice is its length as a uint64 followed by
// its elements; a string is a byte slice.
//
// Errors are sticky, as in bufio.Writer: after the first failure every call
// does nothing, and Err (or Flush, or the reader's End) returns it. A file
// that ends inside a value is io.ErrUnexpectedEOF; a checksum that does not
// match is ErrChecksum; a length that cannot fit in what is left of the file
// is ErrLength, so that a corrupted length never makes the reader allocate
// more than the file could hold. Reader errors are *Error values naming the
// section and the offset.
package binio

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"hash"
	"hash/crc32"
	"io"
	"math"
)

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// ErrChecksum: a section's stored CRC-32C differs from the one computed from
// its bytes.
var ErrChecksum = errors.New("checksum mismatch")

// ErrLength: a stored length does not fit in the rest of the file.
var ErrLength = errors.New("a length runs past the end of the file (truncated or damaged)")

// Error is a failure to read a file, with where it happened.
type Error struct {
	Section string // the section being read, as named by the caller
	Offset  int64  // byte offset of the value that failed
	Err     error
}

func (e *Error) Error() string {
	return fmt.Sprintf("section %q at byte %d: %v", e.Section, e.Offset, e.Err)
}

func (e *Error) Unwrap() error { return e.Err }

// Writer writes sections. Its zero value is not usable; call NewWriter.
type Writer struct {
	w   *bufio.Writer
	crc hash.Hash32
	n   int64
	buf [8]byte
	err error
	vec []byte // staging for slices, 64 KiB
}

// NewWriter returns a Writer on w, buffered.
func NewWriter(w io.Writer) *Writer {
	return &Writer{w: bufio.NewWriterSize(w, 1<<20), crc: crc32.New(castagnoli), vec: make([]byte, 64<<10)}
}

func (w *Writer) write(p []byte) {
	if w.err != nil {
		return
	}
	w.crc.Write(p)
	var n int
	n, w.err = w.w.Write(p)
	w.n += int64(n)
}

// Len returns the bytes written so far.
func (w *Writer) Len() int64 { return w.n }

// Err returns the first error met.
func (w *Writer) Err() error { return w.err }

// Raw writes p as it is (a magic string, say).
func (w *Writer) Raw(p []byte) { w.write(p) }

// Uint32 writes v.
func (w *Writer) Uint32(v uint32) {
	binary.LittleEndian.PutUint32(w.buf[:4], v)
	w.write(w.buf[:4])
}

// Uint64 writes v.
func (w *Writer) Uint64(v uint64) {
	binary.LittleEndian.PutUint64(w.buf[:], v)
	w.write(w.buf[:])
}

// Int64 writes v.
func (w *Writer) Int64(v int64) { w.Uint64(uint64(v)) }

// Float64 writes v's IEEE 754 bits.
func (w *Writer) Float64(v float64) { w.Uint64(math.Float64bits(v)) }

// Bytes writes len(p) and p.
func (w *Writer) Bytes(p []byte) {
	w.Uint64(uint64(len(p)))
	w.write(p)
}

// String writes s as Bytes.
func (w *Writer) String(s string) { w.Bytes([]byte(s)) }

// Float64s writes len(v) and v's bits.
func (w *Writer) Float64s(v []float64) {
	w.Uint64(uint64(len(v)))
	per := len(w.vec) / 8
	for len(v) > 0 && w.err == nil {
		k := min(per, len(v))
		for i, e := range v[:k] {
			binary.LittleEndian.PutUint64(w.vec[8*i:], math.Float64bits(e))
		}
		w.write(w.vec[:8*k])
		v = v[k:]
	}
}

// Int64s writes len(v) and each entry as an int64.
func (w *Writer) Int64s(v []int) {
	w.Uint64(uint64(len(v)))
	per := len(w.vec) / 8
	for len(v) > 0 && w.err == nil {
		k := min(per, len(v))
		for i, e := range v[:k] {
			binary.LittleEndian.PutUint64(w.vec[8*i:], uint64(int64(e)))
		}
		w.write(w.vec[:8*k])
		v = v[k:]
	}
}

// Int32s writes len(v) and v.
func (w *Writer) Int32s(v []int32) {
	w.Uint64(uint64(len(v)))
	per := len(w.vec) / 4
	for len(v) > 0 && w.err == nil {
		k := min(per, len(v))
		for i, e := range v[:k] {
			binary.LittleEndian.PutUint32(w.vec[4*i:], uint32(e))
		}
		w.write(w.vec[:4*k])
		v = v[k:]
	}
}

// EndSection appends the CRC-32C of the bytes written since the previous
// EndSection (or the start) and starts a new section.
func (w *Writer) EndSection() {
	sum := w.crc.Sum32()
	binary.LittleEndian.PutUint32(w.buf[:4], sum)
	if w.err == nil {
		var n int
		n, w.err = w.w.Write(w.buf[:4])
		w.n += int64(n)
	}
	w.crc.Reset()
}

// Flush writes the buffered bytes to the underlying writer and returns the
// first error met.
func (w *Writer) Flush() error {
	if w.err != nil {
		return w.err
	}
	w.err = w.w.Flush()
	return w.err
}

// Reader reads sections written by a Writer.
type Reader struct {
	r       *bufio.Reader
	crc     hash.Hash32
	off     int64
	size    int64 // the file's size: lengths must fit in size − off
	section string
	buf     [8]byte
	vec     []byte
	err     error
}

// NewReader returns a Reader on r, which holds size bytes in all (the
// bound every stored length is checked against).
func NewReader(r io.Reader, size int64) *Reader {
	// A small buffer: a header is read without pulling in the arrays behind
	// it (a start-up listing reads only headers), and the arrays are read in
	// 64 KiB blocks, which bufio passes straight through.
	buf := int(min(max(size, 16), 16<<10))
	return &Reader{r: bufio.NewReaderSize(r, buf), crc: crc32.New(castagnoli), size: size, vec: make([]byte, int(min(max(size, 16), 64<<10)))}
}

// Section names the section being read, for errors.
func (r *Reader) Section(name string) { r.section = name }

// Offset returns the bytes read so far.
func (r *Reader) Offset() int64 { return r.off }

// Err returns the first error met, as an *Error.
func (r *Reader) Err() error { return r.err }

func (r *Reader) fail(err error) {
	if r.err == nil {
		r.err = &Error{Section: r.section, Offset: r.off, Err: err}
	}
}

// Fail records err (a value that is out of range, say) at the current
// offset, unless an earlier error is recorded.
func (r *Reader) Fail(err error) { r.fail(err) }

func (r *Reader) read(p []byte) bool {
	if r.err != nil {
		return false
	}
	n, err := io.ReadFull(r.r, p)
	if err != nil {
		if err == io.EOF {
			err = io.ErrUnexpectedEOF
		}
		r.fail(err)
		return false
	}
	r.crc.Write(p)
	r.off += int64(n)
	return true
}

// Raw reads len(p) bytes into p.
func (r *Reader) Raw(p []byte) bool { return r.read(p) }

// Uint32 reads a uint32 (0 after an error).
func (r *Reader) Uint32() uint32 {
	if !r.read(r.buf[:4]) {
		return 0
	}
	return binary.LittleEndian.Uint32(r.buf[:4])
}

// Uint64 reads a uint64 (0 after an error).
func (r *Reader) Uint64() uint64 {
	if !r.read(r.buf[:]) {
		return 0
	}
	return binary.LittleEndian.Uint64(r.buf[:])
}

// Int64 reads an int64.
func (r *Reader) Int64() int64 { return int64(r.Uint64()) }

// Float64 reads a float64.
func (r *Reader) Float64() float64 { return math.Float64frombits(r.Uint64()) }

// length reads a slice length of elements of the given width and checks
// that it fits in the rest of the file.
func (r *Reader) length(width int64) int {
	n := r.Uint64()
	if r.err != nil {
		return 0
	}
	if rest := r.size - r.off; rest < 0 || n > uint64(rest/width) {
		r.fail(fmt.Errorf("%w: %d elements of %d bytes, %d bytes left", ErrLength, n, width, max(rest, 0)))
		return 0
	}
	return int(n)
}

// Bytes reads a byte slice.
func (r *Reader) Bytes() []byte {
	n := r.length(1)
	p := make([]byte, n)
	r.read(p)
	return p
}

// String reads a string.
func (r *Reader) String() string { return string(r.Bytes()) }

// Float64s reads a float64 slice into dst when it is long enough (or a new
// slice), returning the slice read.
func (r *Reader) Float64s(dst []float64) []float64 {
	n := r.length(8)
	if r.err != nil {
		return nil
	}
	if cap(dst) < n {
		dst = make([]float64, n)
	}
	dst = dst[:n]
	per := len(r.vec) / 8
	for i := 0; i < n; {
		k := min(per, n-i)
		if !r.read(r.vec[:8*k]) {
			return nil
		}
		for j := range k {
			dst[i+j] = math.Float64frombits(binary.LittleEndian.Uint64(r.vec[8*j:]))
		}
		i += k
	}
	return dst
}

// Int64s reads an int slice written by Writer.Int64s; an entry that does not
// fit in int is an error.
func (r *Reader) Int64s(dst []int) []int {
	n := r.length(8)
	if r.err != nil {
		return nil
	}
	if cap(dst) < n {
		dst = make([]int, n)
	}
	dst = dst[:n]
	per := len(r.vec) / 8
	for i := 0; i < n; {
		k := min(per, n-i)
		if !r.read(r.vec[:8*k]) {
			return nil
		}
		for j := range k {
			v := int64(binary.LittleEndian.Uint64(r.vec[8*j:]))
			if int64(int(v)) != v {
				r.fail(fmt.Errorf("entry %d = %d does not fit in int", i+j, v))
				return nil
			}
			dst[i+j] = int(v)
		}
		i += k
	}
	return dst
}

// Int32s reads an int32 slice.
func (r *Reader) Int32s(dst []int32) []int32 {
	n := r.length(4)
	if r.err != nil {
		return nil
	}
	if cap(dst) < n {
		dst = make([]int32, n)
	}
	dst = dst[:n]
	per := len(r.vec) / 4
	for i := 0; i < n; {
		k := min(per, n-i)
		if !r.read(r.vec[:4*k]) {
			return nil
		}
		for j := range k {
			dst[i+j] = int32(binary.LittleEndian.Uint32(r.vec[4*j:]))
		}
		i += k
	}
	return dst
}

// EndSection reads the section's stored CRC-32C and compares it with the
// one computed from the bytes read since the previous EndSection. It
// returns the first error met.
func (r *Reader) EndSection() error {
	if r.err != nil {
		return r.err
	}
	want := r.crc.Sum32()
	var b [4]byte
	if _, err := io.ReadFull(r.r, b[:]); err != nil {
		if err == io.EOF {
			err = io.ErrUnexpectedEOF
		}
		r.fail(err)
		return r.err
	}
	if got := binary.LittleEndian.Uint32(b[:]); got != want {
		r.fail(fmt.Errorf("%w: stored %08x, computed %08x", ErrChecksum, got, want))
		return r.err
	}
	r.off += 4
	r.crc.Reset()
	return nil
}

// End checks that nothing follows the last section.
func (r *Reader) End() error {
	if r.err != nil {
		return r.err
	}
	var b [1]byte
	if n, _ := r.r.Read(b[:]); n > 0 {
		r.fail(errors.New("bytes after the last section"))
	}
	return r.err
}
