package matrixio

import (
	"bytes"
	"compress/gzip"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/residua/residua/sparse"
)

// FuzzRead checks that any input either fails with a *ParseError or reads
// to a valid CSR that survives write→read bit for bit, with the same
// counts. The malformed-input catalogue in testdata/mm seeds it.
//
// CI runs it for a bounded time:
//
//	go test ./matrixio -run='^$' -fuzz=FuzzRead -fuzztime=60s
func FuzzRead(f *testing.F) {
	files, err := filepath.Glob(filepath.Join(catalogue, "*"))
	if err != nil {
		f.Fatal(err)
	}
	for _, path := range files {
		b, err := os.ReadFile(path)
		if err != nil {
			f.Fatal(err)
		}
		if strings.HasSuffix(path, ".gz") {
			// The parser sees text; seed with what the loader would hand it.
			if zr, err := gzip.NewReader(bytes.NewReader(b)); err == nil {
				b, _ = io.ReadAll(zr)
			}
		}
		f.Add(b)
	}
	// Limits keep the fuzzer from spending its time on huge claimed sizes;
	// they are part of what is tested.
	opt := &Options{Limits: Limits{MaxRows: 1 << 12, MaxCols: 1 << 12, MaxEntries: 1 << 14, MaxBytes: 1 << 20}}
	f.Fuzz(func(t *testing.T, data []byte) {
		a, info, err := ReadMatrix(bytes.NewReader(data), opt)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %v (%T) is not a *ParseError", err, err)
			}
			if pe.Line < 1 {
				t.Fatalf("error %v has line %d", err, pe.Line)
			}
			return
		}
		if err := a.Validate(); err != nil {
			t.Fatalf("invalid CSR from %q: %v", data, err)
		}
		if info.Nonzeros != a.NNZ() {
			t.Fatalf("Info.Nonzeros %d, CSR holds %d", info.Nonzeros, a.NNZ())
		}
		sym := sparse.General
		switch info.Header.Symmetry {
		case "symmetric":
			sym = sparse.Symmetric
		case "skew-symmetric":
			sym = sparse.SkewSymmetric
		}
		var buf bytes.Buffer
		if err := WriteMatrix(&buf, a, sym); err != nil {
			// The expanded matrix of a symmetric file is symmetric bit for
			// bit, so only a general write could be refused (never).
			t.Fatalf("write of %q as %v: %v", data, sym, err)
		}
		b, binfo, err := ReadMatrix(bytes.NewReader(buf.Bytes()), nil)
		if err != nil {
			t.Fatalf("re-read of\n%s\nfailed: %v", buf.Bytes(), err)
		}
		sameCSR(t, "fuzz round trip", b, a)
		if binfo.Duplicates != 0 {
			t.Fatalf("the writer wrote %d duplicates", binfo.Duplicates)
		}
	})
}
