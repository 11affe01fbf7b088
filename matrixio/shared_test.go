package matrixio

import (
	"archive/tar"
	"bufio"
	"bytes"
	"compress/gzip"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/sparse"
)

// indexRow is one row of ../shared/matrices/ssmc_index.tsv, the collection's
// own index (made from the SuiteSparse Matrix Collection's per-matrix records).
type indexRow struct {
	rows, cols, nonzeros, explicitZeros int
}

func readIndex(t *testing.T, dir string) map[string]indexRow {
	t.Helper()
	f, err := os.Open(filepath.Join(dir, "ssmc_index.tsv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	var col map[string]int
	out := map[string]indexRow{}
	for sc.Scan() {
		fields := strings.Split(sc.Text(), "\t")
		if col == nil {
			col = map[string]int{}
			for i, name := range fields {
				col[name] = i
			}
			continue
		}
		num := func(name string) int {
			n, err := strconv.Atoi(fields[col[name]])
			if err != nil {
				t.Fatalf("ssmc_index.tsv: %s/%s column %s: %v", fields[col["group"]], fields[col["name"]], name, err)
			}
			return n
		}
		out[fields[col["group"]]+"/"+fields[col["name"]]] = indexRow{num("num_rows"), num("num_cols"), num("nonzeros"), num("num_explicit_zeros")}
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}

// plainText returns the uncompressed Matrix Market text of a shared file.
func plainText(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if strings.HasSuffix(path, ".gz") {
		zr, err := gzip.NewReader(bytes.NewReader(b))
		if err != nil {
			t.Fatal(err)
		}
		if b, err = io.ReadAll(zr); err != nil {
			t.Fatal(err)
		}
	}
	return b
}

func gzipBytes(t *testing.T, b []byte) []byte {
	t.Helper()
	var buf bytes.Buffer
	zw, err := gzip.NewWriterLevel(&buf, gzip.BestSpeed)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := zw.Write(b); err != nil {
		t.Fatal(err)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// writeBundle writes NAME.tar.gz in dir in the collection's layout:
// NAME/NAME.mtx and, when rhs is not nil, NAME/NAME_b.mtx.
func writeBundle(t *testing.T, dir, name string, mtx, rhs []byte) string {
	t.Helper()
	var buf bytes.Buffer
	zw, err := gzip.NewWriterLevel(&buf, gzip.BestSpeed)
	if err != nil {
		t.Fatal(err)
	}
	tw := tar.NewWriter(zw)
	add := func(member string, body []byte) {
		if err := tw.WriteHeader(&tar.Header{Name: member, Mode: 0o644, Size: int64(len(body)), Typeflag: tar.TypeReg}); err != nil {
			t.Fatal(err)
		}
		if _, err := tw.Write(body); err != nil {
			t.Fatal(err)
		}
	}
	if err := tw.WriteHeader(&tar.Header{Name: name + "/", Mode: 0o755, Typeflag: tar.TypeDir}); err != nil {
		t.Fatal(err)
	}
	add(name+"/"+name+".mtx", mtx)
	if rhs != nil {
		add(name+"/"+name+"_b.mtx", rhs)
	}
	if err := tw.Close(); err != nil {
		t.Fatal(err)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, name+".tar.gz")
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// sameCSR reports whether a and b hold the same arrays, values compared bit
// for bit (so -0 and 0 differ).
func sameCSR(t *testing.T, what string, a, b *sparse.CSR) {
	t.Helper()
	if a.Rows != b.Rows || a.Cols != b.Cols || len(a.ColIdx) != len(b.ColIdx) {
		t.Fatalf("%s: %d×%d with %d entries, want %d×%d with %d", what, a.Rows, a.Cols, len(a.ColIdx), b.Rows, b.Cols, len(b.ColIdx))
	}
	for i := range a.RowPtr {
		if a.RowPtr[i] != b.RowPtr[i] {
			t.Fatalf("%s: RowPtr[%d] = %d, want %d", what, i, a.RowPtr[i], b.RowPtr[i])
		}
	}
	for p := range a.ColIdx {
		if a.ColIdx[p] != b.ColIdx[p] || math.Float64bits(a.Val[p]) != math.Float64bits(b.Val[p]) {
			t.Fatalf("%s: entry %d is (col %d, %v), want (col %d, %v)", what, p, a.ColIdx[p], a.Val[p], b.ColIdx[p], b.Val[p])
		}
	}
}

func sameVec(t *testing.T, what string, x, y []float64) {
	t.Helper()
	if len(x) != len(y) {
		t.Fatalf("%s: length %d, want %d", what, len(x), len(y))
	}
	for i := range x {
		if math.Float64bits(x[i]) != math.Float64bits(y[i]) {
			t.Fatalf("%s: x[%d] = %v, want %v", what, i, x[i], y[i])
		}
	}
}

// TestSharedMatrices reads every file of ../shared/matrices/MANIFEST.tsv as
// stored (plain or gzip), from a gzip stream, and from a bundle built in the
// collection's layout, and checks the sizes against the manifest and against
// the collection's own index (ssmc_index.tsv: rows, cols, nonzeros of the
// full matrix without explicit zeros, and the explicit zeros).
func TestSharedMatrices(t *testing.T) {
	dir := shared.Matrices(t)
	index := readIndex(t, dir)
	entries := shared.Manifest(t)
	byFile := map[string]shared.Entry{}
	for _, e := range entries {
		byFile[e.File] = e
	}
	tmp := t.TempDir()
	for _, e := range entries {
		t.Run(e.File, func(t *testing.T) {
			path := e.Path(dir)
			text := plainText(t, path)
			if e.Kind == "rhs" || e.Kind == "solution" {
				x, info, err := ReadVectorFile(path, nil)
				if err != nil {
					t.Fatal(err)
				}
				// The manifest's rows, cols and stored entries.
				if len(x) != e.Rows*e.Cols || info.Rows != e.Rows || info.Cols != e.Cols || info.Entries != e.StoredEntries {
					t.Errorf("vector of %d (%d×%d, %d entries), manifest says %d×%d with %d", len(x), info.Rows, info.Cols, info.Entries, e.Rows, e.Cols, e.StoredEntries)
				}
				if _, _, err := ReadVector(bytes.NewReader(gzipBytes(t, text)), nil); err == nil {
					t.Error("ReadVector accepted gzip bytes; decompression belongs to the loader")
				}
				y, _, err := ReadVector(bytes.NewReader(text), nil)
				if err != nil {
					t.Fatal(err)
				}
				sameVec(t, "stream", y, x)
				return
			}
			a, info, err := ReadMatrixFile(path, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := a.Validate(); err != nil {
				t.Fatal(err)
			}
			// The manifest: dimensions, entries stored in the file and the header's symmetry.
			if info.Rows != e.Rows || info.Cols != e.Cols || info.Entries != e.StoredEntries || info.Header.Symmetry != e.Symmetry {
				t.Errorf("read %d×%d, %d entries, %s; manifest says %d×%d, %d entries, %s",
					info.Rows, info.Cols, info.Entries, info.Header.Symmetry, e.Rows, e.Cols, e.StoredEntries, e.Symmetry)
			}
			// The collection's index: its nonzeros count the full matrix
			// without explicit zeros; its explicit zeros are counted apart.
			ix, ok := index[e.Group+"/"+e.Name]
			if !ok {
				t.Fatalf("%s/%s not in ssmc_index.tsv", e.Group, e.Name)
			}
			if a.Rows != ix.rows || a.Cols != ix.cols || a.NNZ()-info.ExplicitZeros != ix.nonzeros || info.ExplicitZeros != ix.explicitZeros {
				t.Errorf("%d×%d, %d nonzeros and %d explicit zeros; ssmc_index.tsv says %d×%d, %d and %d",
					a.Rows, a.Cols, a.NNZ()-info.ExplicitZeros, info.ExplicitZeros, ix.rows, ix.cols, ix.nonzeros, ix.explicitZeros)
			}
			// The README of the shared folder: no duplicates in any file.
			if info.Duplicates != 0 {
				t.Errorf("%d duplicates, the shared README says none", info.Duplicates)
			}

			// The same text as a plain stream and gzip-compressed in a file.
			b, _, err := ReadMatrix(bytes.NewReader(text), nil)
			if err != nil {
				t.Fatal(err)
			}
			sameCSR(t, "plain stream", b, a)
			gz := filepath.Join(tmp, e.Name+".mtx.gz")
			if err := os.WriteFile(gz, gzipBytes(t, text), 0o644); err != nil {
				t.Fatal(err)
			}
			b, _, err = ReadMatrixFile(gz, nil)
			if err != nil {
				t.Fatal(err)
			}
			sameCSR(t, "gzip file", b, a)

			// The collection's bundle layout, with the right-hand side where
			// the manifest names one.
			var rhs []byte
			if e.RHSFile != "" {
				rhs = plainText(t, byFile[e.RHSFile].Path(dir))
			}
			bundle := writeBundle(t, tmp, e.Name, text, rhs)
			b, binfo, err := ReadMatrixFile(bundle, nil)
			if err != nil {
				t.Fatal(err)
			}
			sameCSR(t, "bundle", b, a)
			if binfo.Entries != info.Entries {
				t.Errorf("bundle: %d entries, want %d", binfo.Entries, info.Entries)
			}
			x, _, err := ReadBundleRHS(bundle, nil)
			if rhs == nil {
				if !errorsIs(err, ErrNoRHS) {
					t.Errorf("ReadBundleRHS of a bundle without one: %v, want ErrNoRHS", err)
				}
			} else {
				if err != nil {
					t.Fatal(err)
				}
				y, _, err := ReadVectorFile(byFile[e.RHSFile].Path(dir), nil)
				if err != nil {
					t.Fatal(err)
				}
				sameVec(t, "bundle right-hand side", x, y)
				if len(x) != a.Rows {
					t.Errorf("right-hand side of %d for %d rows", len(x), a.Rows)
				}
			}
		})
	}
}

// TestSharedRoundTrip writes every shared matrix and reads it back: the
// arrays must be bit-identical (the writer's values are the shortest decimal
// that reads back exactly). Symmetric files are also written as one triangle,
// whose size line must count the manifest's stored entries.
func TestSharedRoundTrip(t *testing.T) {
	dir := shared.Matrices(t)
	for _, e := range shared.Manifest(t) {
		t.Run(e.File, func(t *testing.T) {
			if e.Kind == "rhs" || e.Kind == "solution" {
				x, _, err := ReadVectorFile(e.Path(dir), nil)
				if err != nil {
					t.Fatal(err)
				}
				var buf bytes.Buffer
				if err := WriteVector(&buf, x); err != nil {
					t.Fatal(err)
				}
				y, _, err := ReadVector(&buf, nil)
				if err != nil {
					t.Fatal(err)
				}
				sameVec(t, "round trip", y, x)
				return
			}
			a, info, err := ReadMatrixFile(e.Path(dir), nil)
			if err != nil {
				t.Fatal(err)
			}
			syms := []sparse.Symmetry{sparse.General}
			if e.Symmetry == "symmetric" {
				syms = append(syms, sparse.Symmetric)
			}
			for _, sym := range syms {
				var buf bytes.Buffer
				if err := WriteMatrix(&buf, a, sym); err != nil {
					t.Fatal(err)
				}
				b, binfo, err := ReadMatrix(&buf, nil)
				if err != nil {
					t.Fatal(err)
				}
				sameCSR(t, "round trip "+sym.String(), b, a)
				if sym == sparse.Symmetric && binfo.Entries != info.Entries {
					t.Errorf("symmetric write stores %d entries, the file had %d", binfo.Entries, info.Entries)
				}
			}
		})
	}
}

// A bundle saved under another name is still found by its members' shape
// (NAME/NAME.mtx), and a defect inside it names the member.
func TestBundleShape(t *testing.T) {
	dir := t.TempDir()
	text := []byte("%%MatrixMarket matrix coordinate real general\n2 2 1\n2 1 3\n")
	rhs := []byte("%%MatrixMarket matrix array real general\n2 1\n1\n2\n")
	p := writeBundle(t, dir, "truss", text, rhs)
	renamed := filepath.Join(dir, "download (1).tar.gz")
	if err := os.Rename(p, renamed); err != nil {
		t.Fatal(err)
	}
	a, _, err := ReadMatrixFile(renamed, nil)
	if err != nil || a.NNZ() != 1 || a.At(1, 0) != 3 {
		t.Fatalf("renamed bundle: %v", err)
	}
	x, _, err := ReadBundleRHS(renamed, nil)
	if err != nil || len(x) != 2 || x[1] != 2 {
		t.Fatalf("renamed bundle rhs: %v %v", x, err)
	}
	// A defect inside a bundle names the member.
	bad := writeBundle(t, dir, "beam", []byte("%%MatrixMarket matrix coordinate real general\n2 2 1\n3 1 3\n"), nil)
	_, _, err = ReadMatrixFile(bad, nil)
	var pe *ParseError
	if !errors.As(err, &pe) || pe.File != bad+"!beam/beam.mtx" || pe.Line != 3 || !errors.Is(err, ErrIndexRange) {
		t.Errorf("defect in bundle: %v", err)
	}
}
