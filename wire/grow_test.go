package wire

import (
	"bytes"
	"errors"
	"reflect"
	"testing"

	"github.com/residua/residua/sparse/stencil"
)

// TestDecodeCSRCharged: the charged decoder gives the same matrix as the
// plain one; what it holds at any time stays within GrowAmplification
// times the bytes read (plus the first growStart entries of an array, our
// rule in grow.go), ends at exactly CSRBytes, and a refused charge ends
// the decoding with the charge's own error.
func TestDecodeCSRCharged(t *testing.T) {
	a := stencil.Poisson3D(40) // 64,000 rows, 438,400 entries: several growth steps for the arrays
	var raw bytes.Buffer
	if err := EncodeCSR(a, 1<<16, func(b []byte) error { raw.Write(b); return nil }); err != nil {
		t.Fatal(err)
	}
	want, err := DecodeCSR(bytes.NewReader(raw.Bytes()), a.Rows, a.Cols, a.NNZ())
	if err != nil {
		t.Fatal(err)
	}
	cr := &countingReader{r: bytes.NewReader(raw.Bytes())}
	var held, peakOver int64
	got, err := DecodeCSRCharged(cr, a.Rows, a.Cols, a.NNZ(), func(n int64) error {
		held += n
		if over := held - GrowAmplification*cr.n - 8*growStart; over > peakOver {
			peakOver = over
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, want) {
		t.Error("the charged decoder's matrix differs from the plain one's")
	}
	if held != CSRBytes(int64(a.Rows), int64(a.NNZ())) {
		t.Errorf("holds %d bytes at the end, want CSRBytes = %d", held, CSRBytes(int64(a.Rows), int64(a.NNZ())))
	}
	if peakOver > 0 {
		t.Errorf("held %d bytes more than %d× the bytes read", peakOver, GrowAmplification)
	}
	refusal := errors.New("no room")
	calls := 0
	_, err = DecodeCSRCharged(bytes.NewReader(raw.Bytes()), a.Rows, a.Cols, a.NNZ(), func(n int64) error {
		if calls++; calls == 3 {
			return refusal
		}
		return nil
	})
	if err != refusal {
		t.Errorf("refused charge: %v, want the charge's error", err)
	}
}

type countingReader struct {
	r *bytes.Reader
	n int64
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}
