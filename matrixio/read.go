package matrixio

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
	"runtime"
	"sync"

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
	if err == nil {
		err = h.admit(hd, o.Admit)
	}
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
	// The entries are checked and counted per row as the chunks arrive, on
	// this goroutine while the next chunks are parsed.
	asm, err := sparse.NewAssembler(hd.rows, hd.cols, sparse.BuildOptions{Symmetry: hd.sym, DropZeros: o.DropZeros})
	if err != nil {
		return nil, info, fmt.Errorf("matrixio: assembling %s: %w", nameOr(file), err)
	}
	err = d.each(func(c *chunk) error {
		t := c.t
		if hd.object == objVector {
			// A coordinate vector holds row indices only; it is a one-column matrix.
			t.J = make([]int32, len(t.I))
		}
		if err := asm.Add(t); err != nil {
			// The data were checked line by line, so this is a defect of
			// this package, not of the input.
			return fmt.Errorf("matrixio: assembling %s: %w", nameOr(file), err)
		}
		return nil
	})
	info.Bytes = h.bytes
	if err != nil {
		return nil, info, err
	}
	a, stats, err := asm.Build()
	if err != nil {
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
				x[p] += v
				continue
			}
			seen[p] = true
			x[p] = v // as given, so that a lone -0 keeps its sign
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

// chunkSize is the amount of text parsed as one piece. Pieces are parsed in
// parallel; a few of them are in flight at a time, so the text held at once
// stays near (3·GOMAXPROCS+2)·chunkSize however large the file.
const chunkSize = 1 << 20

// chunker cuts the data section into chunks of whole lines.
type chunker struct {
	r     io.Reader
	carry []byte      // start of a line that the previous chunk cut
	free  chan []byte // buffers handed back by the consumer, or nil
	size  int         // size of the next chunk: doubles from firstChunk up to chunkSize
}

// firstChunk is the size of the first chunk, so that a small input (a
// request to the server, a test file) does not cost a full chunk buffer.
const firstChunk = 64 << 10

// next returns the next chunk. The last chunk has final set; it carries the
// read error that ended the input early (readErr) or a line longer than
// maxLine (tooLong), if any.
func (k *chunker) next() *chunk {
	for {
		var buf []byte
		select {
		case buf = <-k.free:
		default:
		}
		if k.size == 0 {
			k.size = firstChunk
		}
		size := k.size
		k.size = min(2*k.size, chunkSize)
		if cap(buf) < size+len(k.carry) {
			buf = make([]byte, 0, size+len(k.carry)+size/16)
		}
		buf = append(buf[:0], k.carry...)
		n, err := fill(k.r, buf[len(buf):size+len(buf)])
		buf = buf[:len(buf)+n]
		switch {
		case err == nil:
			cut := bytes.LastIndexByte(buf, '\n')
			if cut < 0 {
				if len(buf) > maxLine {
					return &chunk{final: true, tooLong: true}
				}
				k.carry = buf // a line longer than a chunk: read on
				continue
			}
			k.carry = append(k.carry[:0:0], buf[cut+1:]...)
			return &chunk{text: buf[:cut+1]}
		case err == io.EOF:
			// The last line may lack its '\n'; it is complete all the same.
			return &chunk{text: buf, final: true}
		default:
			// Parse the complete lines; the cut one is where the input broke.
			cut := bytes.LastIndexByte(buf, '\n')
			return &chunk{text: buf[:cut+1], final: true, readErr: err}
		}
	}
}

// fill reads until buf is full or the reader fails; it returns io.EOF only
// at the end of the input, and passes any other error (a truncated gzip
// stream's io.ErrUnexpectedEOF among them) through unchanged.
func fill(r io.Reader, buf []byte) (int, error) {
	n := 0
	for n < len(buf) {
		m, err := r.Read(buf[n:])
		n += m
		if err != nil {
			return n, err
		}
	}
	return n, nil
}

// each parses the data chunk by chunk and hands each chunk, in file order,
// to use.
//
// Input that fits one chunk is parsed on the caller's goroutine. Longer input
// goes through a pipeline: one goroutine reads chunks, GOMAXPROCS goroutines
// parse them, and the caller checks them in order (accept) and hands them to
// use. The first error in file order stops the reading; every goroutine has
// ended when each returns.
func (d *dataReader) each(use func(c *chunk) error) error {
	p := &dataParser{hd: d.hd, slabs: slabs{claimed: d.hd.entries}}
	k := &chunker{r: d.h.br, free: make(chan []byte, 4)}
	first := k.next()
	if first.final {
		p.parse(first)
		return d.consume(first, use)
	}
	workers := runtime.GOMAXPROCS(0)
	work := make(chan *chunk, workers)
	order := make(chan *chunk, 2*workers)
	stop := make(chan struct{})
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for c := range work {
				p.parse(c)
				close(c.done)
			}
		}()
	}
	wg.Add(1)
	go func() {
		defer wg.Done()
		defer close(order)
		defer close(work)
		c := first
		for {
			c.done = make(chan struct{})
			work <- c
			order <- c
			if c.final {
				return
			}
			select {
			case <-stop:
				return
			default:
			}
			c = k.next()
		}
	}()
	var err error
	for c := range order {
		<-c.done
		if err == nil {
			if err = d.consume(c, use); err != nil {
				close(stop)
			}
		}
		select {
		case k.free <- c.text:
		default:
		}
		c.text = nil
	}
	wg.Wait()
	return err
}

// consume checks a parsed chunk in file order and hands it to use; after
// the final chunk it checks the entry count.
func (d *dataReader) consume(c *chunk, use func(c *chunk) error) error {
	if lim := d.h.limits.MaxBytes; lim > 0 && d.h.bytes+int64(len(c.text)) > lim {
		over := int(lim - d.h.bytes)
		return d.h.errorf(d.line+1+bytes.Count(c.text[:over], []byte{'\n'}), 0, ErrLimit, "input longer than the limit of %d bytes", lim)
	}
	d.h.bytes += int64(len(c.text))
	if err := d.accept(c); err != nil {
		return err
	}
	if err := use(c); err != nil {
		return err
	}
	if !c.final {
		return nil
	}
	if c.tooLong {
		return d.h.errorf(d.line+1, 0, ErrEntryFields, "expected an entry, found a line longer than %d bytes", maxLine)
	}
	return d.atEnd(c.readErr)
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
				pick(cand{lo, 1, reason(ErrBothTriangles, "expected upper-triangle entries only, like a(%d,%d) on line %d, found a(%d,%d) below the diagonal", upRC[0], upRC[1], up, loRC[0], loRC[1])})
			} else {
				pick(cand{up, 1, reason(ErrBothTriangles, "expected lower-triangle entries only, like a(%d,%d) on line %d, found a(%d,%d) above the diagonal", loRC[0], loRC[1], lo, upRC[0], upRC[1])})
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
		return &ParseError{File: d.h.file, Line: d.line + 1, Err: fmt.Errorf("input broke off after line %d (%d of %d entries read): %w", d.line, d.entries, d.hd.entries, readErr)}
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
