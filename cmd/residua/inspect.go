package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

func init() {
	register(&command{
		name:    "inspect",
		summary: "report a matrix file's structure and numerics, and whether CG can be tried",
		run:     runInspect,
	})
}

const inspectAbout = `
Reads each Matrix Market file (plain, gzip-compressed or a collection bundle
NAME.tar.gz) and reports what to know before solving: dimensions, entries
stored and nonzeros after symmetric expansion, the header's field and
symmetry, numeric symmetry (and the worst pair when it fails), the diagonal
(min, max, zero and negative entries), diagonal dominance, bandwidth and
profile, row lengths, the Gershgorin interval, memory as CSR, read time and
speed, duplicates summed, and a verdict line.

The symmetry test accepts |a(i,j) − a(j,i)| ≤ tol·max|a| (--sym-tol), so a
matrix such as AᵀA formed in floating point counts as symmetric.

With --json, prints one JSON object per file (keys listed in the README).
Row and column indices are 1-based in the text, as in the file, and
0-based in the JSON (worst_pair's row and col), as in a program's arrays.
A file that cannot be read is reported on stderr, naming the file and line,
and the exit status is 2; the other files are still inspected.`

// defaultSymTol is the symmetry tolerance relative to max|a(i,j)| used by
// inspect and solve: common practice, a few hundred units of roundoff, so
// that products formed in floating point still count as symmetric.
const defaultSymTol = sparse.SymmetryTolerance

// inspection is inspect's JSON object: the sparse.Report's fields, flat,
// with the file's own facts beside them (the outer fields win where the
// names coincide, by encoding/json's rule for embedded structs).
type inspection struct {
	File             string    `json:"file"`
	Rows             int       `json:"rows"`
	Cols             int       `json:"cols"`
	Entries          int       `json:"entries"`  // stored in the file
	Nonzeros         int       `json:"nonzeros"` // after symmetric expansion
	Format           string    `json:"format"`
	Field            string    `json:"field"`
	HeaderSymmetry   string    `json:"header_symmetry"`
	Symmetric        bool      `json:"symmetric"`
	PositiveDiagonal bool      `json:"positive_diagonal"`
	Duplicates       int       `json:"duplicates_summed"`
	ExplicitZeros    int       `json:"explicit_zeros"`
	TextBytes        int64     `json:"text_bytes"`
	ReadSeconds      solve.Num `json:"read_seconds"`
	ReadMBPerSecond  solve.Num `json:"read_mb_per_second"`
	Verdict          string    `json:"verdict"`
	// EmptyCols counts the columns without a stored entry (the rows
	// without one are row_length.empty); MostlyEmpty says that more than
	// half of the rows or columns are empty (matrixio.MostlyEmpty), which
	// needs --allow-mostly-empty to read.
	EmptyCols   int  `json:"empty_cols"`
	MostlyEmpty bool `json:"mostly_empty"`
	sparse.Report
}

func runInspect(ctx context.Context, e *env, args []string) error {
	f := newFlags("inspect", "residua inspect [--json] [--sym-tol T] FILE...", inspectAbout)
	asJSON := f.Bool("json", false, "print one JSON object per file")
	symTol := f.Float64("sym-tol", defaultSymTol, "symmetry tolerance relative to max|a(i,j)|")
	mostlyEmpty := f.Bool("allow-mostly-empty", false, "inspect a matrix even when more than half of its rows or columns must be empty (refused by default, at the size line)")
	files, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(files) == 0 {
		return usageErrorf("inspect: no file given (run 'residua inspect --help')")
	}
	if !(*symTol >= 0) || math.IsInf(*symTol, 0) {
		return usageErrorf("inspect: --sym-tol %v must be zero or positive and finite", *symTol)
	}
	var failed []error
	for i, path := range files {
		if err := ctx.Err(); err != nil {
			return err
		}
		in, err := inspectFile(path, *symTol, *mostlyEmpty)
		if err != nil {
			fmt.Fprintf(e.stderr, "residua: %v\n", err)
			failed = append(failed, err)
			continue
		}
		if *asJSON {
			enc := json.NewEncoder(e.stdout)
			enc.SetIndent("", "  ")
			enc.SetEscapeHTML(false)
			if err := enc.Encode(in); err != nil {
				return err
			}
			continue
		}
		if i > 0 {
			fmt.Fprintln(e.stdout)
		}
		in.writeText(e.stdout)
	}
	if len(failed) > 0 {
		return &exitError{code: exitUsage, err: errors.Join(failed...), quiet: true}
	}
	return nil
}

func inspectFile(path string, symTol float64, allowMostlyEmpty bool) (*inspection, error) {
	start := time.Now()
	a, info, err := matrixio.ReadMatrixFile(path, readOptions(allowMostlyEmpty))
	if err != nil {
		return nil, mostlyEmptyHint(err)
	}
	read := time.Since(start)
	r := sparse.Analyze(a, symTol)
	in := &inspection{
		File: path, Rows: a.Rows, Cols: a.Cols, Entries: info.Entries, Nonzeros: a.NNZ(),
		Format: info.Header.Format, Field: info.Header.Field, HeaderSymmetry: info.Header.Symmetry,
		Symmetric: r.Symmetric, PositiveDiagonal: r.Diagonal.Positive,
		Duplicates: info.Duplicates, ExplicitZeros: info.ExplicitZeros, TextBytes: info.Bytes,
		ReadSeconds: solve.Seconds(read), Report: r, EmptyCols: emptyCols(a),
		MostlyEmpty: matrixio.MostlyEmpty(int64(a.Rows), int64(a.Cols), int64(a.NNZ())),
	}
	if read > 0 {
		in.ReadMBPerSecond = solve.Num(float64(info.Bytes) / 1e6 / read.Seconds())
	}
	in.Verdict = verdict(&r)
	return in, nil
}

// verdict is the plain line that says whether conjugate gradients can be
// tried, and if not, why. Indices are printed 1-based, as in the file.
func verdict(r *sparse.Report) string {
	switch {
	case r.Cols == 1 && r.Rows > 1:
		return fmt.Sprintf("a single column of %d entries: a vector (a right-hand side or a solution), nothing to solve", r.Rows)
	case !r.Square:
		return fmt.Sprintf("rectangular (%d×%d): not for CG; 'residua lsq' solves least-squares problems", r.Rows, r.Cols)
	case r.NonFinite > 0:
		return fmt.Sprintf("%d entries are NaN or infinite: no solver can use this matrix", r.NonFinite)
	case !r.Symmetric:
		_, why := solve.Symmetry(*r)
		return strings.TrimPrefix(why, "is ") + "; CG needs a symmetric positive definite matrix, 'residua lsq' solves the normal equations"
	case !r.Diagonal.Positive:
		return fmt.Sprintf("symmetric, but the diagonal has %s: not positive definite, CG cannot be used; MINRES can ('residua solve --method minres', which the automatic method picks for it)", diagonalFaults(r.Diagonal))
	case r.GershgorinLow > 0:
		return "symmetric with positive diagonal: CG can be tried (the Gershgorin interval proves it positive definite)"
	}
	// A positive diagonal is necessary for positive definiteness, not
	// sufficient (bcsstm10 and blckhole have one and CG breaks down on
	// both).
	return "symmetric with positive diagonal: CG can be tried, though a positive diagonal does not prove A positive definite; if CG breaks down, the matrix is indefinite and MINRES solves it ('--method minres'; the automatic method switches by itself)"
}

func (in *inspection) writeText(w io.Writer) {
	r := &in.Report
	line := func(label, format string, args ...any) {
		fmt.Fprintf(w, "  %-20s %s\n", label, fmt.Sprintf(format, args...))
	}
	fmt.Fprintf(w, "%s\n", in.File)
	line("size", "%d × %d", in.Rows, in.Cols)
	line("entries", "%d stored in the file, %d nonzeros after expansion (%d explicit zeros, %d duplicates summed)",
		in.Entries, in.Nonzeros, in.ExplicitZeros, in.Duplicates)
	line("header", "%s %s %s", in.Format, in.Field, in.HeaderSymmetry)
	switch {
	case !r.Square:
		line("symmetry", "not square")
	case r.Symmetric && r.Asymmetry == 0:
		line("symmetry", "symmetric (exactly)")
	case r.Symmetric:
		line("symmetry", "symmetric within %s (largest |a(i,j) − a(j,i)| is %s of max|a|)", solve.Sci(r.SymmetryTol), solve.Sci(r.Asymmetry))
	case r.WorstPair != nil:
		wp := r.WorstPair
		line("symmetry", "not symmetric: worst pair a(%d,%d) = %s, a(%d,%d) = %s (%s of max|a|; pattern %s)",
			wp.Row+1, wp.Col+1, solve.ShortFloat(wp.Aij), wp.Col+1, wp.Row+1, solve.ShortFloat(wp.Aji), solve.Sci(r.Asymmetry), yesNo(r.PatternSymmetric, "symmetric", "not symmetric"))
	default:
		line("symmetry", "not symmetric")
	}
	if r.Square {
		// A diagonal and its dominance mean something for square
		// matrices only.
		d := r.Diagonal
		faults := "all positive"
		if !d.Positive {
			faults = diagonalFaults(d)
		}
		line("diagonal", "min %s, max %s; %s", solve.Sci(d.Min), solve.Sci(d.Max), faults)
		line("dominance", "%.1f%% of rows weakly, %.1f%% strictly diagonally dominant", 100*r.WeaklyDominant, 100*r.StrictlyDominant)
	}
	line("bandwidth", "%d (lower %d, upper %d), profile %d", r.Bandwidth, r.LowerBandwidth, r.UpperBandwidth, r.Profile)
	line("row lengths", "min %d, max %d, mean %.1f, std %.1f, %d empty", r.RowLength.Min, r.RowLength.Max, r.RowLength.Mean, r.RowLength.Std, r.RowLength.Empty)
	if r.RowLength.Empty > 0 || in.EmptyCols > 0 {
		note := "legal; their row pointers still cost 8 bytes a row"
		if in.MostlyEmpty {
			note = "more than half empty: read only because of --allow-mostly-empty, and refused by a server without it"
		}
		line("empty", "%d rows and %d columns hold no entry (%s)", r.RowLength.Empty, in.EmptyCols, note)
	}
	if r.Square {
		line("Gershgorin", "eigenvalues in [%s, %s]", solve.Sci(r.GershgorinLow), solve.Sci(r.GershgorinHigh))
	}
	if r.NonFinite > 0 {
		line("non-finite", "%d entries are NaN or ±Inf", r.NonFinite)
	}
	line("memory", "%s as CSR", formatBytes(r.Bytes))
	line("read", "%s of text in %s (%.0f MB/s)", formatBytes(in.TextBytes), fmtSec(in.ReadSeconds), float64(in.ReadMBPerSecond))
	line("verdict", "%s", in.Verdict)
}

// emptyCols counts the columns of a without a stored entry.
func emptyCols(a *sparse.CSR) int {
	seen := make([]bool, a.Cols)
	n := a.Cols
	for _, j := range a.ColIdx {
		if !seen[j] {
			seen[j] = true
			n--
		}
	}
	return n
}

func yesNo(b bool, yes, no string) string {
	if b {
		return yes
	}
	return no
}

// diagonalFaults says which diagonal entries are not positive, naming
// only the kinds that occur: "1000 negative entries", "3 zero (2 not
// stored) and 1 negative entries".
func diagonalFaults(d sparse.DiagonalStats) string {
	var parts []string
	if d.Zero > 0 {
		z := fmt.Sprintf("%d zero", d.Zero)
		switch {
		case d.Missing == d.Zero:
			z += " (not stored)"
		case d.Missing > 0:
			z += fmt.Sprintf(" (%d not stored)", d.Missing)
		}
		parts = append(parts, z)
	}
	if d.Negative > 0 {
		parts = append(parts, fmt.Sprintf("%d negative", d.Negative))
	}
	if len(parts) == 0 {
		return "entries that are not positive"
	}
	return strings.Join(parts, " and ") + plural(d.Zero+d.Negative, " entry", " entries")
}
