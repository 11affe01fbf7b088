package monitor

import (
	"fmt"
	"math"
	"time"
	"unicode/utf8"
)

// Words shared by the status line, the plain lines and the panel.

// fmtDuration writes d for a person: 0.4s, 12.5s, 3m07s, 2h05m.
func fmtDuration(d time.Duration) string {
	switch {
	case d < 0:
		return "?"
	case d < 10*time.Second:
		return fmt.Sprintf("%.1fs", d.Seconds())
	case d < time.Minute:
		return fmt.Sprintf("%.0fs", d.Seconds())
	case d < time.Hour:
		d = d.Round(time.Second)
		return fmt.Sprintf("%dm%02ds", int(d/time.Minute), int(d%time.Minute/time.Second))
	case d < 1000*time.Hour:
		d = d.Round(time.Minute)
		return fmt.Sprintf("%dh%02dm", int(d/time.Hour), int(d%time.Hour/time.Minute))
	}
	return ">999h"
}

// fmtResidual writes a relative residual with three significant digits.
func fmtResidual(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Sprint(v)
	}
	return fmt.Sprintf("%.2e", v)
}

// fields returns the facts of an estimate as short labelled phrases, in the
// order the status line and the panel show them.
func fields(e Estimate, target float64, elapsedTotal time.Duration) []string {
	f := []string{
		fmt.Sprintf("iteration %d", e.Iteration),
		"rel. residual " + fmtResidual(e.RelResidual),
	}
	switch {
	case e.Span == 0:
		f = append(f, "reduction —")
	default:
		f = append(f, fmt.Sprintf("reduction %.4f/it", e.Factor))
	}
	switch {
	case target <= 0:
	case e.Reached:
		f = append(f, "tolerance reached")
	case e.Predicted && e.Unsteady:
		f = append(f, "left: unknown (rate unsteady)")
	case e.Predicted && !e.Steady:
		f = append(f, fmt.Sprintf("left ≈ %d–%d it, %s–%s", e.Low, e.High, fmtDuration(e.TimeLow), fmtDuration(e.TimeHigh)))
	case e.Predicted:
		f = append(f, fmt.Sprintf("left ≈ %d it, %s", e.IterationsLeft, fmtDuration(e.TimeLeft)))
	case e.Span > 0 && !e.Decreasing:
		f = append(f, "left: not decreasing")
	default:
		f = append(f, "left: estimating")
	}
	f = append(f, "elapsed "+fmtDuration(elapsedTotal))
	return f
}

// pack joins phrases with a separator into lines no wider than width
// runes, starting a new line where the next phrase would not fit, and
// cutting a phrase that alone is too wide.
func pack(phrases []string, sep string, width int) []string {
	var lines []string
	cur := ""
	for _, p := range phrases {
		if cur == "" {
			cur = p
		} else if utf8.RuneCountInString(cur)+utf8.RuneCountInString(sep)+utf8.RuneCountInString(p) <= width {
			cur += sep + p
		} else {
			lines = append(lines, cut(cur, width))
			cur = p
		}
	}
	if cur != "" {
		lines = append(lines, cut(cur, width))
	}
	return lines
}

// cut shortens s to at most width runes.
func cut(s string, width int) string {
	if width < 1 {
		return ""
	}
	if utf8.RuneCountInString(s) <= width {
		return s
	}
	r := []rune(s)
	return string(r[:width])
}
