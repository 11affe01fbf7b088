package main

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
)

// columnRun is the solve of one right-hand side (one column of b): its
// summary, its solution (nil when none came back), the step that writes
// its history and plot, and the method's error.
type columnRun struct {
	sum    solve.Summary
	x      []float64
	finish func(*solve.Summary) error
	err    error
}

// columnPath returns the file name of column j's history or plot when b
// has k > 1 columns: NAME.rhsJ.EXT, with J the 0-based rhs_index of the
// summary, so that h.csv becomes h.rhs0.csv, h.rhs1.csv, ...; with one
// column the name is kept.
func columnPath(path string, j, k int) string {
	if path == "" || k == 1 {
		return path
	}
	ext := filepath.Ext(path)
	return fmt.Sprintf("%s.rhs%d%s", strings.TrimSuffix(path, ext), j, ext)
}

// forColumn returns the options of column j of k: its own history and
// plot files (see columnPath); the solution file is shared, written once
// for all columns by finishRuns.
func (o *solveOpts) forColumn(j, k int) *solveOpts {
	oj := *o
	oj.hist, oj.plot = columnPath(o.hist, j, k), columnPath(o.plot, j, k)
	return &oj
}

// finishRun is finishRuns for a single right-hand side.
func finishRun(e *env, o *solveOpts, sum *solve.Summary, x []float64, finish func(*solve.Summary) error, solveErr error) error {
	runs := []columnRun{{sum: *sum, x: x, finish: finish, err: solveErr}}
	err := finishRuns(e, o, runs, nil)
	*sum = runs[0].sum
	return err
}

// finishRuns writes the outputs of finished solves of b's columns (each
// column's history and plot; the solution x, an n×k array for k columns,
// written only when every column converged unless --always-write), prints
// the summaries (text one after another; JSON one object for one column,
// an array of them for several) and returns the error that gives the exit
// status: an output that could not be written, else the worst column's
// outcome (breakdown 4 over not converged 3). adjust, when not nil,
// revises a column's outcome error (a local solve's recorder failure).
func finishRuns(e *env, o *solveOpts, runs []columnRun, adjust func(*columnRun, error) error) error {
	var outErr error
	converged := true
	for i := range runs {
		r := &runs[i]
		if err := r.finish(&r.sum); err != nil {
			outErr = errors.Join(outErr, err)
		}
		converged = converged && r.sum.Converged
	}
	if o.out != "" {
		outErr = errors.Join(outErr, writeSolutions(o, runs, converged))
	}
	o.printed = true
	sums := make([]*solve.Summary, len(runs))
	for i := range runs {
		sums[i] = &runs[i].sum
	}
	switch {
	case o.json && len(sums) == 1:
		if err := writeJSON(e.stdout, sums[0]); err != nil {
			return err
		}
	case o.json:
		if err := writeJSON(e.stdout, sums); err != nil {
			return err
		}
	default:
		for i, s := range sums {
			if i > 0 {
				fmt.Fprintln(e.stdout)
			}
			writeSummary(e.stdout, s)
		}
	}
	if outErr != nil {
		return outErr
	}
	var worst error
	worstCode := exitOK
	for i := range runs {
		r := &runs[i]
		err := outcomeError(&r.sum, r.err)
		if adjust != nil {
			err = adjust(r, err)
		}
		var ee *exitError
		if err == nil || !errors.As(err, &ee) || ee.code <= worstCode {
			continue
		}
		if len(runs) > 1 {
			ee.err = fmt.Errorf("right-hand side %d of %d: %w", i+1, len(runs), ee.err)
		}
		worst, worstCode = err, ee.code
	}
	return worst
}

// writeSolutions writes -o's file for the runs, or says in each summary
// why it was not written.
func writeSolutions(o *solveOpts, runs []columnRun, converged bool) error {
	xs := make([][]float64, len(runs))
	for i, r := range runs {
		xs[i] = r.x
	}
	note := ""
	switch {
	case !converged && !o.alwaysWrite:
		note = "not written to " + o.out + " (the solve did not converge)"
		if len(runs) > 1 {
			note = "not written to " + o.out + " (not every right-hand side converged)"
		}
	case hasNil(xs):
		note = "not written to " + o.out + " (no solution came back)"
	}
	if note != "" {
		for i := range runs {
			runs[i].sum.SolutionNote = note
		}
		return nil
	}
	var err error
	if len(xs) == 1 {
		err = matrixio.WriteVectorFile(o.out, xs[0])
	} else {
		err = matrixio.WriteColumnsFile(o.out, xs)
	}
	if err != nil {
		return fmt.Errorf("writing the solution %s: %w", o.out, err)
	}
	for i := range runs {
		s := &runs[i].sum
		s.SolutionFile = o.out
		if !converged {
			s.SolutionNote = "the last iterate, written although the solve did not converge (--always-write)"
		}
	}
	return nil
}

func hasNil(xs [][]float64) bool {
	for _, x := range xs {
		if x == nil {
			return true
		}
	}
	return false
}
