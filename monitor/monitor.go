package monitor

import (
	"io"
	"strings"
	"sync"
	"time"
	"unicode/utf8"

	"golang.org/x/term"

	"github.com/residua/residua/krylov"
)

// Mode is how a Monitor shows progress.
type Mode int

const (
	// Auto picks Panel when the writer is a terminal, Lines otherwise.
	Auto Mode = iota
	// Panel draws the chart and the facts in place, falling back to the
	// status line on a terminal too small for it (under 40 columns or 12
	// rows).
	Panel
	// StatusLine redraws one line in place.
	StatusLine
	// Lines prints a plain line every Options.Every while progress
	// arrives, and a last one at the end; for logs and pipes.
	Lines
)

func (m Mode) String() string {
	switch m {
	case Auto:
		return "auto"
	case Panel:
		return "panel"
	case StatusLine:
		return "status-line"
	case Lines:
		return "lines"
	}
	return "mode(?)"
}

// Options control a Monitor. The zero value works.
type Options struct {
	// Mode picks the display. Default Auto.
	Mode Mode
	// Size reports the terminal's width and height in character cells.
	// Default: golang.org/x/term's GetSize on the writer when it is an
	// *os.File (or anything with an Fd method), else 80 × 24.
	Size func() (cols, rows int, err error)
	// Target is the relative residual the solve stops at (for CG,
	// max(RelTol, AbsTol/‖b‖)); it sets the tolerance line and the
	// predictions. Zero: no line and no prediction.
	Target float64
	// Matrix and Preconditioner name the problem in the panel's header.
	Matrix, Preconditioner string
	// Window is the number of recent iterations the rate is averaged
	// over. Default DefaultWindow (50).
	Window int
	// Redraw is the shortest time between two drawings in Panel and
	// StatusLine modes. Default 100 ms (at most ten a second).
	Redraw time.Duration
	// Every is the time between two lines in Lines mode. Default 2 s.
	Every time.Duration
	// Summary, when set, is called by Finish after the panel or status
	// line has been erased, to write the summary in its place. When nil,
	// Finish leaves one last status line instead.
	Summary func(w io.Writer, r *krylov.Result)
	// KeepCurve, in Panel mode, leaves a compact copy of the final curve
	// (the chart, keptChartRows high, without the live facts) where the
	// panel was when the solve ends, so that the run's shape stays above
	// whatever is printed next.
	KeepCurve bool
}

// Monitor is a krylov.Recorder that shows a running solve to a person.
//
// Record runs on the solver's goroutine and only stores the row under a
// mutex (no I/O, no allocation once the curve buffer is full); a goroutine
// started by New draws from the stored rows at most once per Redraw (or
// Every in Lines mode), so a slow terminal never slows the solve. Finish
// (or Close, on a path that never reaches Finish) stops that goroutine.
// Write errors are ignored: a broken terminal must not stop a solve.
// While a panel or status line is live, nothing else should write to the
// same terminal.
type Monitor struct {
	w    io.Writer
	opt  Options
	mode Mode // resolved: Panel, StatusLine or Lines

	mu       sync.Mutex // guards the fields down to dirty
	rate     *Rate
	pts      []point // the curve, thinned by stride once full
	stride   int
	last     krylov.Progress
	recorded bool
	dirty    bool

	// Owned by the drawing goroutine, then by Finish once it has stopped.
	v          view
	out        []byte
	drawnLines []int // rune widths of the lines on screen (Panel)
	drawnCols  int
	lineShown  bool // a status line is on screen

	stop, done chan struct{}
	once       sync.Once
}

// maxCurvePoints bounds the curve a Monitor keeps; a terminal has far
// fewer dot columns than this.
const maxCurvePoints = 2048

// New returns a Monitor writing to w and starts its drawing goroutine. The
// caller must call Finish or Close.
func New(w io.Writer, opt Options) *Monitor {
	if opt.Redraw <= 0 {
		opt.Redraw = 100 * time.Millisecond
	}
	if opt.Every <= 0 {
		opt.Every = 2 * time.Second
	}
	m := &Monitor{
		w:      w,
		opt:    opt,
		mode:   opt.Mode,
		rate:   NewRate(opt.Window),
		pts:    make([]point, 0, maxCurvePoints),
		stride: 1,
		stop:   make(chan struct{}),
		done:   make(chan struct{}),
	}
	fd, isFile := fdOf(w)
	if m.mode == Auto {
		m.mode = Lines
		if isFile && term.IsTerminal(fd) {
			m.mode = Panel
		}
	}
	if m.opt.Size == nil {
		m.opt.Size = func() (int, int, error) {
			if isFile {
				if c, r, err := term.GetSize(fd); err == nil && c > 0 && r > 0 {
					return c, r, nil
				}
			}
			return 80, 24, nil
		}
	}
	period := opt.Redraw
	if m.mode == Lines {
		period = opt.Every
	}
	go m.loop(period)
	return m
}

// Mode returns the mode in use (Auto resolved).
func (m *Monitor) Mode() Mode { return m.mode }

func fdOf(w io.Writer) (int, bool) {
	if f, ok := w.(interface{ Fd() uintptr }); ok {
		return int(f.Fd()), true
	}
	return 0, false
}

// Record stores p for the next drawing. It never returns an error.
func (m *Monitor) Record(p krylov.Progress) error {
	m.mu.Lock()
	m.rate.Add(p)
	m.last = p
	m.recorded = true
	m.dirty = true
	n := len(m.pts)
	if n == 0 || p.Iteration >= m.pts[n-1].it+m.stride {
		if n == cap(m.pts) {
			// Full: keep every other point and sample twice as sparsely
			// from now on, so the buffer never grows.
			for i := 0; i < n/2; i++ {
				m.pts[i] = m.pts[2*i]
			}
			m.pts = m.pts[:n/2]
			m.stride *= 2
		}
		m.pts = append(m.pts, point{p.Iteration, p.RelResidual})
	}
	m.mu.Unlock()
	return nil
}

func (m *Monitor) loop(period time.Duration) {
	defer close(m.done)
	t := time.NewTicker(period)
	defer t.Stop()
	for {
		select {
		case <-m.stop:
			return
		case <-t.C:
			if m.snapshot() {
				m.draw()
			}
		}
	}
}

// snapshot copies the stored state into m.v when something new arrived.
func (m *Monitor) snapshot() bool {
	m.mu.Lock()
	defer m.mu.Unlock()
	if !m.dirty {
		return false
	}
	m.dirty = false
	m.v.pts = append(m.v.pts[:0], m.pts...)
	if n := len(m.v.pts); n == 0 || m.v.pts[n-1].it != m.last.Iteration {
		m.v.pts = append(m.v.pts, point{m.last.Iteration, m.last.RelResidual})
	}
	m.v.est = m.rate.Estimate(m.opt.Target)
	m.v.elapsed = m.last.Elapsed
	m.v.target = m.opt.Target
	m.v.matrix, m.v.precon = m.opt.Matrix, m.opt.Preconditioner
	return true
}

func (m *Monitor) draw() {
	m.out = m.out[:0]
	switch m.mode {
	case Lines:
		m.out = append(m.out, strings.Join(fields(m.v.est, m.v.target, m.v.elapsed), ", ")...)
		m.out = append(m.out, '\n')
	default:
		cols, rows, err := m.opt.Size()
		if err != nil || cols < 2 || rows < 1 {
			cols, rows = 80, 24
		}
		m.out = m.erase(m.out, cols)
		if m.mode == Panel && panelFits(cols, rows) {
			lines := renderPanel(&m.v, cols, rows)
			m.drawnLines = m.drawnLines[:0]
			for _, l := range lines {
				m.out = append(m.out, l...)
				m.out = append(m.out, eraseLine+"\n"...)
				m.drawnLines = append(m.drawnLines, utf8.RuneCountInString(l))
			}
			m.out = append(m.out, eraseScreen...)
			m.drawnCols = cols
		} else {
			m.out = append(m.out, cut(strings.Join(fields(m.v.est, m.v.target, m.v.elapsed), "  "), cols-1)...)
			m.out = append(m.out, eraseLine...)
			m.lineShown = true
		}
	}
	m.w.Write(m.out)
}

// erase appends what takes the cursor back to the top left of what was
// drawn last and clears it. When the terminal has become narrower since,
// emulators that reflow text have wrapped each old line over
// ⌈width/cols⌉ rows, and those are counted too.
func (m *Monitor) erase(b []byte, cols int) []byte {
	if len(m.drawnLines) > 0 {
		up := 0
		for _, w := range m.drawnLines {
			if cols < m.drawnCols && w > cols {
				up += (w + cols - 1) / cols
			} else {
				up++
			}
		}
		b = appendCursorUp(b, up)
		m.drawnLines = m.drawnLines[:0]
	} else if m.lineShown {
		b = append(b, '\r')
	}
	m.lineShown = false
	return append(b, eraseScreen...)
}

// Finish stops the drawing, erases the panel or status line and writes the
// summary through Options.Summary (or, without one, a last status line).
func (m *Monitor) Finish(r *krylov.Result) { m.finish(r) }

// Close does what Finish does without a result, for a solve that ended
// before its recorder's Finish was called. Calling Finish or Close again
// does nothing.
func (m *Monitor) Close() { m.finish(nil) }

func (m *Monitor) finish(r *krylov.Result) {
	m.once.Do(func() {
		close(m.stop)
		<-m.done
		m.snapshot()
		m.mu.Lock()
		recorded := m.recorded
		m.mu.Unlock()
		m.out = m.out[:0]
		cols := 80
		if m.mode != Lines {
			if c, _, err := m.opt.Size(); err == nil && c >= 2 {
				cols = c
			}
			m.out = m.erase(m.out, cols)
			if rows := 0; m.mode == Panel && m.opt.KeepCurve && recorded {
				if _, rows, _ = m.opt.Size(); panelFits(cols, rows) {
					for _, l := range renderCurve(&m.v, cols, keptChartRows) {
						m.out = append(m.out, l...)
						m.out = append(m.out, '\n')
					}
				}
			}
		}
		if (r == nil || m.opt.Summary == nil) && recorded {
			// The last status line stays; on a terminal it is packed into
			// lines that fit, since nothing will redraw it.
			f := fields(m.v.est, m.v.target, m.v.elapsed)
			if m.mode == Lines {
				m.out = append(m.out, strings.Join(f, ", ")...)
			} else {
				m.out = append(m.out, strings.Join(pack(f, ", ", cols-1), ",\n")...)
			}
			m.out = append(m.out, '\n')
		}
		if len(m.out) > 0 {
			m.w.Write(m.out)
		}
		if r != nil && m.opt.Summary != nil {
			m.opt.Summary(m.w, r)
		}
	})
}

var _ krylov.Recorder = (*Monitor)(nil)
