// Package monitor shows a running solve to a person: a rate estimator that
// predicts when the solve will reach its tolerance, and a krylov.Recorder
// that draws the progress on a terminal (a live panel with the residual
// curve, or one status line) or prints plain periodic lines elsewhere.
//
// # The rate
//
// Rate keeps the last Window iterations' relative residuals and defines the
// average reduction factor per iteration as the geometric mean of the
// per-iteration ratios over that window, ρ = (r_k/r_{k−w})^{1/w}. With ρ < 1
// it predicts ⌈log(t/r_k)/log ρ⌉ more iterations to the target t, at the
// window's mean time per iteration. While the residual is not decreasing
// over the window it predicts nothing, and says so.
//
// # What is shown
//
// Panel (the default on a terminal): a header with the matrix and the
// preconditioner; the relative residual against the iteration on a log
// scale, drawn in Unicode braille dots (2 × 4 per character cell) with the
// tolerance as a dashed row; under it the iteration, the relative residual,
// the average reduction, the predicted iterations and time left, and the
// elapsed time, packed into as many lines as the width needs. It redraws in
// place at most ten times a second and follows the terminal's size (read
// with golang.org/x/term at each redraw); a terminal under 40 × 12 gets the
// one-line status instead. StatusLine: the same facts on one line redrawn
// in place. Lines (the default when the writer is not a terminal): one
// plain line every 2 s while progress arrives, and a last one at the end.
//
// At Finish the panel or status line is erased and Options.Summary writes
// the summary in its place; without a Summary, a last plain status line is
// left. Cursor movement and erasing use four ECMA-48 controls kept in
// ansi.go; nothing else writes escape codes, and the cursor is never
// hidden, so an interrupted program leaves the terminal as it was.
//
// # Concurrency and cost
//
// Record is called on the solver's goroutine: it takes a mutex, updates
// the rate and a bounded curve buffer, and returns; no I/O and, once the
// buffer is full, no allocation. A goroutine started by New does the
// drawing. Finish (or Close, when the solve ends without Finish) stops it;
// both are safe to call more than once. Write errors are ignored, because
// a closed terminal must not stop a solve.
//
// The caller decides whether to show progress at all (a --quiet flag simply
// creates no Monitor).
package monitor
