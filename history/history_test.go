package history

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
)

// rows returns a history of n rows with awkward values: durations that are
// not whole microseconds, norms spanning many decades, and (when ls) the
// normal residual.
func rows(n int, ls bool) []krylov.Progress {
	out := make([]krylov.Progress, n)
	r := 12.345678901234567
	for i := range out {
		out[i] = krylov.Progress{
			Iteration:    i,
			Elapsed:      time.Duration(i)*1234567*time.Nanosecond + 7,
			ResidualNorm: r,
			RelResidual:  r / 12.345678901234567,
		}
		if ls {
			out[i].NormalResidualNorm = r / 3
		}
		r *= 0.37
	}
	return out
}

func TestRoundTrip(t *testing.T) {
	special := rows(3, false)
	special = append(special,
		krylov.Progress{Iteration: 3, Elapsed: 90 * 24 * time.Hour, ResidualNorm: 0, RelResidual: 0},
		krylov.Progress{Iteration: 4, Elapsed: 90*24*time.Hour + 1, ResidualNorm: math.Inf(1), RelResidual: math.NaN()},
		krylov.Progress{Iteration: 5, ResidualNorm: math.SmallestNonzeroFloat64, RelResidual: math.MaxFloat64},
	)
	cases := []struct {
		name string
		h    History
	}{
		{"cg", History{Rows: rows(200, false)}},
		{"least squares", History{Rows: rows(50, true), LeastSquares: true}},
		{"special values", History{Rows: special}},
		{"one row", History{Rows: rows(1, false)}},
	}
	for _, c := range cases {
		for _, f := range []Format{CSV, JSONLines} {
			t.Run(c.name+"/"+f.String(), func(t *testing.T) {
				var buf bytes.Buffer
				if err := Write(&buf, f, c.h); err != nil {
					t.Fatal(err)
				}
				got, err := Parse(bytes.NewReader(buf.Bytes()), "mem")
				if err != nil {
					t.Fatalf("%v\n%s", err, buf.String())
				}
				equalHistories(t, got, c.h)

				// Through a file: Create picks the format from the name,
				// Read from the extension.
				path := filepath.Join(t.TempDir(), "h."+map[Format]string{CSV: "csv", JSONLines: "jsonl"}[f])
				w, err := Create(path, Options{LeastSquares: c.h.LeastSquares})
				if err != nil {
					t.Fatal(err)
				}
				for _, p := range c.h.Rows {
					if err := w.Record(p); err != nil {
						t.Fatal(err)
					}
				}
				w.Finish(&krylov.Result{})
				if err := w.Close(); err != nil {
					t.Fatal(err)
				}
				got, err = Read(path)
				if err != nil {
					t.Fatal(err)
				}
				equalHistories(t, got, c.h)
			})
		}
	}
}

// equalHistories compares bit for bit, treating NaN as equal to NaN.
func equalHistories(t *testing.T, got, want History) {
	t.Helper()
	if got.LeastSquares != want.LeastSquares || len(got.Rows) != len(want.Rows) {
		t.Fatalf("got %d rows (least squares %v), want %d (%v)", len(got.Rows), got.LeastSquares, len(want.Rows), want.LeastSquares)
	}
	same := func(a, b float64) bool {
		return math.Float64bits(a) == math.Float64bits(b) || (math.IsNaN(a) && math.IsNaN(b))
	}
	for i, g := range got.Rows {
		w := want.Rows[i]
		if g.Iteration != w.Iteration || g.Elapsed != w.Elapsed || !same(g.ResidualNorm, w.ResidualNorm) ||
			!same(g.RelResidual, w.RelResidual) || !same(g.NormalResidualNorm, w.NormalResidualNorm) {
			t.Fatalf("row %d: got %+v, want %+v", i, g, w)
		}
	}
}

// The files must be what the schema promises to readers that are not ours:
// RFC 4180 CSV with the documented header (read here with encoding/csv),
// and one RFC 8259 JSON object per line (read with encoding/json).
func TestSchema(t *testing.T) {
	h := History{Rows: rows(3, false)}
	var buf bytes.Buffer
	if err := Write(&buf, CSV, h); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&buf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if want := []string{"iteration", "elapsed_seconds", "residual_norm", "relative_residual"}; !reflect.DeepEqual(recs[0], want) {
		t.Errorf("header %v, want %v", recs[0], want)
	}
	if len(recs) != 4 || recs[1][0] != "0" || recs[1][3] != "1" {
		t.Errorf("records %v", recs)
	}

	buf.Reset()
	if err := Write(&buf, JSONLines, History{Rows: rows(2, true), LeastSquares: true}); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(buf.String()), "\n")
	if len(lines) != 2 {
		t.Fatalf("%d lines, want 2", len(lines))
	}
	var obj map[string]float64
	if err := json.Unmarshal([]byte(lines[1]), &obj); err != nil {
		t.Fatal(err)
	}
	if len(obj) != 5 || obj["iteration"] != 1 || obj["elapsed_seconds"] != 0.001234574 {
		t.Errorf("second row %v", obj)
	}
}

func TestParseErrors(t *testing.T) {
	cases := []struct {
		name, in string
		want     *ParseError
	}{
		{"empty", "", &ParseError{Line: 1, Err: ErrHeader}},
		{"header only", "iteration,elapsed_seconds,residual_norm,relative_residual\n", &ParseError{Err: ErrEmpty}},
		{"wrong header", "iter,elapsed_seconds,residual_norm,relative_residual\n0,0,1,1\n", &ParseError{Line: 1, Err: ErrHeader}},
		{"short row", "iteration,elapsed_seconds,residual_norm,relative_residual\n0,0,1,1\n1,0.1,0.5\n", &ParseError{Line: 3, Err: ErrFieldCount}},
		{"long row", "iteration,elapsed_seconds,residual_norm,relative_residual\n0,0,1,1,9\n", &ParseError{Line: 2, Err: ErrFieldCount}},
		{"bad iteration", "iteration,elapsed_seconds,residual_norm,relative_residual\n\n-1,0,1,1\n", &ParseError{Line: 3, Column: ColIteration, Err: ErrNumber}},
		{"bad norm", "iteration,elapsed_seconds,residual_norm,relative_residual\n0,0,x,1\n", &ParseError{Line: 2, Column: ColResidual, Err: ErrNumber}},
		{"negative time", "iteration,elapsed_seconds,residual_norm,relative_residual\n0,-1,1,1\n", &ParseError{Line: 2, Column: ColElapsed, Err: ErrNumber}},
		{"json syntax", `{"iteration":0,"elapsed_seconds":0,"residual_norm":1,"relative_residual":1}` + "\n{\n", &ParseError{Line: 2, Err: ErrSyntax}},
		{"json missing key", `{"iteration":0,"elapsed_seconds":0,"residual_norm":1}`, &ParseError{Line: 1, Column: ColRelResidual, Err: ErrKey}},
		{"json unknown key", `{"iteration":0,"elapsed_seconds":0,"residual_norm":1,"relative_residual":1,"colour":2}`, &ParseError{Line: 1, Column: "colour", Err: ErrKey}},
		{"json bad string", "\n" + `{"iteration":0,"elapsed_seconds":0,"residual_norm":"big","relative_residual":1}`, &ParseError{Line: 2, Column: ColResidual, Err: ErrNumber}},
		{"json fractional iteration", `{"iteration":0.5,"elapsed_seconds":0,"residual_norm":1,"relative_residual":1}`, &ParseError{Line: 1, Column: ColIteration, Err: ErrNumber}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse(strings.NewReader(c.in), "f")
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %v, want a *ParseError", err)
			}
			if pe.File != "f" || pe.Line != c.want.Line || pe.Column != c.want.Column || !errors.Is(err, c.want.Err) {
				t.Errorf("got %#v (%v), want line %d column %q reason %v", pe, err, c.want.Line, c.want.Column, c.want.Err)
			}
		})
	}
}

func TestReadSniffsUnknownExtension(t *testing.T) {
	dir := t.TempDir()
	for _, f := range []Format{CSV, JSONLines} {
		var buf bytes.Buffer
		h := History{Rows: rows(4, false)}
		if err := Write(&buf, f, h); err != nil {
			t.Fatal(err)
		}
		path := filepath.Join(dir, "history-"+f.String()+".txt")
		if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		got, err := Read(path)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		equalHistories(t, got, h)
	}
	if _, err := Read(filepath.Join(dir, "absent.csv")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("absent file: %v", err)
	}
}

func TestCreateIsAtomic(t *testing.T) {
	dir := t.TempDir()
	if _, err := Create(filepath.Join(dir, "h.txt"), Options{}); err == nil {
		t.Error("Create accepted an extension that names no format")
	}
	path := filepath.Join(dir, "h.csv")
	w, err := Create(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range rows(10, false) {
		w.Record(p)
	}
	w.Finish(nil)
	if _, err := os.Stat(path); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("the file appeared under its name before Close: %v", err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 || ents[0].Name() != "h.csv" {
		t.Errorf("folder holds %v, want only h.csv", ents)
	}
}

type failWriter struct{}

func (failWriter) Write([]byte) (int, error) { return 0, io.ErrShortWrite }

func TestWriteErrorStopsTheSolve(t *testing.T) {
	w := NewWriter(failWriter{}, Options{})
	var err error
	for _, p := range rows(5000, false) { // more than the 64 KiB buffer
		if err = w.Record(p); err != nil {
			break
		}
	}
	if !errors.Is(err, io.ErrShortWrite) || !errors.Is(w.Close(), io.ErrShortWrite) {
		t.Errorf("Record error %v, Close error %v; want io.ErrShortWrite", err, w.Err())
	}
}

// The recorder runs inside the solver's loop, which must not allocate
// (RULES.md); after the buffer's first growth a row costs no allocation.
func TestRecordDoesNotAllocate(t *testing.T) {
	for _, f := range []Format{CSV, JSONLines} {
		w := NewWriter(io.Discard, Options{Format: f, LeastSquares: true})
		p := krylov.Progress{Iteration: 123456, Elapsed: 1234567891, ResidualNorm: math.Pi * 1e-300, RelResidual: -math.E, NormalResidualNorm: math.NaN()}
		w.Record(p)
		if n := testing.AllocsPerRun(1000, func() { w.Record(p) }); n != 0 {
			t.Errorf("%s: %v allocations per Record, want 0", f, n)
		}
	}
}

func TestLogConcurrentReaders(t *testing.T) {
	var l Log
	want := rows(2000, false)
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		for _, p := range want {
			l.Record(p)
		}
		l.Finish(&krylov.Result{Status: krylov.Converged, Iterations: 1999, Settings: krylov.Settings{Recorder: &l}})
	}()
	// A reader polling while the solve runs sees a growing prefix of the
	// rows, in order.
	for l.Result() == nil {
		got := l.Snapshot().Rows
		equalHistories(t, History{Rows: got}, History{Rows: want[:len(got)]})
	}
	wg.Wait()
	equalHistories(t, l.Snapshot(), History{Rows: want})
	if last, ok := l.Last(); !ok || last.Iteration != 1999 {
		t.Errorf("Last = %v, %v", last, ok)
	}
	if r := l.Result(); r.Status != krylov.Converged || r.Settings.Recorder != nil {
		t.Errorf("Result = %+v", r)
	}
}

// TestLogBudget checks the thinning rule documented on Log: every row is
// kept up to the budget; past it the rows held are the arrivals whose index
// is a multiple of a power-of-two stride, never more than the budget, with
// the first and the latest row exact.
func TestLogBudget(t *testing.T) {
	t.Parallel()
	for _, c := range []struct{ budget, n int }{
		{16, 15}, {16, 16}, {16, 17}, {16, 100}, {16, 1001}, {64, 5000}, {0, DefaultBudget - 1}, {0, 1_000_001},
	} {
		l := Log{Budget: c.budget}
		all := rows(c.n, false)
		for _, p := range all {
			l.Record(p)
		}
		h := l.Snapshot()
		budget := c.budget
		if budget == 0 {
			budget = DefaultBudget
		}
		if len(h.Rows) > budget+1 || (c.n >= budget && len(h.Rows) < budget/2) {
			t.Errorf("budget %d, %d rows: holds %d", budget, c.n, len(h.Rows))
		}
		if c.n < budget {
			equalHistories(t, h, History{Rows: all})
			if h.Thinned {
				t.Errorf("budget %d, %d rows: marked thinned", budget, c.n)
			}
			continue
		}
		if !h.Thinned {
			t.Errorf("budget %d, %d rows: not marked thinned", budget, c.n)
		}
		if h.Rows[0] != all[0] || h.Rows[len(h.Rows)-1] != all[c.n-1] {
			t.Errorf("budget %d, %d rows: first %v, last %v", budget, c.n, h.Rows[0], h.Rows[len(h.Rows)-1])
		}
		stride := h.Rows[1].Iteration - h.Rows[0].Iteration
		if stride&(stride-1) != 0 {
			t.Errorf("budget %d, %d rows: stride %d not a power of two", budget, c.n, stride)
		}
		for k, p := range h.Rows[:len(h.Rows)-1] {
			if p != all[k*stride] {
				t.Fatalf("budget %d, %d rows: row %d is %v, want arrival %d", budget, c.n, k, p, k*stride)
			}
		}
		if l.Recorded() != c.n || l.Len() != len(h.Rows) {
			t.Errorf("Recorded %d, Len %d; want %d, %d", l.Recorded(), l.Len(), c.n, len(h.Rows))
		}
	}
}

// A Log past its budget records without allocating.
func TestLogAllocs(t *testing.T) {
	l := Log{Budget: 64}
	p := krylov.Progress{ResidualNorm: 1}
	for i := 0; i < 64; i++ {
		l.Record(p)
	}
	if n := testing.AllocsPerRun(10000, func() { l.Record(p) }); n != 0 {
		t.Errorf("%v allocations per Record past the budget, want 0", n)
	}
}

// The cost a recorder adds to each solver iteration (compare with the
// solver's own time per iteration in krylov's benchmarks).
func BenchmarkRecord(b *testing.B) {
	p := krylov.Progress{Iteration: 123456, Elapsed: 1234567891, ResidualNorm: math.Pi * 1e-5, RelResidual: math.E * 1e-7}
	for _, f := range []Format{CSV, JSONLines} {
		b.Run("Writer/"+f.String(), func(b *testing.B) {
			w := NewWriter(io.Discard, Options{Format: f})
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				p.Iteration = i
				w.Record(p)
			}
		})
	}
	b.Run("Log", func(b *testing.B) {
		var l Log
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			p.Iteration = i
			l.Record(p)
		}
	})
}
