package matrixio

import (
	"bufio"
	"bytes"
	"fmt"
	"io"

	"github.com/residua/residua/sparse"
)

// ReadMatrix reads a Matrix Market matrix from r (plain text; see
// ReadMatrixFile for compressed files and bundles) and returns it in CSR form
// with symmetric and skew-symmetric storage expanded to both triangles.
// A vector object of length n is returned as an n×1 matrix.
//
// The text is parsed as it streams in; only the entries, never the whole
// text, are held. A nil opt means no limits. Defects of the input are
// returned as a *ParseError.
func ReadMatrix(r io.Reader, opt *Options) (*sparse.CSR, Info, error) {
	return readMatrix(r, "", opt)
}

// ReadVector reads a Matrix Market vector from r: a vector object, or a
// matrix of n×1 or 1×n in array or coordinate format (entries absent from a
// coordinate file are zero, duplicates are summed).
func ReadVector(r io.Reader, opt *Options) ([]float64, Info, error) {
	return readVector(r, "", opt)
}

func optionsOrZero(opt *Options) Options {
	if opt == nil {
		return Options{}
	}
	return *opt
}

// newHeadReader wraps r so that no more than the byte limit (plus one byte,
// to detect the excess) is ever read from it.
func newHeadReader(r io.Reader, file string, o Options) *headReader {
	if o.Limits.MaxBytes > 0 {
		r = io.LimitReader(r, o.Limits.MaxBytes+1)
	}
	return &headReader{br: bufio.NewReaderSize(r, 64<<10), file: file, limits: o.Limits}
}

func readMatrix(r io.Reader, file string, opt *Options) (*sparse.CSR, Info, error) {
	o := optionsOrZero(opt)
	var info Info
	h := newHeadReader(r, file, o)
	hd, err := h.readHeader(&info)
	if err != nil {
		info.Bytes = h.bytes
		return nil, info, err
	}
	d := &dataReader{h: h, hd: hd, line: h.line}
	if hd.array {
		vals, err := d.readArray()
		info.Bytes = h.bytes
		if err != nil {
			return nil, info, err
		}
		a, zeros := arrayToCSR(hd, vals, o.DropZeros)
		info.Nonzeros, info.ExplicitZeros = a.NNZ(), zeros
		return a, info, nil
	}
	blocks, err := d.readCoordinate()
	info.Bytes = h.bytes
	if err != nil {
		return nil, info, err
	}
	if hd.object == objVector {
		// A coordinate vector holds row indices only; it is a one-column matrix.
		for b := range blocks {
			blocks[b].J = make([]int32, len(blocks[b].I))
		}
	}
	a, stats, err := sparse.FromTripletBlocks(hd.rows, hd.cols, blocks, sparse.BuildOptions{Symmetry: hd.sym, DropZeros: o.DropZeros})
	if err != nil {
		// The data were checked line by line above, so this is a defect of
		// this package, not of the input.
		return nil, info, fmt.Errorf("matrixio: assembling %s: %w", nameOr(file), err)
	}
	info.Nonzeros, info.Duplicates, info.ExplicitZeros = a.NNZ(), stats.Duplicates, stats.ExplicitZeros
	return a, info, nil
}

func nameOr(file string) string {
	if file == "" {
		return "<input>"
	}
	return file
}

func readVector(r io.Reader, file string, opt *Options) ([]float64, Info, error) {
	o := optionsOrZero(opt)
	var info Info
	h := newHeadReader(r, file, o)
	hd, err := h.readHeader(&info)
	if err != nil {
		info.Bytes = h.bytes
		return nil, info, err
	}
	if hd.object == objMatrix && hd.rows != 1 && hd.cols != 1 {
		return nil, info, h.errorf(h.line, 1, ErrShape, "expected a vector (n×1 or 1×n), found a %d×%d matrix", hd.rows, hd.cols)
	}
	d := &dataReader{h: h, hd: hd, line: h.line}
	if hd.array {
		vals, err := d.readArray()
		info.Bytes = h.bytes
		if err != nil {
			return nil, info, err
		}
		if hd.sym != sparse.General {
			// Only a 1×1 matrix is a symmetric vector; its one value is the diagonal.
			vals = vals[:min(len(vals), 1)]
		}
		info.Nonzeros = len(vals)
		for _, v := range vals {
			if v == 0 {
				info.ExplicitZeros++
			}
		}
		return vals, info, nil
	}
	blocks, err := d.readCoordinate()
	info.Bytes = h.bytes
	if err != nil {
		return nil, info, err
	}
	n := max(hd.rows, hd.cols)
	if hd.object == objVector {
		n = hd.rows
	}
	x := make([]float64, n)
	seen := make([]bool, n)
	for _, t := range blocks {
		for k, v := range t.V {
			p := int(t.I[k])
			if hd.object == objMatrix && hd.rows == 1 {
				p = int(t.J[k])
			}
			if seen[p] {
				info.Duplicates++
			}
			seen[p] = true
			x[p] += v
		}
	}
	for p, s := range seen {
		if s {
			info.Nonzeros++
			if x[p] == 0 {
				info.ExplicitZeros++
			}
		}
	}
	return x, info, nil
}

// dataReader reads the data section in chunks of whole lines.
type dataReader struct {
	h  *headReader
	hd *header

	line    int // lines consumed before the current chunk, header included
	entries int // entries accepted so far

	// First strictly lower and strictly upper entries seen (absolute line).
	lowerLine, upperLine int
	lowerRC, upperRC     [2]int
}

// chunkSize is the amount of text parsed as one piece.
const chunkSize = 1 << 20

// next reads the next chunk of whole lines; it returns nil at the end of
// the input. A read error other than io.EOF is returned after the last
// complete data.
func (d *dataReader) next(carry []byte) (c *chunk, rest []byte, readErr error) {
	buf := make([]byte, chunkSize+len(carry))
	n := copy(buf, carry)
	m, err := io.ReadFull(d.h.br, buf[n:])
	n += m
	buf = buf[:n]
	if err == io.EOF || err == io.ErrUnexpectedEOF {
		err = io.EOF
	}
	if n == 0 {
		return nil, nil, err
	}
	if err == nil {
		cut := bytes.LastIndexByte(buf, '\n')
		if cut < 0 {
			// One line longer than a chunk: keep reading it.
			return nil, buf, nil
		}
		rest = append([]byte(nil), buf[cut+1:]...)
		buf = buf[:cut+1]
	}
	return &chunk{text: buf}, rest, err
}

// each parses the data chunk by chunk and hands each to use in order.
func (d *dataReader) each(use func(c *chunk) error) error {
	p := &dataParser{hd: d.hd}
	var carry []byte
	for {
		c, rest, err := d.next(carry)
		carry = rest
		if c == nil && err == nil {
			if len(carry) > maxLine {
				return d.h.errorf(d.line+1, 0, ErrEntryFields, "expected an entry, found a line longer than %d bytes", maxLine)
			}
			continue
		}
		if c != nil {
			if lim := d.h.limits.MaxBytes; lim > 0 && d.h.bytes+int64(len(c.text)) > lim {
				over := int(lim - d.h.bytes)
				return d.h.errorf(d.line+1+bytes.Count(c.text[:over], []byte{'\n'}), 0, ErrLimit, "input longer than the limit of %d bytes", lim)
			}
			d.h.bytes += int64(len(c.text))
			p.parse(c)
			if e := d.accept(c); e != nil {
				return e
			}
			if c.err == nil {
				if e := use(c); e != nil {
					return e
				}
			}
		}
		if err != nil {
			if err == io.EOF {
				return d.atEnd(nil)
			}
			return d.atEnd(err)
		}
	}
}

// maxLine bounds the length of a data line.
const maxLine = 1 << 20

// accept checks a parsed chunk in file order: its own defect, the entry
// count, and entries on both sides of the diagonal across chunks. It returns
// the first error in file order.
func (d *dataReader) accept(c *chunk) error {
	hd := d.hd
	type cand struct {
		line, col int
		err       error
	}
	var first *cand
	pick := func(x cand) {
		if first == nil || x.line < first.line {
			first = &x
		}
	}
	if c.err != nil {
		pick(cand{d.line + c.errLine, c.errCol, c.err})
	}
	if d.entries+c.entries > hd.entries {
		k := hd.entries - d.entries + 1 // the first entry too many, counted in the chunk
		ln := entryLine(c.text, k)
		pick(cand{d.line + ln, 1, reason(ErrEntryCount, "expected %d entries as the size line says, found more", hd.entries)})
	}
	if hd.sym != sparse.General && !hd.array {
		lo, up := d.lowerLine, d.upperLine
		loRC, upRC := d.lowerRC, d.upperRC
		if lo == 0 && c.lowerLine > 0 {
			lo, loRC = d.line+c.lowerLine, c.lowerRC
		}
		if up == 0 && c.upperLine > 0 {
			up, upRC = d.line+c.upperLine, c.upperRC
		}
		if lo > 0 && up > 0 {
			if lo > up {
				pick(cand{lo, 1, reason(ErrBothTriangles, "expected entries on one side of the diagonal as line %d (a(%d,%d), upper triangle), found a(%d,%d) in the lower triangle", up, upRC[0], upRC[1], loRC[0], loRC[1])})
			} else {
				pick(cand{up, 1, reason(ErrBothTriangles, "expected entries on one side of the diagonal as line %d (a(%d,%d), lower triangle), found a(%d,%d) in the upper triangle", lo, loRC[0], loRC[1], upRC[0], upRC[1])})
			}
		}
		d.lowerLine, d.upperLine, d.lowerRC, d.upperRC = lo, up, loRC, upRC
	}
	if first != nil {
		return &ParseError{File: d.h.file, Line: first.line, Column: first.col, Err: first.err}
	}
	d.line += c.lines
	d.entries += c.entries
	return nil
}

// entryLine returns the relative line of the k-th non-blank line of text.
func entryLine(text []byte, k int) int {
	line := 0
	for len(text) > 0 {
		line++
		end := bytes.IndexByte(text, '\n')
		ln := text
		if end >= 0 {
			ln, text = text[:end], text[end+1:]
		} else {
			text = nil
		}
		if len(bytes.TrimLeft(ln, " \t\r\v\f")) > 0 {
			k--
			if k == 0 {
				return line
			}
		}
	}
	return line
}

// atEnd checks the entry count at the end of the input; readErr is the read
// error that ended it early, if any.
func (d *dataReader) atEnd(readErr error) error {
	if readErr != nil {
		return &ParseError{File: d.h.file, Line: d.line + 1, Err: fmt.Errorf("reading after line %d (%d of %d entries read): %w", d.line, d.entries, d.hd.entries, readErr)}
	}
	if d.entries < d.hd.entries {
		return &ParseError{File: d.h.file, Line: d.line + 1, Err: fmt.Errorf("%w: expected %d entries as the size line says, found %d", io.ErrUnexpectedEOF, d.hd.entries, d.entries)}
	}
	return nil
}

// readCoordinate reads the entries of a coordinate file.
func (d *dataReader) readCoordinate() ([]sparse.Triplets, error) {
	var blocks []sparse.Triplets
	err := d.each(func(c *chunk) error {
		if c.entries > 0 {
			blocks = append(blocks, c.t)
		}
		return nil
	})
	return blocks, err
}

// readArray reads the values of an array file in file order.
func (d *dataReader) readArray() ([]float64, error) {
	var vals []float64
	err := d.each(func(c *chunk) error {
		vals = append(vals, c.vals...)
		return nil
	})
	return vals, err
}

// arrayToCSR turns the values of an array file (column-major; one triangle
// by columns for symmetric and skew-symmetric files, diagonal included for
// symmetric, excluded for skew-symmetric, as in Boisvert, Pozo, Remington,
// NIST 1996, §3) into a CSR holding every entry. It returns the number of
// zero values in the full matrix.
func arrayToCSR(hd *header, vals []float64, dropZeros bool) (*sparse.CSR, int) {
	m, n := hd.rows, hd.cols
	full := make([]float64, m*n) // row-major
	k := 0
	switch hd.sym {
	case sparse.General:
		for c := 0; c < n; c++ {
			for r := 0; r < m; r++ {
				full[r*n+c] = vals[k]
				k++
			}
		}
	case sparse.Symmetric, sparse.SkewSymmetric:
		skew := hd.sym == sparse.SkewSymmetric
		for c := 0; c < n; c++ {
			first := c
			if skew {
				first = c + 1
			}
			for r := first; r < m; r++ {
				v := vals[k]
				k++
				full[r*n+c] = v
				if skew {
					v = -v
				}
				full[c*n+r] = v
			}
		}
	}
	zeros := 0
	for _, v := range full {
		if v == 0 {
			zeros++
		}
	}
	nnz := m * n
	if dropZeros {
		nnz -= zeros
	}
	a := &sparse.CSR{Rows: m, Cols: n, RowPtr: make([]int, m+1), ColIdx: make([]int32, nnz), Val: make([]float64, nnz)}
	p := 0
	for r := 0; r < m; r++ {
		for c := 0; c < n; c++ {
			v := full[r*n+c]
			if dropZeros && v == 0 {
				continue
			}
			a.ColIdx[p], a.Val[p] = int32(c), v
			p++
		}
		a.RowPtr[r+1] = p
	}
	return a, zeros
}
