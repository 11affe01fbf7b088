package main

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"strings"

	"github.com/residua/residua/chart"
	"github.com/residua/residua/history"
)

func init() {
	register(&command{
		name:    "plot",
		summary: "draw saved convergence histories on one chart (SVG or PNG)",
		run:     runPlot,
	})
}

const plotAbout = `
Reads history files written by solve or lsq --history (CSV, or JSON lines)
and draws their relative residuals against the iteration on one log-scale
chart with a legend, for example Jacobi against IC(0) on the same matrix.
Each curve is labelled with its file name (without the extension). The
picture is SVG or PNG according to -o's extension and is written
atomically.`

func runPlot(ctx context.Context, e *env, args []string) error {
	f := newFlags("plot", "residua plot HISTORY... -o out.svg|out.png [--tol R] [--title T]", plotAbout)
	out := f.String("o", "", "picture `file` to write, .svg or .png (required)")
	tol := f.Float64("tol", 0, "draw the tolerance line at this relative residual")
	title := f.String("title", "", "chart title (default: built from the histories)")
	files, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(files) == 0 {
		return usageErrorf("plot: no history file given (run 'residua plot --help')")
	}
	if *out == "" {
		return usageErrorf("plot: -o out.svg or -o out.png is required")
	}
	if ext := strings.ToLower(filepath.Ext(*out)); ext != ".svg" && ext != ".png" {
		return usageErrorf("plot: -o %s: the name must end in .svg or .png", *out)
	}
	if !(*tol >= 0) || math.IsInf(*tol, 0) {
		return usageErrorf("plot: --tol %v must be zero or positive and finite", *tol)
	}
	var series []chart.Series
	for _, path := range files {
		h, err := history.Read(path)
		if err != nil {
			return inputError(err)
		}
		label := strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
		series = append(series, chart.Series{Label: label, Rows: h.Rows})
	}
	if err := chart.Write(*out, chart.Options{Title: *title, Tolerance: *tol}, series...); err != nil {
		return fmt.Errorf("plot: %w", err)
	}
	fmt.Fprintf(e.stdout, "wrote %s: %d %s\n", *out, len(series), plural(len(series), "curve", "curves"))
	return nil
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}
