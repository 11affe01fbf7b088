package wire

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
)

// Pack encodes x as packed little-endian float64 bytes, the wire form of
// vectors.
func Pack(x []float64) []byte { return AppendPacked(make([]byte, 0, 8*len(x)), x) }

// AppendPacked appends x's packed bytes to b.
func AppendPacked(b []byte, x []float64) []byte {
	for _, v := range x {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	}
	return b
}

// ErrPartialEntry: a byte count that is not a whole number of float64
// entries.
var ErrPartialEntry = errors.New("not a whole number of float64 entries")

// Unpack decodes packed little-endian float64 bytes; a trailing partial
// entry is an error.
func Unpack(b []byte) ([]float64, error) {
	if len(b)%8 != 0 {
		return nil, fmt.Errorf("wire: %d bytes: %w", len(b), ErrPartialEntry)
	}
	return UnpackAppend(make([]float64, 0, len(b)/8), b), nil
}

// UnpackAppend appends the whole entries of b to x.
func UnpackAppend(x []float64, b []byte) []float64 {
	for i := 0; i+8 <= len(b); i += 8 {
		x = append(x, math.Float64frombits(binary.LittleEndian.Uint64(b[i:])))
	}
	return x
}

// VectorSum returns the lowercase hex SHA-256 of x's packed bytes, as the
// last chunk of a solution carries it. It packs a block at a time, so its
// memory does not grow with x.
func VectorSum(x []float64) string {
	h := sha256.New()
	buf := make([]byte, 0, 64<<10)
	for len(x) > 0 {
		k := min(len(x), cap(buf)/8)
		buf = AppendPacked(buf[:0], x[:k])
		h.Write(buf)
		x = x[k:]
	}
	return hex.EncodeToString(h.Sum(nil))
}

// ChunkVector sends x in chunks of at most per entries as send receives
// them: the offset of the chunk's first entry, its packed bytes (a fresh
// slice per chunk, since gRPC may hold a sent message's bytes), whether it
// is the last, and for the last chunk the vector's VectorSum. An empty
// vector is one empty last chunk. It stops at the first error of send.
func ChunkVector(x []float64, per int, send func(offset int, data []byte, last bool, sum string) error) error {
	if per <= 0 {
		panic("wire: ChunkVector: non-positive chunk size")
	}
	h := sha256.New()
	for off := 0; ; off += per {
		end := min(off+per, len(x))
		data := AppendPacked(make([]byte, 0, 8*(end-off)), x[off:end])
		h.Write(data)
		last := end == len(x)
		sum := ""
		if last {
			sum = hex.EncodeToString(h.Sum(nil))
		}
		if err := send(off, data, last, sum); err != nil {
			return err
		}
		if last {
			return nil
		}
	}
}

// Assembler rebuilds a vector from its chunks, checking that they follow
// one another, that the length is what the first chunk announced, and
// that the last chunk's checksum matches what arrived.
type Assembler struct {
	x      []float64
	length int64
	h      interface {
		Write([]byte) (int, error)
		Sum([]byte) []byte
	}
	started, done bool
}

// ErrTruncated: a vector's chunks did not add up to the vector announced
// (missing entries, a chunk out of order, a checksum mismatch).
var ErrTruncated = errors.New("vector arrived incomplete or altered")

// maxVector bounds the length a first chunk may announce: a vector of more
// entries than a matrix may have rows (sparse.MaxDim) is malformed.
const maxVector = 1<<31 - 1

// Add takes the next chunk: the vector's announced length, the chunk's
// offset, its packed data, whether it is the last and (last only) the
// checksum. It reports whether the vector is complete.
func (a *Assembler) Add(length, offset int64, data []byte, last bool, sum string) (bool, error) {
	if a.done {
		return true, fmt.Errorf("wire: a chunk after the last one: %w", ErrTruncated)
	}
	if !a.started {
		if length < 0 || length > maxVector {
			return false, fmt.Errorf("wire: vector length %d out of range: %w", length, ErrTruncated)
		}
		a.length, a.started = length, true
		a.x = make([]float64, 0, length)
		a.h = sha256.New()
	}
	switch {
	case length != a.length:
		return false, fmt.Errorf("wire: a chunk announces length %d, the first announced %d: %w", length, a.length, ErrTruncated)
	case offset != int64(len(a.x)):
		return false, fmt.Errorf("wire: chunk at entry %d does not follow entry %d: %w", offset, len(a.x), ErrTruncated)
	case len(data)%8 != 0:
		return false, fmt.Errorf("wire: chunk of %d bytes: %w", len(data), ErrPartialEntry)
	case offset+int64(len(data)/8) > a.length:
		return false, fmt.Errorf("wire: chunk runs past the vector's %d entries: %w", a.length, ErrTruncated)
	}
	a.x = UnpackAppend(a.x, data)
	a.h.Write(data)
	if !last {
		return false, nil
	}
	a.done = true
	if int64(len(a.x)) != a.length {
		return true, fmt.Errorf("wire: the vector has %d of its %d entries: %w", len(a.x), a.length, ErrTruncated)
	}
	if got := hex.EncodeToString(a.h.Sum(nil)); sum != "" && got != sum {
		return true, fmt.Errorf("wire: the vector's SHA-256 is %s, the sender's %s: %w", got, sum, ErrTruncated)
	} else if sum == "" {
		return true, fmt.Errorf("wire: the last chunk carries no checksum: %w", ErrTruncated)
	}
	return true, nil
}

// Vector returns the vector once complete (nil before).
func (a *Assembler) Vector() []float64 {
	if !a.done {
		return nil
	}
	return a.x
}
