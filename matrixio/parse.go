package matrixio

import (
	"bytes"
	"errors"
	"math"
	"strconv"

	"github.com/residua/residua/sparse"
)

// chunk is a piece of the data section made of whole lines, and what parsing
// it found. Line numbers inside a chunk are relative (1 = its first line); the
// ordered consumer adds the number of lines before it.
type chunk struct {
	text []byte

	final   bool          // the last chunk of the input
	readErr error         // final only: the read error that ended the input early
	tooLong bool          // final only: a line longer than maxLine was met
	done    chan struct{} // closed when parsed (pipeline only)

	t       sparse.Triplets // coordinate entries, 0-based (vectors use I only)
	vals    []float64       // array values, in file order
	lines   int             // lines in text (a last line without '\n' counts)
	entries int             // entries parsed (before err, if any)

	err     error // reason of the first defect in the chunk, or nil
	errLine int
	errCol  int

	// First strictly lower and strictly upper entry of a symmetric file:
	// relative line (0 if none) and 1-based indices.
	lowerLine, upperLine int
	lowerRC, upperRC     [2]int
}

// dataParser parses the data lines of one file.
type dataParser struct {
	hd    *header
	slabs slabs // the coordinate entries' arrays
}

// add records a coordinate entry (1-based indices, already checked against
// the size line) of line; it returns false if the entry is a defect.
func (c *chunk) add(hd *header, line, r, col int, v float64) bool {
	if hd.object == objVector {
		c.t.I = append(c.t.I, int32(r-1))
		c.t.V = append(c.t.V, v)
		c.entries++
		return true
	}
	if hd.sym != sparse.General {
		switch {
		case r > col:
			if c.lowerLine == 0 {
				c.lowerLine, c.lowerRC = line, [2]int{r, col}
			}
		case r < col:
			if c.upperLine == 0 {
				c.upperLine, c.upperRC = line, [2]int{r, col}
			}
		default:
			if hd.sym == sparse.SkewSymmetric && v != 0 {
				c.fail(line, 1, ErrSkewDiagonal, "expected no diagonal entry (the diagonal of a skew-symmetric matrix is zero), found a(%d,%d) = %s", r, col, strconv.FormatFloat(v, 'g', -1, 64))
				return false
			}
		}
	}
	c.t.I = append(c.t.I, int32(r-1))
	c.t.J = append(c.t.J, int32(col-1))
	c.t.V = append(c.t.V, v)
	c.entries++
	return true
}

// fastLines parses the lines from pos on with fastEntry for as long as it
// takes them, and returns where it stopped and the number of the last line
// taken.
func (c *chunk) fastLines(hd *header, b []byte, pos, line int) (int, int) {
	k := len(c.t.I)
	I, J, V := c.t.I[:cap(c.t.I)], c.t.J[:cap(c.t.J)], c.t.V[:cap(c.t.V)]
	sym := hd.sym
	for pos < len(b) && k < len(I) {
		r, col, v, next, ok := fastEntry(hd, b, pos)
		if !ok {
			break
		}
		if sym != sparse.General {
			switch {
			case r > col:
				if c.lowerLine == 0 {
					c.lowerLine, c.lowerRC = line+1, [2]int{r, col}
				}
			case r < col:
				if c.upperLine == 0 {
					c.upperLine, c.upperRC = line+1, [2]int{r, col}
				}
			default:
				if sym == sparse.SkewSymmetric && v != 0 {
					ok = false // left to the general code, which reports it
				}
			}
			if !ok {
				break
			}
		}
		I[k], J[k], V[k] = int32(r-1), int32(col-1), v
		k++
		line++
		pos = next
	}
	c.entries += k - len(c.t.I)
	c.t.I, c.t.J, c.t.V = I[:k], J[:k], V[:k]
	return pos, line
}

// fastEntry parses a coordinate matrix line of the common form: unsigned
// row and column, single spaces, a plain decimal value (or none for
// pattern), then '\n', "\r\n" or the end of b. It returns ok = false for
// anything else, including indices out of range and values that the fast
// path of parseReal would not convert exactly; the caller then parses the
// line with the general code, which gives the same value or the error.
func fastEntry(hd *header, b []byte, q int) (r, c int, v float64, next int, ok bool) {
	n := len(b)
	s := q
	for q < n {
		d := b[q] - '0'
		if d > 9 {
			break
		}
		r = r*10 + int(d)
		q++
	}
	if q == s || q-s > 10 || q == n || b[q] != ' ' {
		return
	}
	q++
	s = q
	for q < n {
		d := b[q] - '0'
		if d > 9 {
			break
		}
		c = c*10 + int(d)
		q++
	}
	if q == s || q-s > 10 || r < 1 || r > hd.rows || c < 1 || c > hd.cols {
		return
	}
	if hd.field == fieldPattern {
		v = 1
	} else {
		if q == n || b[q] != ' ' {
			return
		}
		q++
		neg := false
		if q < n && (b[q] == '-' || b[q] == '+') {
			neg = b[q] == '-'
			q++
		}
		var man uint64
		s = q
		for q < n {
			d := b[q] - '0'
			if d > 9 {
				break
			}
			man = man*10 + uint64(d)
			q++
		}
		digits := q - s
		exp := 0
		if hd.field == fieldReal {
			if q < n && b[q] == '.' {
				q++
				s2 := q
				for q < n {
					d := b[q] - '0'
					if d > 9 {
						break
					}
					man = man*10 + uint64(d)
					q++
				}
				digits += q - s2
				exp = -(q - s2)
			}
			if q < n && b[q]|0x20 == 'e' {
				q++
				eneg := false
				if q < n && (b[q] == '-' || b[q] == '+') {
					eneg = b[q] == '-'
					q++
				}
				s2 := q
				e := 0
				for q < n {
					d := b[q] - '0'
					if d > 9 {
						break
					}
					e = e*10 + int(d)
					q++
				}
				if q == s2 || q-s2 > 3 {
					return
				}
				if eneg {
					e = -e
				}
				exp += e
			}
		}
		// 19 digits cannot overflow the uint64 (10^19 < 2^64).
		if digits == 0 || digits > 19 {
			return
		}
		switch {
		case man == 0:
			v = 0
		case man < 1<<53 && exp >= -22 && exp <= 22:
			v = float64(man)
			if exp >= 0 {
				v *= pow10[exp]
			} else {
				v /= pow10[-exp]
			}
		default:
			return
		}
		if neg && (v != 0 || hd.field == fieldReal) {
			v = -v // an integer has no negative zero: "-0" is 0
		}
	}
	switch {
	case q == n:
		next = n
	case b[q] == '\n':
		next = q + 1
	case b[q] == '\r' && q+1 < n && b[q+1] == '\n':
		next = q + 2
	default:
		return
	}
	return r, c, v, next, true
}

func (c *chunk) fail(line, col int, base error, format string, args ...any) {
	c.err = reason(base, format, args...)
	c.errLine, c.errCol = line, col
}

// parse parses c.text into c's results, stopping at the first defect.
func (p *dataParser) parse(c *chunk) {
	hd := p.hd
	b := c.text
	est := bytes.Count(b, []byte{'\n'}) + 1
	switch {
	case hd.array:
		c.vals = make([]float64, 0, est)
	case hd.object == objVector:
		c.t = sparse.Triplets{I: make([]int32, 0, est), V: make([]float64, 0, est)}
	default:
		I, J, V := p.slabs.take(est)
		c.t = sparse.Triplets{I: I, J: J, V: V}
	}
	var fields []string
	switch {
	case hd.array:
		fields = []string{"value"}
	case hd.object == objVector:
		fields = []string{"index", "value"}
	case hd.field == fieldPattern:
		fields = []string{"row", "column"}
	default:
		fields = []string{"row", "column", "value"}
	}
	nidx := len(fields) - 1 // leading index fields
	switch {
	case hd.array:
		nidx = 0
	case hd.field == fieldPattern:
		nidx = len(fields)
	}
	line := 0
	pos := 0
	fast := !hd.array && hd.object == objMatrix
	for pos < len(b) {
		if fast {
			// Most lines are "row col value" with single spaces; fastEntry
			// takes them, and hands anything else to the general code below,
			// which also words the errors. The entries go straight into the
			// block's arrays, sized by the line count above.
			pos, line = c.fastLines(hd, b, pos, line)
			if pos >= len(b) {
				break
			}
		}
		line++
		end := bytes.IndexByte(b[pos:], '\n')
		if end < 0 {
			end = len(b)
		} else {
			end += pos
		}
		ln := b[pos:end]
		pos = end + 1

		q := 0
		for q < len(ln) && isBlank(ln[q]) {
			q++
		}
		if q == len(ln) {
			continue // blank line
		}
		var idx [2]int
		var v float64
		nf := 0
		for nf < len(fields) {
			for q < len(ln) && isBlank(ln[q]) {
				q++
			}
			if q == len(ln) {
				c.fail(line, q+1, ErrEntryFields, "expected %s, found %d", fieldList(fields), nf)
				return
			}
			start := q
			for q < len(ln) && !isBlank(ln[q]) {
				q++
			}
			tok := ln[start:q]
			if nf < nidx {
				limit := hd.rows
				if nf == 1 {
					limit = hd.cols
				}
				n, ok := parseIndex(tok)
				if !ok {
					c.fail(line, start+1, ErrValue, "expected an integer %s index, found %q", fields[nf], clip(string(tok)))
					return
				}
				if n < 1 || n > limit {
					c.fail(line, start+1, ErrIndexRange, "expected a %s index in 1..%d, found %s", fields[nf], limit, clip(string(tok)))
					return
				}
				idx[nf] = n
			} else {
				var err error
				if hd.field == fieldInteger {
					v, err = parseInteger(tok)
				} else {
					v, err = parseReal(tok)
				}
				if err != nil {
					c.err, c.errLine, c.errCol = err, line, start+1
					return
				}
			}
			nf++
		}
		for q < len(ln) && isBlank(ln[q]) {
			q++
		}
		if q < len(ln) {
			c.fail(line, q+1, ErrEntryFields, "expected %s, found more: %q", fieldList(fields), clip(string(ln[q:])))
			return
		}
		if hd.field == fieldPattern {
			v = 1
		}
		if hd.array {
			c.vals = append(c.vals, v)
			c.entries++
			continue
		}
		if !c.add(hd, line, idx[0], idx[1], v) {
			return
		}
	}
	c.lines = line
}

// fieldList describes the fields of an entry line, as "3 fields (row,
// column, value)" or "1 field (value)".
func fieldList(f []string) string {
	s := f[0]
	for _, x := range f[1:] {
		s += ", " + x
	}
	if len(f) == 1 {
		return "1 field (" + s + ")"
	}
	return strconv.Itoa(len(f)) + " fields (" + s + ")"
}

// parseIndex parses a decimal unsigned integer, saturating at a value above
// any valid index.
func parseIndex(tok []byte) (int, bool) {
	if len(tok) == 0 {
		return 0, false
	}
	n := 0
	for _, c := range tok {
		d := c - '0'
		if d > 9 {
			return 0, false
		}
		if n <= sparse.MaxDim {
			n = n*10 + int(d)
		}
	}
	return n, true
}

// parseInteger parses a value of an "integer" file: any int64, converted to
// the nearest float64 (exact up to 2^53 in magnitude).
func parseInteger(tok []byte) (float64, error) {
	s := tok
	neg := false
	if len(s) > 0 && (s[0] == '+' || s[0] == '-') {
		neg = s[0] == '-'
		s = s[1:]
	}
	if len(s) == 0 {
		return 0, reason(ErrValue, "expected an integer value, found %q", clip(string(tok)))
	}
	var u uint64
	for _, c := range s {
		d := c - '0'
		if d > 9 {
			return 0, reason(ErrValue, "expected an integer value, found %q", clip(string(tok)))
		}
		if u > (math.MaxUint64-9)/10 {
			return 0, reason(ErrValue, "expected an integer in the int64 range, found %s", clip(string(tok)))
		}
		u = u*10 + uint64(d)
	}
	if neg && u != 0 { // an integer has no negative zero: "-0" is 0
		if u > 1<<63 {
			return 0, reason(ErrValue, "expected an integer in the int64 range, found %s", clip(string(tok)))
		}
		return -float64(u), nil
	}
	if u > math.MaxInt64 {
		return 0, reason(ErrValue, "expected an integer in the int64 range, found %s", clip(string(tok)))
	}
	return float64(u), nil
}

// pow10 holds the powers of ten that a float64 represents exactly.
var pow10 = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// parseReal parses a decimal floating-point value: an optional sign, digits
// with an optional point, and an optional exponent introduced by e, E, d or D
// (the Fortran double-precision letter). NaN and infinities are refused.
//
// Values whose significand has at most 19 digits and fits 53 bits, with a
// decimal exponent of at most 22 in magnitude, are converted with one
// multiplication or division of exact operands, which IEEE 754 rounds
// correctly (W. D. Clinger, "How to Read Floating Point Numbers Accurately",
// PLDI 1990, the fast path). Every other value goes to strconv.ParseFloat, so
// the result is always the correctly rounded double.
func parseReal(tok []byte) (float64, error) {
	s := tok
	neg := false
	i := 0
	if len(s) > 0 && (s[0] == '+' || s[0] == '-') {
		neg = s[0] == '-'
		i++
	}
	var man uint64
	nd, exp := 0, 0
	sawDigit, sawDot, trunc := false, false, false
	for ; i < len(s); i++ {
		c := s[i]
		if d := c - '0'; d <= 9 {
			sawDigit = true
			switch {
			case d == 0 && nd == 0:
				if sawDot {
					exp--
				}
			case nd < 19:
				man = man*10 + uint64(d)
				nd++
				if sawDot {
					exp--
				}
			default:
				if d != 0 {
					trunc = true
				}
				if !sawDot {
					exp++
				}
			}
			continue
		}
		if c == '.' && !sawDot {
			sawDot = true
			continue
		}
		break
	}
	hasExpD := false
	if sawDigit && i < len(s) && (s[i]|0x20 == 'e' || s[i]|0x20 == 'd') {
		hasExpD = s[i]|0x20 == 'd'
		i++
		eneg := false
		if i < len(s) && (s[i] == '+' || s[i] == '-') {
			eneg = s[i] == '-'
			i++
		}
		start := i
		e := 0
		for ; i < len(s) && s[i]-'0' <= 9; i++ {
			if e < 1_000_000 {
				e = e*10 + int(s[i]-'0')
			}
		}
		if i == start {
			return 0, badReal(tok)
		}
		if eneg {
			e = -e
		}
		exp += e
	}
	if !sawDigit || i != len(s) {
		return 0, badReal(tok)
	}
	if man == 0 && !trunc {
		if neg {
			return math.Copysign(0, -1), nil
		}
		return 0, nil
	}
	if !trunc && man < 1<<53 && exp >= -22 && exp <= 22 {
		f := float64(man)
		if exp >= 0 {
			f *= pow10[exp]
		} else {
			f /= pow10[-exp]
		}
		if neg {
			f = -f
		}
		return f, nil
	}
	str := string(tok)
	if hasExpD {
		str = string(bytes.Map(func(r rune) rune {
			if r == 'd' || r == 'D' {
				return 'e'
			}
			return r
		}, tok))
	}
	f, err := strconv.ParseFloat(str, 64)
	if err != nil {
		if errors.Is(err, strconv.ErrRange) && math.IsInf(f, 0) {
			return 0, reason(ErrNotFinite, "expected a finite value, found %s (beyond the float64 range)", clip(string(tok)))
		}
		return 0, badReal(tok)
	}
	return f, nil
}

func badReal(tok []byte) error {
	s := tok
	if len(s) > 0 && (s[0] == '+' || s[0] == '-') {
		s = s[1:]
	}
	switch string(bytes.ToLower(s)) {
	case "nan", "inf", "infinity":
		return reason(ErrNotFinite, "expected a finite value, found %s", clip(string(tok)))
	}
	return reason(ErrValue, "expected a decimal number, found %q", clip(string(tok)))
}
