package binio

import (
	"bytes"
	"errors"
	"io"
	"math"
	"slices"
	"testing"
)

func encode(t *testing.T) []byte {
	t.Helper()
	var buf bytes.Buffer
	w := NewWriter(&buf)
	w.Raw([]byte("MAGIC"))
	w.Uint32(7)
	w.String("cg")
	w.Float64(math.Inf(-1))
	w.Int64s([]int{-3, 0, 1 << 40})
	w.EndSection()
	big := make([]float64, 20000) // crosses the 64 KiB staging buffer
	for i := range big {
		big[i] = float64(i) / 3
	}
	w.Float64s(big)
	w.Int32s([]int32{-1, 2, math.MaxInt32})
	w.EndSection()
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	if w.Len() != int64(buf.Len()) {
		t.Fatalf("Len %d, wrote %d", w.Len(), buf.Len())
	}
	return buf.Bytes()
}

func decode(p []byte) error {
	r := NewReader(bytes.NewReader(p), int64(len(p)))
	r.Section("head")
	m := make([]byte, 5)
	r.Raw(m)
	if r.Uint32() != 7 || r.String() != "cg" || !math.IsInf(r.Float64(), -1) {
		r.Fail(errors.New("head values"))
	}
	if v := r.Int64s(nil); r.Err() == nil && !slices.Equal(v, []int{-3, 0, 1 << 40}) {
		r.Fail(errors.New("ints"))
	}
	if err := r.EndSection(); err != nil {
		return err
	}
	r.Section("body")
	f := r.Float64s(nil)
	if r.Err() == nil && (len(f) != 20000 || f[19999] != 19999.0/3) {
		r.Fail(errors.New("floats"))
	}
	if v := r.Int32s(nil); r.Err() == nil && !slices.Equal(v, []int32{-1, 2, math.MaxInt32}) {
		r.Fail(errors.New("int32s"))
	}
	if err := r.EndSection(); err != nil {
		return err
	}
	return r.End()
}

func TestRoundTrip(t *testing.T) {
	if err := decode(encode(t)); err != nil {
		t.Fatal(err)
	}
}

// TestDamage: a file cut anywhere is io.ErrUnexpectedEOF (or ErrLength
// when the cut falls after a length that no longer fits), and a flipped bit
// anywhere is caught by the CRC-32C of its section (a CRC detects every
// single-bit error: Koopman, "32-bit cyclic redundancy codes for Internet
// applications", DSN 2002, for CRC-32C's polynomial).
func TestDamage(t *testing.T) {
	p := encode(t)
	for _, cut := range []int{0, 3, 5, 9, 30, 60, len(p) / 2, len(p) - 5, len(p) - 1} {
		err := decode(p[:cut])
		var e *Error
		if !errors.As(err, &e) || !errors.Is(err, io.ErrUnexpectedEOF) && !errors.Is(err, ErrLength) {
			t.Errorf("cut at %d: %v", cut, err)
		}
	}
	for _, i := range []int{0, 6, 12, 40, 70, len(p) / 2, len(p) - 2} {
		q := slices.Clone(p)
		q[i] ^= 1
		if err := decode(q); err == nil {
			t.Errorf("bit flipped in byte %d: no error", i)
		}
	}
}

// TestLengthBound: a corrupted length never allocates beyond the file.
func TestLengthBound(t *testing.T) {
	var buf bytes.Buffer
	w := NewWriter(&buf)
	w.Uint64(1 << 60) // a length no file of this size can hold
	w.Flush()
	r := NewReader(bytes.NewReader(buf.Bytes()), int64(buf.Len()))
	r.Section("s")
	if v := r.Float64s(nil); v != nil || !errors.Is(r.Err(), ErrLength) {
		t.Fatalf("got %d values, error %v", len(v), r.Err())
	}
}
