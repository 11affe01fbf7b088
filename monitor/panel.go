package monitor

import (
	"fmt"
	"math"
	"strings"
	"time"
)

// point is one row of the curve the panel draws.
type point struct {
	it  int
	rel float64
}

// view is everything one drawing needs, copied out of the Monitor under its
// lock so that rendering runs without it.
type view struct {
	pts            []point
	est            Estimate
	elapsed        time.Duration
	target         float64
	matrix, precon string
}

const (
	labelWidth   = 6 // "1e-08 "
	minPanelCols = 40
	minPanelRows = 12
	maxChartRows = 12
)

// panelFits says whether a terminal of this size can hold the panel; when
// it cannot, the Monitor falls back to the one-line status.
func panelFits(cols, rows int) bool { return cols >= minPanelCols && rows >= minPanelRows }

// renderPanel lays out the panel for a terminal cols wide and rows high:
// a header, the chart of the relative residual (log scale, in Unicode
// braille dots, 2×4 per character cell), its x axis, and the facts packed
// into as many lines as the width needs. No line is wider than cols−1, so
// the terminal never wraps one, and the panel is shorter than rows, so
// moving the cursor back to its top always stays on the screen.
func renderPanel(v *view, cols, rows int) []string {
	width := cols - 1
	info := fields(v.est, v.target, v.elapsed)
	infoLines := pack(info, "   ", width)
	chartRows := min(maxChartRows, rows-1-len(infoLines)-3)
	chartRows = max(chartRows, 2)
	return append(renderCurve(v, cols, chartRows), infoLines...)
}

// keptChartRows is the height of the chart a finished panel leaves behind
// (Options.KeepCurve): enough for the curve's shape, small enough that the
// summary below it stays on the screen.
const keptChartRows = 6

// renderCurve lays out the panel's header, its chart of chartRows rows and
// the x axis, without the live facts.
func renderCurve(v *view, cols, chartRows int) []string {
	width := cols - 1
	plotCols := width - labelWidth - 1

	head := []string{"relative residual"}
	if v.matrix != "" {
		head = append(head, v.matrix)
	}
	if v.precon != "" {
		head = append(head, "preconditioner "+v.precon)
	}
	lines := []string{cut(strings.Join(head, " · "), width)}
	lines = append(lines, chartLines(v, plotCols, chartRows)...)
	lines = append(lines, strings.Repeat(" ", labelWidth)+"└"+strings.Repeat("─", plotCols))
	return append(lines, xLabels(v, plotCols))
}

// chartLines draws the curve into rows lines of cols braille cells with the
// y labels in front.
func chartLines(v *view, cols, rows int) []string {
	dotW, dotH := 2*cols, 4*rows
	grid := make([]uint8, cols*rows) // braille dot bits per cell

	// The y range: whole decades around the positive values and the
	// target; zeros are drawn on the bottom line.
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, p := range v.pts {
		if p.rel > 0 && !math.IsInf(p.rel, 0) {
			l := math.Log10(p.rel)
			lo, hi = math.Min(lo, l), math.Max(hi, l)
		}
	}
	if v.target > 0 {
		l := math.Log10(v.target)
		lo, hi = math.Min(lo, l), math.Max(hi, l)
	}
	if math.IsInf(lo, 1) {
		lo, hi = -1, 0
	}
	top, bot := math.Ceil(hi), math.Floor(lo)
	if top <= bot {
		top = bot + 1
	}
	maxIt := 1
	if n := len(v.pts); n > 0 {
		maxIt = max(v.pts[n-1].it, 1)
	}
	toDot := func(p point) (int, int, bool) {
		if math.IsNaN(p.rel) || math.IsInf(p.rel, 0) || p.rel < 0 {
			return 0, 0, false
		}
		x := int(math.Round(float64(p.it) / float64(maxIt) * float64(dotW-1)))
		y := dotH - 1
		if p.rel > 0 {
			y = int(math.Round((top - math.Log10(p.rel)) / (top - bot) * float64(dotH-1)))
		}
		return min(max(x, 0), dotW-1), min(max(y, 0), dotH-1), true
	}
	set := func(x, y int) {
		// Unicode braille patterns (U+2800–U+28FF): bit i of the offset
		// raises dot i+1; dots 1–3 and 7 form the left column top to
		// bottom, dots 4–6 and 8 the right column.
		bits := [2][4]uint8{{0x01, 0x02, 0x04, 0x40}, {0x08, 0x10, 0x20, 0x80}}
		grid[(y/4)*cols+x/2] |= bits[x%2][y%4]
	}
	px, py, have := 0, 0, false
	for _, p := range v.pts {
		x, y, ok := toDot(p)
		if !ok {
			have = false
			continue
		}
		if have { // join to the previous point with a straight run of dots
			steps := max(abs(x-px), abs(y-py))
			for s := 1; s < steps; s++ {
				set(px+(x-px)*s/steps, py+(y-py)*s/steps)
			}
		}
		set(x, y)
		px, py, have = x, y, true
	}

	tolRow := -1
	if v.target > 0 {
		y := int(math.Round((top - math.Log10(v.target)) / (top - bot) * float64(dotH-1)))
		tolRow = y / 4
	}
	out := make([]string, rows)
	var b strings.Builder
	for r := 0; r < rows; r++ {
		b.Reset()
		label := ""
		switch {
		case r == 0:
			label = decadeLabel(top)
		case r == rows-1:
			label = decadeLabel(bot)
		case r == tolRow:
			label = fmt.Sprintf("%.0e", v.target)
		}
		fmt.Fprintf(&b, "%*s ", labelWidth-1, label)
		if label != "" {
			b.WriteRune('┤')
		} else {
			b.WriteRune('│')
		}
		for c := 0; c < cols; c++ {
			bitsSet := grid[r*cols+c]
			switch {
			case bitsSet != 0:
				b.WriteRune(rune(0x2800 + int(bitsSet)))
			case r == tolRow:
				b.WriteRune('╌')
			default:
				b.WriteByte(' ')
			}
		}
		out[r] = strings.TrimRight(b.String(), " ")
	}
	return out
}

func decadeLabel(d float64) string { return fmt.Sprintf("1e%+03d", int(d)) }

// xLabels writes 0 under the left end of the axis, the last iteration under
// the right end and the word "iteration" between them when it fits.
func xLabels(v *view, cols int) string {
	last := 0
	if n := len(v.pts); n > 0 {
		last = v.pts[n-1].it
	}
	right := fmt.Sprint(last)
	mid := "iteration"
	gap := cols - 1 - len(right)
	if gap < 1 {
		return cut(strings.Repeat(" ", labelWidth+1)+"0", labelWidth+1+cols)
	}
	s := "0" + strings.Repeat(" ", gap) + right
	if gap > len(mid)+2 {
		at := (cols - len(mid)) / 2
		s = s[:at] + mid + s[at+len(mid):]
	}
	return strings.Repeat(" ", labelWidth+1) + s
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}
