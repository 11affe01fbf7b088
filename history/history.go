package history

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/krylov"
)

// Format is a history file format.
type Format int

const (
	// CSV is comma-separated values with a header line.
	CSV Format = iota + 1
	// JSONLines is one JSON object per line.
	JSONLines
)

func (f Format) String() string {
	switch f {
	case CSV:
		return "csv"
	case JSONLines:
		return "jsonl"
	}
	return fmt.Sprintf("format(%d)", int(f))
}

// FormatOf returns the format that a file name's extension names, and false
// when the extension names none: ".csv" is CSV; ".json", ".jsonl" and
// ".ndjson" are JSON lines. Case does not matter.
func FormatOf(path string) (Format, bool) {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".csv":
		return CSV, true
	case ".json", ".jsonl", ".ndjson":
		return JSONLines, true
	}
	return 0, false
}

// Column names, in file order.
const (
	ColIteration      = "iteration"
	ColElapsed        = "elapsed_seconds"
	ColResidual       = "residual_norm"
	ColRelResidual    = "relative_residual"
	ColNormalResidual = "normal_residual_norm"
)

// History is a convergence history: the rows in the order they were
// recorded.
type History struct {
	Rows []krylov.Progress
	// LeastSquares says whether the rows carry NormalResidualNorm (the file
	// had the normal_residual_norm column).
	LeastSquares bool
	// Thinned says that rows were left out to bound the memory (a Log
	// past its budget): the rows are evenly spaced samples of the solve,
	// with its first and last rows exact.
	Thinned bool
}

// Options control a Writer.
type Options struct {
	// Format is the file format. Default CSV (Create picks it from the
	// file name instead).
	Format Format
	// LeastSquares adds the normal_residual_norm column. Default false.
	LeastSquares bool
}

// Writer is a krylov.Recorder that writes each recorded row to an
// io.Writer in one of the history formats. Rows are formatted into a
// 64 KiB buffer with no allocation; the buffer goes to the underlying writer
// when it fills and at Finish. The header goes out with the first row, so a
// solve that records nothing writes an empty file.
//
// A Writer is meant for the one goroutine that runs the solve; it has no
// lock.
type Writer struct {
	bw     *bufio.Writer
	opt    Options
	header bool
	num    []byte // scratch for one formatted row
	err    error

	// Set by Create only.
	file   *atomicfile.File
	closed bool
}

// NewWriter returns a Writer writing to w. It panics if opt.Format is
// neither zero, CSV nor JSONLines.
func NewWriter(w io.Writer, opt Options) *Writer {
	if opt.Format == 0 {
		opt.Format = CSV
	}
	if opt.Format != CSV && opt.Format != JSONLines {
		panic(fmt.Sprintf("history: unknown format %v", opt.Format))
	}
	return &Writer{bw: bufio.NewWriterSize(w, 64<<10), opt: opt, num: make([]byte, 0, 256)}
}

// Create returns a Writer to a new file at path, in the format its
// extension names (an error if it names none). The rows go to a temporary
// file in the same folder, which Close renames to path, so an interrupted
// run never leaves a half-written history under that name.
func Create(path string, opt Options) (*Writer, error) {
	f, ok := FormatOf(path)
	if !ok {
		return nil, fmt.Errorf("history: %s: unknown extension %q (want .csv, .json, .jsonl or .ndjson)", path, filepath.Ext(path))
	}
	opt.Format = f
	file, err := atomicfile.Create(path)
	if err != nil {
		return nil, fmt.Errorf("history: %w", err)
	}
	w := NewWriter(file, opt)
	w.file = file
	return w, nil
}

// Record formats p as one row. It returns the first error from the
// underlying writer, which stops the solve.
func (w *Writer) Record(p krylov.Progress) error {
	if w.err != nil {
		return w.err
	}
	if !w.header {
		w.header = true
		w.writeHeader()
	}
	b := w.num[:0]
	switch w.opt.Format {
	case CSV:
		b = strconv.AppendInt(b, int64(p.Iteration), 10)
		b = append(b, ',')
		b = appendFloat(b, p.Elapsed.Seconds(), false)
		b = append(b, ',')
		b = appendFloat(b, p.ResidualNorm, false)
		b = append(b, ',')
		b = appendFloat(b, p.RelResidual, false)
		if w.opt.LeastSquares {
			b = append(b, ',')
			b = appendFloat(b, p.NormalResidualNorm, false)
		}
	case JSONLines:
		b = append(b, `{"`+ColIteration+`":`...)
		b = strconv.AppendInt(b, int64(p.Iteration), 10)
		b = append(b, `,"`+ColElapsed+`":`...)
		b = appendFloat(b, p.Elapsed.Seconds(), true)
		b = append(b, `,"`+ColResidual+`":`...)
		b = appendFloat(b, p.ResidualNorm, true)
		b = append(b, `,"`+ColRelResidual+`":`...)
		b = appendFloat(b, p.RelResidual, true)
		if w.opt.LeastSquares {
			b = append(b, `,"`+ColNormalResidual+`":`...)
			b = appendFloat(b, p.NormalResidualNorm, true)
		}
		b = append(b, '}')
	}
	b = append(b, '\n')
	w.num = b
	if _, err := w.bw.Write(b); err != nil {
		w.err = fmt.Errorf("history: writing row for iteration %d: %w", p.Iteration, err)
	}
	return w.err
}

func (w *Writer) writeHeader() {
	if w.opt.Format != CSV {
		return
	}
	h := ColIteration + "," + ColElapsed + "," + ColResidual + "," + ColRelResidual
	if w.opt.LeastSquares {
		h += "," + ColNormalResidual
	}
	if _, err := w.bw.WriteString(h + "\n"); err != nil {
		w.err = fmt.Errorf("history: writing header: %w", err)
	}
}

// appendFloat appends v in the shortest form that reads back exactly. JSON
// has no NaN or infinities, so quoted says to write those as strings.
func appendFloat(b []byte, v float64, quoted bool) []byte {
	if quoted && (math.IsNaN(v) || math.IsInf(v, 0)) {
		b = append(b, '"')
		b = strconv.AppendFloat(b, v, 'g', -1, 64)
		return append(b, '"')
	}
	return strconv.AppendFloat(b, v, 'g', -1, 64)
}

// Finish writes out the buffered rows. An error is kept for Err and Close.
func (w *Writer) Finish(*krylov.Result) { w.flush() }

func (w *Writer) flush() {
	if w.err != nil {
		return
	}
	if err := w.bw.Flush(); err != nil {
		w.err = fmt.Errorf("history: %w", err)
	}
}

// Err returns the first write error, or nil.
func (w *Writer) Err() error { return w.err }

// Close flushes the rows. For a Writer made by Create it also syncs and
// closes the temporary file and renames it to the final path, or removes
// it if anything failed. Close returns the first error met; calling it more
// than once returns that error again.
func (w *Writer) Close() error {
	if w.closed {
		return w.err
	}
	w.closed = true
	w.flush()
	if w.file == nil {
		return w.err
	}
	if w.err != nil {
		w.file.Abort()
		return w.err
	}
	if err := w.file.Commit(); err != nil {
		w.err = fmt.Errorf("history: %w", err)
	}
	return w.err
}

// DefaultBudget is the number of rows a Log keeps when Budget is zero:
// every row of a solve of up to DefaultBudget−1 iterations, and the shape
// of a longer one (see Log).
const DefaultBudget = 4096

// Log is a krylov.Recorder that keeps a solve's rows in memory, in bounded
// space, for other goroutines to read while the solve runs.
//
// It keeps every recorded row until it holds Budget of them. Then it thins
// by stride: it drops every second row it holds (the first, iteration 0,
// stays) and from then on keeps only every second row that arrives, then
// every fourth, and so on, so that the rows kept are always those whose
// arrival index is a multiple of the stride. The latest row is always kept
// as well, exactly, so a history ends at the final iteration. A solve of
// 10⁶ iterations is thus held in between Budget/2 and Budget rows spread
// evenly over its iterations, which keeps the shape of its curve; the
// first and the last row are exact. Record allocates only while the rows
// grow to Budget; thinning reuses that space.
//
// The zero Log is ready to use. A Log must not be copied after first use.
type Log struct {
	// Budget bounds the rows held (the latest row aside). Zero means
	// DefaultBudget; a value below 2 is treated as 2. Set it before the
	// first Record.
	Budget int

	mu      sync.Mutex // guards the fields below
	rows    []krylov.Progress
	stride  int // keep arrivals whose index is a multiple of stride
	seen    int // rows recorded
	tip     krylov.Progress
	hasTip  bool // tip is newer than the last kept row
	version uint64
	result  *krylov.Result
}

// Record adds p. It never returns an error.
func (l *Log) Record(p krylov.Progress) error {
	l.mu.Lock()
	if l.stride == 0 {
		l.stride = 1
	}
	if l.seen%l.stride == 0 {
		l.rows = append(l.rows, p)
		l.hasTip = false
		if len(l.rows) >= l.budget() {
			l.thin()
		}
	} else {
		l.tip, l.hasTip = p, true
	}
	l.seen++
	l.version++
	l.mu.Unlock()
	return nil
}

func (l *Log) budget() int {
	switch {
	case l.Budget == 0:
		return DefaultBudget
	case l.Budget < 2:
		return 2
	}
	return l.Budget
}

// thin keeps the rows at even positions, which are the arrivals whose index
// is a multiple of the doubled stride, and doubles the stride. The row
// dropped last becomes the tip if it was the latest. l.mu must be held.
func (l *Log) thin() {
	last := l.rows[len(l.rows)-1]
	kept := l.rows[:0]
	for i := 0; i < len(l.rows); i += 2 {
		kept = append(kept, l.rows[i])
	}
	dropped := len(l.rows)%2 == 0 // the latest row was at an odd position
	clear(l.rows[len(kept):])
	l.rows = kept
	l.stride *= 2
	if dropped {
		l.tip, l.hasTip = last, true
	}
}

// Finish keeps a copy of the result (without its Recorder and start).
func (l *Log) Finish(r *krylov.Result) {
	if r == nil {
		return
	}
	c := *r
	c.Settings.Recorder, c.Settings.X0 = nil, nil
	if r.LSQ != nil {
		lsq := *r.LSQ
		lsq.Settings.Recorder, lsq.Settings.X0 = nil, nil
		c.LSQ = &lsq
	}
	l.mu.Lock()
	l.result = &c
	l.version++
	l.mu.Unlock()
}

// Len returns the number of rows held now (the latest included).
func (l *Log) Len() int {
	l.mu.Lock()
	defer l.mu.Unlock()
	n := len(l.rows)
	if l.hasTip {
		n++
	}
	return n
}

// Recorded returns the number of rows recorded, kept or not.
func (l *Log) Recorded() int {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.seen
}

// Version returns a number that changes whenever a row is recorded or the
// result arrives, so a reader can tell whether to read again.
func (l *Log) Version() uint64 {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.version
}

// Snapshot returns a copy of the rows held now, in order, the latest
// included; Thinned says whether rows were dropped (a long solve).
func (l *Log) Snapshot() History {
	l.mu.Lock()
	defer l.mu.Unlock()
	out := make([]krylov.Progress, len(l.rows), len(l.rows)+1)
	copy(out, l.rows)
	if l.hasTip {
		out = append(out, l.tip)
	}
	return History{Rows: out, Thinned: l.stride > 1}
}

// Last returns the latest row and true, or false when nothing was recorded.
func (l *Log) Last() (krylov.Progress, bool) {
	l.mu.Lock()
	defer l.mu.Unlock()
	switch {
	case l.hasTip:
		return l.tip, true
	case len(l.rows) > 0:
		return l.rows[len(l.rows)-1], true
	}
	return krylov.Progress{}, false
}

// Result returns a copy of the result given to Finish, or nil while the
// solve runs.
func (l *Log) Result() *krylov.Result {
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.result == nil {
		return nil
	}
	c := *l.result
	return &c
}

// Write writes h to w in format f (CSV when f is zero), with the
// normal_residual_norm column when h.LeastSquares is set.
func Write(w io.Writer, f Format, h History) error {
	hw := NewWriter(w, Options{Format: f, LeastSquares: h.LeastSquares})
	for _, p := range h.Rows {
		if err := hw.Record(p); err != nil {
			return err
		}
	}
	return hw.Close()
}

// secondsToDuration converts elapsed seconds back to a Duration, rounding
// to the nanosecond, which undoes Duration.Seconds exactly below 2⁵³ ns.
func secondsToDuration(s float64) time.Duration {
	return time.Duration(math.Round(s * 1e9))
}

var _ krylov.Recorder = (*Writer)(nil)
var _ krylov.Recorder = (*Log)(nil)
