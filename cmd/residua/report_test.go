package main

import (
	"strings"
	"testing"
	"unicode/utf8"
)

// TestWrapSummary: on a narrow terminal no line passes the width unless a
// single word is longer than the room; continuations are indented under
// the value; no word is cut or lost (issue 11: the summary wrapped
// mid-number at 100 columns).
func TestWrapSummary(t *testing.T) {
	text := "converged in 297 iterations of preconditioned conjugate gradients: true relative residual 9.30e-9 ≤ tolerance 1.00e-8\n" +
		"  forward error     ≈ 4.12e-01 estimated: the condition estimate 4.2e+08 times the relative residual 9.8e-10; a lower bound on κ for the preconditioned operator, so the true error may be larger\n" +
		"  matrix            /a/very/long/path/that/does/not/fit/in/the/room/left/on/the/line/bcsstk18.mtx.gz: 11948×11948\n"
	for _, width := range []int{40, 60, 100} {
		got := wrapSummary(text, width)
		if strings.Join(strings.Fields(got), " ") != strings.Join(strings.Fields(text), " ") {
			t.Fatalf("width %d: words changed:\n%s", width, got)
		}
		for k, orig := range strings.Split(strings.TrimSuffix(text, "\n"), "\n") {
			indent := 2 // the headline's continuations
			if k > 0 {
				indent = summaryIndent
			}
			wrapped := strings.Split(strings.TrimSuffix(wrapSummary(orig+"\n", width), "\n"), "\n")
			for i, line := range wrapped {
				fields := strings.Fields(line)
				last := fields[len(fields)-1]
				if n := utf8.RuneCountInString(line); n > width && utf8.RuneCountInString(last) <= width-indent {
					t.Errorf("width %d: line %d has %d columns: %q", width, i+1, n, line)
				}
				if i > 0 && !strings.HasPrefix(line, strings.Repeat(" ", indent)+fields[0]) {
					t.Errorf("width %d: continuation %q not indented by %d", width, line, indent)
				}
			}
		}
	}
	if got := wrapSummary(text, 1000); got != text {
		t.Errorf("a wide terminal changed the text:\n%s", got)
	}
}
