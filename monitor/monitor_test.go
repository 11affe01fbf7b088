package monitor

import (
	"bytes"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
)

// screen is a fake terminal of fixed size: it interprets the few ECMA-48
// controls the package sends (see ansi.go) into a grid of cells, as a
// terminal emulator would, and fails on anything else. "\n" moves to the
// start of the next line (the tty's usual output mapping), scrolling at
// the bottom.
type screen struct {
	mu         sync.Mutex
	t          *testing.T
	cols, rows int
	cells      [][]rune
	r, c       int
	raw        bytes.Buffer
}

func newScreen(t *testing.T, cols, rows int) *screen {
	s := &screen{t: t, cols: cols, rows: rows}
	for i := 0; i < rows; i++ {
		s.cells = append(s.cells, blank(cols))
	}
	return s
}

func blank(n int) []rune { return []rune(strings.Repeat(" ", n)) }

func (s *screen) size() (int, int, error) { return s.cols, s.rows, nil }

func (s *screen) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.raw.Write(p)
	text := []rune(string(p))
	for i := 0; i < len(text); i++ {
		switch ch := text[i]; ch {
		case '\n':
			s.c = 0
			s.r++
			if s.r == s.rows {
				s.cells = append(s.cells[1:], blank(s.cols))
				s.r--
			}
		case '\r':
			s.c = 0
		case 0x1b:
			j := i + 2
			for j < len(text) && text[j] >= '0' && text[j] <= '9' {
				j++
			}
			if i+1 >= len(text) || text[i+1] != '[' || j >= len(text) {
				s.t.Errorf("unexpected escape sequence %q", string(text[i:]))
				return len(p), nil
			}
			n := 1
			if j > i+2 {
				n, _ = strconv.Atoi(string(text[i+2 : j]))
			}
			switch text[j] {
			case 'A':
				s.r = max(0, s.r-n)
			case 'K':
				for c := s.c; c < s.cols; c++ {
					s.cells[s.r][c] = ' '
				}
			case 'J':
				for c := s.c; c < s.cols; c++ {
					s.cells[s.r][c] = ' '
				}
				for r := s.r + 1; r < s.rows; r++ {
					s.cells[r] = blank(s.cols)
				}
			default:
				s.t.Errorf("unexpected control %q", string(text[i:j+1]))
			}
			i = j
		default:
			if s.c == s.cols { // auto-wrap, which the package must avoid
				s.t.Errorf("a line overflowed %d columns", s.cols)
				s.c = 0
				s.r = min(s.r+1, s.rows-1)
			}
			s.cells[s.r][s.c] = ch
			s.c++
		}
	}
	return len(p), nil
}

func (s *screen) text() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	var b strings.Builder
	for _, row := range s.cells {
		b.WriteString(strings.TrimRight(string(row), " "))
		b.WriteByte('\n')
	}
	return strings.TrimRight(b.String(), "\n")
}

// waitFor polls the screen until it contains want.
func waitFor(t *testing.T, s *screen, want string) {
	t.Helper()
	deadline := time.Now().Add(5 * time.Second)
	for time.Now().Before(deadline) {
		if strings.Contains(s.text(), want) {
			return
		}
		time.Sleep(5 * time.Millisecond)
	}
	t.Fatalf("screen never showed %q; it shows:\n%s", want, s.text())
}

// geometric returns row k of a made-up history whose relative residual
// falls by exactly factor rho per iteration, one iteration per 10 ms.
func geometric(k int, rho float64) krylov.Progress {
	r := math.Pow(rho, float64(k))
	return krylov.Progress{Iteration: k, Elapsed: time.Duration(k) * 10 * time.Millisecond, ResidualNorm: 4 * r, RelResidual: r}
}

func hasBraille(s string) bool {
	for _, r := range s {
		if r >= 0x2800 && r <= 0x28ff {
			return true
		}
	}
	return false
}

// The panel on a fake 80 × 24 terminal shows the curve, the iteration and
// the residual while the solve runs, and is replaced by the summary at the
// end (issue 5, section 5).
func TestPanelOnFakeTerminal(t *testing.T) {
	scr := newScreen(t, 80, 24)
	scr.Write([]byte("$ residua solve heat.mtx\n"))
	m := New(scr, Options{
		Mode: Panel, Size: scr.size, Target: 1e-8, Matrix: "heat-sink block", Preconditioner: "jacobi",
		Redraw: 2 * time.Millisecond,
		Summary: func(w io.Writer, r *krylov.Result) {
			fmt.Fprintf(w, "summary: %s after %d iterations\n", r.Status, r.Iterations)
		},
	})
	for k := 0; k <= 120; k++ {
		m.Record(geometric(k, 0.9))
	}
	// 0.9^120 = 3.23e-06; at 0.9 per iteration, 1e-8 needs
	// ⌈log(1e-8/0.9^120)/log 0.9⌉ = ⌈54.9⌉ = 55 more, 0.55 s at 10 ms each.
	waitFor(t, scr, "iteration 120")
	got := scr.text()
	for _, want := range []string{"$ residua solve heat.mtx", "rel. residual 3.23e-06", "reduction 0.9000/it", "left ≈ 55 it, 0.6s",
		"elapsed 1.2s", "preconditioner jacobi", "heat-sink block", "1e-08 ┤", "1e+00 ┤"} {
		if !strings.Contains(got, want) {
			t.Errorf("panel lacks %q:\n%s", want, got)
		}
	}
	if !hasBraille(got) {
		t.Errorf("panel shows no curve:\n%s", got)
	}
	// Redraws happen in place: the panel is drawn once, below the prompt.
	if n := strings.Count(got, "relative residual ·"); n != 1 {
		t.Errorf("header shown %d times:\n%s", n, got)
	}
	for k := 121; k <= 175; k++ {
		m.Record(geometric(k, 0.9))
	}
	waitFor(t, scr, "iteration 175")
	m.Finish(&krylov.Result{Status: krylov.Converged, Iterations: 175})
	got = scr.text()
	if want := "$ residua solve heat.mtx\nsummary: converged after 175 iterations"; got != want {
		t.Errorf("after Finish the screen shows\n%s\nwant\n%s", got, want)
	}
	if strings.Contains(scr.raw.String(), "\x1b[?") {
		t.Error("the monitor sent a private-mode control (cursor hiding)")
	}
}

// TestPanelKeepsCurve: with KeepCurve the finished panel leaves its
// final curve (header, chart, axis; no live facts) above the summary, and
// nothing else of the live panel (issue 11 §4: the final curve was lost).
func TestPanelKeepsCurve(t *testing.T) {
	scr := newScreen(t, 80, 24)
	scr.Write([]byte("$ residua solve heat.mtx\n"))
	m := New(scr, Options{
		Mode: Panel, Size: scr.size, Target: 1e-8, Matrix: "heat-sink block", Redraw: 2 * time.Millisecond, KeepCurve: true,
		Summary: func(w io.Writer, r *krylov.Result) { fmt.Fprintf(w, "summary: %s\n", r.Status) },
	})
	for k := 0; k <= 175; k++ {
		m.Record(geometric(k, 0.9))
	}
	waitFor(t, scr, "iteration 175")
	m.Finish(&krylov.Result{Status: krylov.Converged, Iterations: 175})
	got := scr.text()
	lines := strings.Split(got, "\n")
	if lines[0] != "$ residua solve heat.mtx" || lines[len(lines)-1] != "summary: converged" {
		t.Fatalf("screen after Finish:\n%s", got)
	}
	if !hasBraille(got) || strings.Count(got, "relative residual ·") != 1 || !strings.Contains(got, "╌") {
		t.Errorf("the final curve was not kept:\n%s", got)
	}
	if strings.Contains(got, "iteration 175") || strings.Contains(got, "left") {
		t.Errorf("the live facts were kept:\n%s", got)
	}
	if n := len(lines); n != 1+keptChartRows+3+1 {
		t.Errorf("%d lines on screen, want the prompt, the %d-row chart with header and axis, and the summary:\n%s", n, keptChartRows, got)
	}
}

// On a terminal too small for the panel, and in StatusLine mode, one line
// is redrawn in place; without a Summary hook, Finish leaves it as a plain
// last line.
func TestStatusLine(t *testing.T) {
	for _, c := range []struct {
		name       string
		mode       Mode
		cols, rows int
	}{{"status line", StatusLine, 100, 30}, {"panel on a small terminal", Panel, 60, 8}} {
		t.Run(c.name, func(t *testing.T) {
			scr := newScreen(t, c.cols, c.rows)
			m := New(scr, Options{Mode: c.mode, Size: scr.size, Target: 1e-8, Redraw: 2 * time.Millisecond})
			for k := 0; k <= 60; k++ {
				m.Record(geometric(k, 0.5))
			}
			waitFor(t, scr, "iteration 60")
			if got := scr.text(); strings.Count(got, "\n") != 0 || hasBraille(got) {
				t.Errorf("more than one line:\n%s", got)
			}
			m.Finish(&krylov.Result{})
			if got := scr.text(); !strings.HasPrefix(strings.ReplaceAll(got, ",\n", ", "), "iteration 60, rel. residual 8.67e-19, reduction 0.5000/it, tolerance reached") {
				t.Errorf("last line %q", got)
			}
		})
	}
}

// Not a terminal: plain lines with no control codes, every Options.Every.
func TestLines(t *testing.T) {
	var mu sync.Mutex
	var buf bytes.Buffer
	w := writerFunc(func(p []byte) (int, error) { mu.Lock(); defer mu.Unlock(); return buf.Write(p) })
	m := New(w, Options{Target: 1e-6, Every: 5 * time.Millisecond})
	if m.Mode() != Lines {
		t.Fatalf("mode %v on a non-terminal, want lines", m.Mode())
	}
	for k := 0; k <= 10; k++ {
		m.Record(geometric(k, 0.8))
		time.Sleep(10 * time.Millisecond)
	}
	m.Close()
	m.Finish(&krylov.Result{}) // after Close: does nothing
	mu.Lock()
	out := buf.String()
	mu.Unlock()
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) < 3 || strings.ContainsRune(out, 0x1b) {
		t.Fatalf("output:\n%q", out)
	}
	if want := "iteration 10, rel. residual 1.07e-01, reduction 0.8000/it, left ≈ 52 it, 0.5s, elapsed 0.1s"; lines[len(lines)-1] != want {
		t.Errorf("last line %q, want %q", lines[len(lines)-1], want)
	}
}

type writerFunc func([]byte) (int, error)

func (f writerFunc) Write(p []byte) (int, error) { return f(p) }

// The panel's lines never exceed the terminal's width less one column (so
// the terminal never wraps them) and the panel fits the height, at every
// size, with the curve still present.
func TestPanelFitsTerminal(t *testing.T) {
	v := &view{target: 1e-10, matrix: "a rather long matrix name for a narrow terminal", precon: "ic0", elapsed: 83 * time.Second}
	r := NewRate(0)
	for k := 0; k <= 5000; k++ {
		p := geometric(k, 0.995)
		r.Add(p)
		v.pts = append(v.pts, point{p.Iteration, p.RelResidual})
	}
	v.pts = append(v.pts, point{5001, 0})
	v.est = r.Estimate(v.target)
	for _, size := range [][2]int{{40, 12}, {52, 14}, {80, 24}, {132, 50}, {250, 70}} {
		lines := renderPanel(v, size[0], size[1])
		if len(lines) >= size[1] {
			t.Errorf("%v: %d lines", size, len(lines))
		}
		for _, l := range lines {
			if n := len([]rune(l)); n > size[0]-1 {
				t.Errorf("%v: line of %d runes: %q", size, n, l)
			}
		}
		if !hasBraille(strings.Join(lines, "\n")) {
			t.Errorf("%v: no curve", size)
		}
	}
}

// Record runs in the solver's loop, which must not allocate (RULES.md):
// once the curve buffer is full it is thinned in place.
func TestRecordDoesNotAllocate(t *testing.T) {
	m := New(io.Discard, Options{Mode: Lines, Every: time.Hour})
	defer m.Close()
	k := 0
	for ; k < 3*maxCurvePoints; k++ {
		m.Record(geometric(k, 0.999))
	}
	if n := testing.AllocsPerRun(10000, func() { m.Record(geometric(k, 0.999)); k++ }); n != 0 {
		t.Errorf("%v allocations per Record", n)
	}
	m.mu.Lock()
	if len(m.pts) > maxCurvePoints || m.pts[0].it != 0 || m.stride < 4 {
		t.Errorf("curve buffer: %d points, first %v, stride %d", len(m.pts), m.pts[0], m.stride)
	}
	m.mu.Unlock()
}

// Many Record calls racing the drawer (run with -race).
func TestConcurrentRecord(t *testing.T) {
	scr := newScreen(t, 90, 30)
	m := New(scr, Options{Mode: Panel, Size: scr.size, Target: 1e-12, Redraw: time.Millisecond})
	start := time.Now()
	for k := 0; time.Since(start) < 100*time.Millisecond; k++ {
		m.Record(geometric(k, 0.99))
	}
	m.Finish(&krylov.Result{})
	if got := scr.text(); hasBraille(got) || !strings.HasPrefix(got, "iteration ") {
		t.Errorf("after Finish:\n%s", got)
	}
}

// The cost the monitor adds to each solver iteration: Record only stores.
func BenchmarkRecord(b *testing.B) {
	m := New(io.Discard, Options{Mode: Panel, Size: func() (int, int, error) { return 120, 40, nil }, Target: 1e-10})
	defer m.Close()
	rows := make([]krylov.Progress, 4096)
	for i := range rows {
		rows[i] = geometric(i, 0.999)
	}
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		p := rows[i%len(rows)]
		p.Iteration = i
		m.Record(p)
	}
}

// The panel follows the terminal's size at each redraw: after the terminal
// grows, it is drawn once, at the new width, in the same place.
func TestPanelFollowsResize(t *testing.T) {
	scr := newScreen(t, 120, 30)
	var mu sync.Mutex
	cols := 80
	size := func() (int, int, error) { mu.Lock(); defer mu.Unlock(); return cols, 30, nil }
	scr.Write([]byte("$ prompt\n"))
	m := New(scr, Options{Mode: Panel, Size: size, Target: 1e-8, Redraw: 2 * time.Millisecond})
	for k := 0; k <= 50; k++ {
		m.Record(geometric(k, 0.7))
	}
	waitFor(t, scr, "iteration 50")
	mu.Lock()
	cols = 120
	mu.Unlock()
	m.Record(geometric(51, 0.7))
	waitFor(t, scr, "iteration 51")
	got := scr.text()
	// At 120 columns the x axis has 120 − 1 − 7 = 112 cells.
	if !strings.Contains(got, "└"+strings.Repeat("─", 112)+"\n") || strings.Count(got, "relative residual") != 1 ||
		!strings.HasPrefix(got, "$ prompt\nrelative residual") {
		t.Errorf("after growing to 120 columns:\n%s", got)
	}
	m.Finish(nil)
}
