package matrixio

import (
	"archive/tar"
	"bufio"
	"bytes"
	"compress/gzip"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/sparse"
)

// ReadMatrixFile reads a Matrix Market matrix from a file: plain text, gzip
// compressed (recognised by its content, whatever the name), or one of the
// collection's bundles NAME.tar.gz holding NAME/NAME.mtx, which is read
// straight from the archive without unpacking it to disk. Errors name the
// file (for a bundle, "path!NAME/NAME.mtx").
func ReadMatrixFile(path string, opt *Options) (*sparse.CSR, Info, error) {
	var a *sparse.CSR
	var info Info
	err := openText(path, "", func(r io.Reader, name string) error {
		var err error
		a, info, err = readMatrix(r, name, opt)
		return err
	})
	return a, info, err
}

// ReadVectorFile reads a Matrix Market vector (see ReadVector) from a plain
// or gzip-compressed file. For a bundle NAME.tar.gz it reads the right-hand
// side NAME/NAME_b.mtx, like ReadBundleRHS.
func ReadVectorFile(path string, opt *Options) ([]float64, Info, error) {
	var x []float64
	var info Info
	err := openText(path, "_b", func(r io.Reader, name string) error {
		var err error
		x, info, err = readVector(r, name, opt)
		return err
	})
	return x, info, err
}

// ReadColumnsFile reads right-hand sides from a plain or gzip-compressed
// Matrix Market file: a vector (one column, as ReadVectorFile reads it),
// or an n×k matrix in array or coordinate format, whose k columns it
// returns (entries absent from a coordinate file are zero). For a bundle
// NAME.tar.gz it reads NAME/NAME_b.mtx.
func ReadColumnsFile(path string, opt *Options) ([][]float64, Info, error) {
	var cols [][]float64
	var info Info
	err := openText(path, "_b", func(r io.Reader, name string) error {
		a, inf, err := readMatrix(r, name, opt)
		info = inf
		if err != nil {
			return err
		}
		k, n := a.Cols, a.Rows
		if n == 1 && k > 1 { // a row vector is one right-hand side
			k, n = 1, a.Cols
		}
		cols = make([][]float64, k)
		for j := range cols {
			cols[j] = make([]float64, n)
		}
		for i := 0; i < a.Rows; i++ {
			for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
				if k == 1 && a.Rows == 1 {
					cols[0][a.ColIdx[p]] = a.Val[p]
				} else {
					cols[a.ColIdx[p]][i] = a.Val[p]
				}
			}
		}
		return nil
	})
	return cols, info, err
}

// WriteColumnsFile writes cols as WriteColumns does, atomically:
// gzip-compressed if path ends in ".gz".
func WriteColumnsFile(path string, cols [][]float64) error {
	return writeFileAtomic(path, func(w io.Writer) error { return WriteColumns(w, cols) })
}

// ReadBundleRHS reads the right-hand side NAME/NAME_b.mtx of a collection
// bundle NAME.tar.gz. If the bundle holds none, the error wraps ErrNoRHS.
func ReadBundleRHS(path string, opt *Options) ([]float64, Info, error) {
	return ReadVectorFile(path, opt)
}

// bundleSuffixes are the file name endings of a collection bundle.
var bundleSuffixes = []string{".tar.gz", ".tgz", ".tar"}

// IsBundle reports whether path names a collection bundle NAME.tar.gz
// (also .tgz or .tar), which holds NAME/NAME.mtx and perhaps NAME_b.mtx.
func IsBundle(path string) bool {
	for _, ext := range bundleSuffixes {
		if strings.HasSuffix(path, ext) {
			return true
		}
	}
	return false
}

// bundleName returns NAME for a path ending in NAME.tar.gz or NAME.tgz.
func bundleName(path string) string {
	base := filepath.Base(path)
	for _, ext := range bundleSuffixes {
		if strings.HasSuffix(base, ext) {
			return strings.TrimSuffix(base, ext)
		}
	}
	return strings.TrimSuffix(base, filepath.Ext(base))
}

// openText opens path, undoes gzip compression and, for a tar bundle, finds
// the member NAME/NAME<suffix>.mtx, then hands the text and the name to use
// in messages to read.
func openText(path, suffix string, read func(r io.Reader, name string) error) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	br := bufio.NewReaderSize(f, 1<<20)
	var r io.Reader = br
	if magic, _ := br.Peek(2); len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		gz, err := gzip.NewReader(br)
		if err != nil {
			return &ParseError{File: path, Line: 1, Err: fmt.Errorf("reading gzip header: %w", err)}
		}
		defer gz.Close()
		r = gz
	}
	tb := bufio.NewReaderSize(r, 1<<20)
	if head, _ := tb.Peek(512); len(head) == 512 && bytes.HasPrefix(head[257:], []byte("ustar")) {
		// The collection's layout is NAME/NAME.mtx (and NAME/NAME_b.mtx)
		// in NAME.tar.gz. The member is found by that shape, so a bundle
		// saved under another file name still reads.
		tr := tar.NewReader(tb)
		for {
			hdr, err := tr.Next()
			if err == io.EOF {
				name := bundleName(path)
				want := name + "/" + name + suffix + ".mtx"
				if suffix == "_b" {
					return fmt.Errorf("matrixio: %s: no member %s: %w", path, want, ErrNoRHS)
				}
				return fmt.Errorf("matrixio: %s: no member %s: %w", path, want, os.ErrNotExist)
			}
			if err != nil {
				return fmt.Errorf("matrixio: %s: reading the archive: %w", path, err)
			}
			member := strings.TrimPrefix(hdr.Name, "./")
			dir, base, ok := strings.Cut(member, "/")
			if ok && hdr.Typeflag == tar.TypeReg && base == dir+suffix+".mtx" {
				return read(tr, path+"!"+member)
			}
		}
	}
	return read(tb, path)
}

// writeFileAtomic writes a file atomically (see internal/atomicfile: a run
// interrupted at any point leaves either the old file or the complete new
// one, never a part), buffered, and gzip-compressed when the path ends in
// ".gz".
func writeFileAtomic(path string, write func(w io.Writer) error) error {
	return atomicfile.Write(path, func(f io.Writer) error {
		bw := bufio.NewWriterSize(f, 1<<20)
		var w io.Writer = bw
		var gz *gzip.Writer
		if strings.HasSuffix(path, ".gz") {
			gz = gzip.NewWriter(bw)
			w = gz
		}
		if err := write(w); err != nil {
			return err
		}
		if gz != nil {
			if err := gz.Close(); err != nil {
				return err
			}
		}
		return bw.Flush()
	})
}

// WriteMatrixFile writes a as WriteMatrix does, atomically (see
// writeFileAtomic): gzip-compressed if path ends in ".gz".
func WriteMatrixFile(path string, a *sparse.CSR, sym sparse.Symmetry) error {
	return writeFileAtomic(path, func(w io.Writer) error { return WriteMatrix(w, a, sym) })
}

// WriteVectorFile writes x as WriteVector does, atomically: gzip-compressed if
// path ends in ".gz".
func WriteVectorFile(path string, x []float64) error {
	return writeFileAtomic(path, func(w io.Writer) error { return WriteVector(w, x) })
}
