package history

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"github.com/residua/residua/krylov"
)

// Named reasons for a ParseError, for errors.Is.
var (
	// ErrHeader: the CSV header is missing or names the wrong columns.
	ErrHeader = errors.New("bad header")
	// ErrFieldCount: a CSV line has more or fewer fields than the header.
	ErrFieldCount = errors.New("wrong number of fields")
	// ErrNumber: a value is not a number of the kind its column holds.
	ErrNumber = errors.New("bad number")
	// ErrKey: a JSON object lacks a key, or has one the schema does not name.
	ErrKey = errors.New("bad key")
	// ErrSyntax: a JSON line is not one JSON object.
	ErrSyntax = errors.New("not a JSON object")
	// ErrEmpty: the file holds no rows.
	ErrEmpty = errors.New("no rows")
)

// ParseError says where a history file is malformed: the file (empty when
// reading from a plain io.Reader), the line (1-based), the column or key
// when one is to blame, and the reason.
type ParseError struct {
	File   string
	Line   int
	Column string
	Err    error
}

func (e *ParseError) Error() string {
	var b strings.Builder
	b.WriteString("history: ")
	if e.File != "" {
		b.WriteString(e.File)
		b.WriteString(":")
	}
	if e.Line > 0 {
		fmt.Fprintf(&b, "%d:", e.Line)
	}
	if b.Len() > len("history: ") {
		b.WriteString(" ")
	}
	if e.Column != "" {
		fmt.Fprintf(&b, "%s: ", e.Column)
	}
	b.WriteString(e.Err.Error())
	return b.String()
}

func (e *ParseError) Unwrap() error { return e.Err }

// Read reads the history file at path, in the format its extension names
// or, when the extension names none, the one its content shows (a first
// non-blank character '{' means JSON lines, anything else CSV).
func Read(path string) (History, error) {
	f, err := os.Open(path)
	if err != nil {
		return History{}, fmt.Errorf("history: %w", err)
	}
	defer f.Close()
	format, _ := FormatOf(path)
	return parse(f, path, format)
}

// Parse reads a history from r, telling the format from the content. name
// goes into errors (it may be empty).
func Parse(r io.Reader, name string) (History, error) {
	return parse(r, name, 0)
}

func parse(r io.Reader, name string, f Format) (History, error) {
	br := bufio.NewReader(r)
	if f == 0 {
		// Look at the first non-blank byte without consuming anything, so
		// that line numbers stay right.
		f = CSV
		for i := 1; ; i++ {
			b, err := br.Peek(i)
			if err != nil {
				break
			}
			c := b[i-1]
			if c == ' ' || c == '\t' || c == '\r' || c == '\n' {
				continue
			}
			if c == '{' {
				f = JSONLines
			}
			break
		}
	}
	sc := bufio.NewScanner(br)
	sc.Buffer(make([]byte, 0, 4096), 1<<20)
	var (
		h   History
		err error
	)
	if f == JSONLines {
		h, err = parseJSONLines(sc, name)
	} else {
		h, err = parseCSV(sc, name)
	}
	if err != nil {
		return History{}, err
	}
	if err := sc.Err(); err != nil {
		return History{}, fmt.Errorf("history: %s: %w", name, err)
	}
	if len(h.Rows) == 0 {
		return History{}, &ParseError{File: name, Err: ErrEmpty}
	}
	return h, nil
}

func parseCSV(sc *bufio.Scanner, name string) (History, error) {
	var h History
	line := 0
	header := false
	var fields [6]string
	for sc.Scan() {
		line++
		text := strings.TrimRight(sc.Text(), "\r")
		if strings.TrimSpace(text) == "" {
			continue
		}
		n := splitComma(text, fields[:])
		if !header {
			header = true
			want := []string{ColIteration, ColElapsed, ColResidual, ColRelResidual, ColNormalResidual}
			if n < 4 || n > 5 {
				return h, &ParseError{File: name, Line: line, Err: fmt.Errorf("%w: want %s", ErrHeader, strings.Join(want[:4], ","))}
			}
			for i := 0; i < n; i++ {
				if strings.TrimSpace(fields[i]) != want[i] {
					return h, &ParseError{File: name, Line: line, Err: fmt.Errorf("%w: column %d is %q, want %q", ErrHeader, i+1, fields[i], want[i])}
				}
			}
			h.LeastSquares = n == 5
			continue
		}
		want := 4
		if h.LeastSquares {
			want = 5
		}
		if n != want {
			return h, &ParseError{File: name, Line: line, Err: fmt.Errorf("%w: %d, want %d", ErrFieldCount, n, want)}
		}
		var p krylov.Progress
		it, err := strconv.Atoi(strings.TrimSpace(fields[0]))
		if err != nil || it < 0 {
			return h, &ParseError{File: name, Line: line, Column: ColIteration, Err: fmt.Errorf("%w: %q is not a non-negative integer", ErrNumber, fields[0])}
		}
		p.Iteration = it
		vals := [4]*float64{nil, &p.ResidualNorm, &p.RelResidual, &p.NormalResidualNorm}
		cols := [4]string{ColElapsed, ColResidual, ColRelResidual, ColNormalResidual}
		var secs float64
		vals[0] = &secs
		for i := 1; i < n; i++ {
			v, err := strconv.ParseFloat(strings.TrimSpace(fields[i]), 64)
			if err != nil {
				return h, &ParseError{File: name, Line: line, Column: cols[i-1], Err: fmt.Errorf("%w: %q", ErrNumber, fields[i])}
			}
			*vals[i-1] = v
		}
		if err := checkElapsed(secs); err != nil {
			return h, &ParseError{File: name, Line: line, Column: ColElapsed, Err: err}
		}
		p.Elapsed = secondsToDuration(secs)
		h.Rows = append(h.Rows, p)
	}
	if !header {
		return h, &ParseError{File: name, Line: 1, Err: fmt.Errorf("%w: empty file", ErrHeader)}
	}
	return h, nil
}

// splitComma splits s at commas into dst and returns the field count
// (len(dst)+1 when there are more fields than dst holds).
func splitComma(s string, dst []string) int {
	n := 0
	for {
		i := strings.IndexByte(s, ',')
		if n == len(dst) {
			return n + 1
		}
		if i < 0 {
			dst[n] = s
			return n + 1
		}
		dst[n] = s[:i]
		n++
		s = s[i+1:]
	}
}

func checkElapsed(s float64) error {
	if math.IsNaN(s) || s < 0 || s > float64(math.MaxInt64)/1e9 {
		return fmt.Errorf("%w: %v is not a duration in seconds", ErrNumber, s)
	}
	return nil
}

func parseJSONLines(sc *bufio.Scanner, name string) (History, error) {
	var h History
	line := 0
	first := true
	for sc.Scan() {
		line++
		text := bytes.TrimSpace(sc.Bytes())
		if len(text) == 0 {
			continue
		}
		var obj map[string]json.RawMessage
		if err := json.Unmarshal(text, &obj); err != nil {
			return h, &ParseError{File: name, Line: line, Err: fmt.Errorf("%w: %v", ErrSyntax, err)}
		}
		if first {
			first = false
			_, h.LeastSquares = obj[ColNormalResidual]
		}
		for k := range obj {
			switch k {
			case ColIteration, ColElapsed, ColResidual, ColRelResidual:
			case ColNormalResidual:
				if h.LeastSquares {
					break
				}
				return h, &ParseError{File: name, Line: line, Column: k, Err: fmt.Errorf("%w: %q appears though the first row has none", ErrKey, k)}
			default:
				return h, &ParseError{File: name, Line: line, Column: k, Err: fmt.Errorf("%w: unknown key %q", ErrKey, k)}
			}
		}
		var p krylov.Progress
		raw, ok := obj[ColIteration]
		if !ok {
			return h, &ParseError{File: name, Line: line, Column: ColIteration, Err: fmt.Errorf("%w: missing", ErrKey)}
		}
		it, err := strconv.Atoi(string(raw))
		if err != nil || it < 0 {
			return h, &ParseError{File: name, Line: line, Column: ColIteration, Err: fmt.Errorf("%w: %s is not a non-negative integer", ErrNumber, raw)}
		}
		p.Iteration = it
		var secs float64
		keys := []string{ColElapsed, ColResidual, ColRelResidual, ColNormalResidual}
		dsts := []*float64{&secs, &p.ResidualNorm, &p.RelResidual, &p.NormalResidualNorm}
		if !h.LeastSquares {
			keys, dsts = keys[:3], dsts[:3]
		}
		for i, k := range keys {
			raw, ok := obj[k]
			if !ok {
				return h, &ParseError{File: name, Line: line, Column: k, Err: fmt.Errorf("%w: missing", ErrKey)}
			}
			v, err := jsonFloat(raw)
			if err != nil {
				return h, &ParseError{File: name, Line: line, Column: k, Err: err}
			}
			*dsts[i] = v
		}
		if err := checkElapsed(secs); err != nil {
			return h, &ParseError{File: name, Line: line, Column: ColElapsed, Err: err}
		}
		p.Elapsed = secondsToDuration(secs)
		h.Rows = append(h.Rows, p)
	}
	return h, nil
}

// jsonFloat reads a JSON number, or one of the strings "NaN", "+Inf",
// "-Inf" and "Inf" that Writer uses for values JSON cannot hold.
func jsonFloat(raw json.RawMessage) (float64, error) {
	if len(raw) > 0 && raw[0] == '"' {
		var s string
		if err := json.Unmarshal(raw, &s); err == nil {
			switch s {
			case "NaN", "+Inf", "-Inf", "Inf":
				v, _ := strconv.ParseFloat(s, 64)
				return v, nil
			}
		}
		return 0, fmt.Errorf("%w: %s", ErrNumber, raw)
	}
	var v float64
	if err := json.Unmarshal(raw, &v); err != nil {
		return 0, fmt.Errorf("%w: %s", ErrNumber, raw)
	}
	return v, nil
}
