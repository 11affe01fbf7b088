package matrixio

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"strings"

	"github.com/residua/residua/sparse"
)

// Header holds the four words of a Matrix Market banner line, in lower case
// as the format defines them (Boisvert, Pozo, Remington, NIST, 1996, §2):
// "%%MatrixMarket <object> <format> <field> <symmetry>".
type Header struct {
	Object   string // "matrix" or "vector"
	Format   string // "coordinate" or "array"
	Field    string // "real", "double", "integer" or "pattern"
	Symmetry string // "general", "symmetric" or "skew-symmetric"
}

// Info describes what a read found.
type Info struct {
	Header     Header
	Rows, Cols int
	// Entries is the number of entries stored in the file: the size line's
	// count for coordinate files, the number of values for array files (one
	// triangle for symmetric ones).
	Entries int
	// Nonzeros is the number of entries stored in the result after
	// symmetric expansion, duplicate summing and (if asked) dropping zeros.
	Nonzeros int
	// Duplicates is the number of entries that were summed into an earlier
	// entry with the same row and column.
	Duplicates int
	// ExplicitZeros is the number of zero values in the full matrix after
	// summing duplicates (dropped or not, see Options.DropZeros).
	ExplicitZeros int
	// Bytes is the length of the Matrix Market text read (after
	// decompression).
	Bytes int64
	// Comments holds the comment lines before the size line, without their
	// leading '%'. Each is cut at maxCommentLen bytes and at most
	// maxComments are kept.
	Comments []string
}

// Limits bound what a read accepts. A zero field means no limit. The sizes are
// checked against the size line before any storage is allocated, so a short
// file that claims a huge matrix is refused at once.
type Limits struct {
	MaxRows, MaxCols int
	// MaxEntries bounds the entries stored in the file (the size line's count
	// for coordinate files, the number of values for array files).
	MaxEntries int
	// MaxBytes bounds the length of the text read (after decompression).
	MaxBytes int64
	// RefuseMostlyEmpty refuses a coordinate matrix size line under which more than
	// half of the rows or of the columns must be empty (see MostlyEmpty),
	// with ErrMostlyEmpty. Such a matrix is legal, but its row pointers cost
	// 8 bytes a row whatever the file's length, so a few bytes of text can
	// ask for gigabytes; a reader that accepts any file leaves this off.
	RefuseMostlyEmpty bool
}

// MostlyEmpty reports whether a rows×cols matrix holding at most entries
// stored entries (after symmetric expansion) necessarily leaves more than
// half of its rows or of its columns without an entry: each entry fills one
// row and one column, so at most entries rows and entries columns are
// nonempty. The rule (half) is our own choice: a matrix from a
// discretisation or a least-squares design has at least one entry per row
// and per column, and a deliberately padded one rarely pads by more.
func MostlyEmpty(rows, cols, entries int64) bool {
	return max(rows, cols) > 2*entries
}

// Size is what a size line declares, as Options.Admit sees it.
type Size struct {
	Rows, Cols int
	// Entries is the count of entries stored in the file; Stored bounds
	// the entries of the result after symmetric expansion (2·Entries for
	// symmetric and skew-symmetric storage, at most Rows·Cols).
	Entries, Stored int
	// Coordinate is false for array (dense) files.
	Coordinate bool
}

// Options are the settings of a read. A nil *Options or the zero value means no
// limits and explicit zeros kept.
type Options struct {
	Limits Limits
	// DropZeros removes entries whose value is zero after duplicates are
	// summed; by default they are kept as part of the sparsity pattern.
	DropZeros bool
	// Admit, when set, is called once the size line has passed the limits
	// and before anything is allocated for the entries, so that a caller
	// can charge the matrix's cost against a budget of its own (the
	// server's memory budget). An error it returns ends the read, as a
	// *ParseError at the size line wrapping that error.
	Admit func(Size) error
}

const (
	maxCommentLen = 4096
	maxComments   = 10000
	maxHeaderLine = 1 << 16 // banner and size lines longer than this are malformed
)

type objectKind int

const (
	objMatrix objectKind = iota
	objVector
)

type fieldKind int

const (
	fieldReal fieldKind = iota
	fieldInteger
	fieldPattern
)

// header is the parsed banner and size line.
type header struct {
	Header
	object  objectKind
	array   bool
	field   fieldKind
	sym     sparse.Symmetry
	rows    int
	cols    int
	entries int // stored entries: from the size line, or computed for array files
}

// headReader reads the lines before the data: banner, comments, size line.
type headReader struct {
	br     *bufio.Reader
	file   string
	line   int   // number of the last line read
	bytes  int64 // bytes consumed so far
	limits Limits
	// sizeLine is the number of the size line, once read.
	sizeLine int
}

func (h *headReader) errorf(line, col int, base error, format string, args ...any) error {
	return &ParseError{File: h.file, Line: line, Column: col, Err: reason(base, format, args...)}
}

// readLine returns the next line without its line ending. A line longer than
// keep is cut to keep bytes (the rest is consumed). At the end of the input it
// returns io.EOF when nothing was read.
func (h *headReader) readLine(keep int) ([]byte, error) {
	var out []byte
	for {
		frag, err := h.br.ReadSlice('\n')
		h.bytes += int64(len(frag))
		if h.limits.MaxBytes > 0 && h.bytes > h.limits.MaxBytes {
			return nil, h.errorf(h.line+1, 0, ErrLimit, "input longer than the limit of %d bytes", h.limits.MaxBytes)
		}
		if room := keep - len(out); room > 0 {
			out = append(out, frag[:min(room, len(frag))]...)
		}
		switch {
		case err == nil:
			h.line++
			return trimEOL(out), nil
		case errors.Is(err, bufio.ErrBufferFull):
			continue
		case err == io.EOF:
			if len(frag) == 0 && out == nil {
				return nil, io.EOF
			}
			h.line++
			return trimEOL(out), nil
		default:
			return nil, &ParseError{File: h.file, Line: h.line + 1, Err: fmt.Errorf("reading line %d: %w", h.line+1, err)}
		}
	}
}

func trimEOL(b []byte) []byte {
	b = bytes.TrimSuffix(b, []byte("\n"))
	return bytes.TrimSuffix(b, []byte("\r"))
}

func isBlank(c byte) bool { return c == ' ' || c == '\t' || c == '\r' || c == '\v' || c == '\f' }

// words splits a line at blanks and reports each word's 1-based column.
func words(line []byte) (w []string, col []int) {
	i := 0
	for i < len(line) {
		for i < len(line) && isBlank(line[i]) {
			i++
		}
		if i == len(line) {
			break
		}
		start := i
		for i < len(line) && !isBlank(line[i]) {
			i++
		}
		w = append(w, string(line[start:i]))
		col = append(col, start+1)
	}
	return w, col
}

const bannerWant = `"%%MatrixMarket matrix coordinate|array real|double|integer|pattern general|symmetric|skew-symmetric"`

// readHeader reads the banner, the comments and the size line, and checks the
// sizes against the limits.
func (h *headReader) readHeader(info *Info) (*header, error) {
	var line []byte
	var err error
	for {
		line, err = h.readLine(maxHeaderLine)
		if err == io.EOF {
			return nil, h.errorf(h.line+1, 0, io.ErrUnexpectedEOF, "empty input: expected the banner %s", bannerWant)
		}
		if err != nil {
			return nil, err
		}
		if len(bytes.TrimLeft(line, " \t\r\v\f")) > 0 {
			break
		}
	}
	hd, err := h.parseBanner(line)
	if err != nil {
		return nil, err
	}
	info.Header = hd.Header

	// Comments and blank lines up to the size line.
	for {
		line, err = h.readLine(maxHeaderLine)
		if err == io.EOF {
			return nil, h.errorf(h.line+1, 0, io.ErrUnexpectedEOF, "input ends before the size line")
		}
		if err != nil {
			return nil, err
		}
		t := bytes.TrimLeft(line, " \t\r\v\f")
		if len(t) == 0 {
			continue
		}
		if t[0] == '%' {
			if len(info.Comments) < maxComments {
				info.Comments = append(info.Comments, string(t[1:min(len(t), maxCommentLen+1)]))
			}
			continue
		}
		break
	}
	if err := h.parseSize(hd, line); err != nil {
		return nil, err
	}
	info.Rows, info.Cols, info.Entries = hd.rows, hd.cols, hd.entries
	return hd, nil
}

func (h *headReader) parseBanner(line []byte) (*header, error) {
	w, col := words(line)
	ln := h.line
	if len(w) == 0 || !strings.EqualFold(w[0], "%%MatrixMarket") {
		found := ""
		if len(w) > 0 {
			found = w[0]
		}
		return nil, h.errorf(ln, 1, ErrBanner, "expected %s, found %q", bannerWant, clip(found))
	}
	if len(w) != 5 {
		return nil, h.errorf(ln, 1, ErrBanner, "expected 5 words %s, found %d words", bannerWant, len(w))
	}
	for k := 1; k < 5; k++ {
		w[k] = strings.ToLower(w[k])
	}
	hd := &header{Header: Header{Object: w[1], Format: w[2], Field: w[3], Symmetry: w[4]}}
	switch w[1] {
	case "matrix":
		hd.object = objMatrix
	case "vector":
		hd.object = objVector
	default:
		return nil, h.errorf(ln, col[1], ErrObject, `expected "matrix" or "vector", found %q`, clip(w[1]))
	}
	switch w[2] {
	case "coordinate":
	case "array":
		hd.array = true
	default:
		return nil, h.errorf(ln, col[2], ErrFormat, `expected "coordinate" or "array", found %q`, clip(w[2]))
	}
	switch w[3] {
	case "real", "double":
		hd.field = fieldReal
	case "integer":
		hd.field = fieldInteger
	case "pattern":
		if hd.array {
			return nil, h.errorf(ln, col[3], ErrField, `field "pattern" needs the coordinate format, found "array"`)
		}
		hd.field = fieldPattern
	case "complex":
		return nil, h.errorf(ln, col[3], ErrComplex, `field "complex": residua solves real systems; expected "real", "double", "integer" or "pattern"`)
	default:
		return nil, h.errorf(ln, col[3], ErrField, `expected "real", "double", "integer" or "pattern", found %q`, clip(w[3]))
	}
	switch w[4] {
	case "general":
		hd.sym = sparse.General
	case "symmetric":
		hd.sym = sparse.Symmetric
	case "skew-symmetric":
		if hd.field == fieldPattern {
			return nil, h.errorf(ln, col[4], ErrSymmetry, `"skew-symmetric" needs values, found field "pattern"`)
		}
		hd.sym = sparse.SkewSymmetric
	case "hermitian":
		return nil, h.errorf(ln, col[4], ErrComplex, `symmetry "hermitian" is for complex matrices: residua solves real systems; expected "general", "symmetric" or "skew-symmetric"`)
	default:
		return nil, h.errorf(ln, col[4], ErrSymmetry, `expected "general", "symmetric" or "skew-symmetric", found %q`, clip(w[4]))
	}
	if hd.object == objVector && hd.sym != sparse.General {
		return nil, h.errorf(ln, col[4], ErrSymmetry, `a vector is "general", found %q`, w[4])
	}
	return hd, nil
}

// parseSize reads the size line: "rows cols entries" (matrix coordinate),
// "rows cols" (matrix array), "n entries" (vector coordinate) or "n" (vector
// array), and checks it against the limits.
func (h *headReader) parseSize(hd *header, line []byte) error {
	ln := h.line
	var names []string
	switch {
	case hd.object == objMatrix && !hd.array:
		names = []string{"rows", "columns", "entries"}
	case hd.object == objMatrix:
		names = []string{"rows", "columns"}
	case !hd.array:
		names = []string{"length", "entries"}
	default:
		names = []string{"length"}
	}
	w, col := words(line)
	if len(w) != len(names) {
		return h.errorf(ln, 1, ErrSizeLine, "expected %d integers (%s), found %d words in %q", len(names), strings.Join(names, ", "), len(w), clip(string(line)))
	}
	nums := make([]int, len(w))
	for k, s := range w {
		n, ok := parseUint(s)
		if !ok {
			return h.errorf(ln, col[k], ErrSizeLine, "expected a non-negative integer for %s, found %q", names[k], clip(s))
		}
		nums[k] = n
	}
	if hd.object == objMatrix {
		hd.rows, hd.cols = nums[0], nums[1]
	} else {
		hd.rows, hd.cols = nums[0], 1
	}
	for k, n := range []int{hd.rows, hd.cols} {
		if n > sparse.MaxDim {
			c := col[0]
			if k == 1 && hd.object == objMatrix {
				c = col[1]
			}
			return h.errorf(ln, c, ErrSizeLine, "expected %s at most %d, found %d", names[min(k, len(names)-1)], sparse.MaxDim, n)
		}
	}
	if hd.sym != sparse.General && hd.rows != hd.cols {
		return h.errorf(ln, 1, ErrSizeLine, "a %s matrix is square, found %d×%d", hd.Symmetry, hd.rows, hd.cols)
	}
	if hd.array {
		m, n := hd.rows, hd.cols
		switch hd.sym {
		case sparse.General:
			hd.entries = m * n
		case sparse.Symmetric:
			hd.entries = n * (n + 1) / 2
		case sparse.SkewSymmetric:
			hd.entries = n * (n - 1) / 2
		}
	} else {
		hd.entries = nums[len(nums)-1]
	}
	lim := h.limits
	switch {
	case lim.MaxRows > 0 && hd.rows > lim.MaxRows:
		return h.errorf(ln, col[0], ErrLimit, "%d rows exceed the limit of %d", hd.rows, lim.MaxRows)
	case lim.MaxCols > 0 && hd.cols > lim.MaxCols:
		c := col[0]
		if len(col) > 1 && hd.object == objMatrix {
			c = col[1]
		}
		return h.errorf(ln, c, ErrLimit, "%d columns exceed the limit of %d", hd.cols, lim.MaxCols)
	case lim.MaxEntries > 0 && hd.entries > lim.MaxEntries:
		c := 1
		if !hd.array {
			c = col[len(col)-1]
		}
		return h.errorf(ln, c, ErrLimit, "%d stored entries exceed the limit of %d", hd.entries, lim.MaxEntries)
	case lim.RefuseMostlyEmpty && hd.object == objMatrix && !hd.array && MostlyEmpty(int64(hd.rows), int64(hd.cols), int64(hd.stored())):
		return h.errorf(ln, col[0], ErrMostlyEmpty, "a %d×%d matrix with %d entries in the file leaves more than half of its rows or columns empty; "+
			"empty rows are legal, but this one costs %d bytes of row pointers for a few bytes of text: allow it explicitly if it is meant",
			hd.rows, hd.cols, hd.entries, 8*(int64(hd.rows)+1))
	}
	h.sizeLine = ln
	return nil
}

// stored bounds the entries of the result after symmetric expansion.
func (hd *header) stored() int {
	e := hd.entries
	if hd.sym != sparse.General {
		e *= 2
	}
	if hd.rows > 0 && hd.cols > 0 && e/hd.rows >= hd.cols {
		e = hd.rows * hd.cols
	}
	return e
}

// admit runs opt.Admit, if any, on the size line just read.
func (h *headReader) admit(hd *header, admit func(Size) error) error {
	if admit == nil {
		return nil
	}
	err := admit(Size{Rows: hd.rows, Cols: hd.cols, Entries: hd.entries, Stored: hd.stored(), Coordinate: !hd.array})
	if err != nil {
		return &ParseError{File: h.file, Line: h.sizeLine, Err: err}
	}
	return nil
}

// parseUint parses a decimal non-negative integer that fits an int.
func parseUint(s string) (int, bool) {
	if len(s) == 0 || len(s) > 18 {
		// 18 digits stay below 2^63; longer counts are absurd here.
		return 0, false
	}
	n := 0
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < '0' || c > '9' {
			return 0, false
		}
		n = n*10 + int(c-'0')
	}
	return n, true
}

// clip shortens text quoted in an error message.
func clip(s string) string {
	const keep = 40
	if len(s) > keep {
		return s[:keep] + "..."
	}
	return s
}
