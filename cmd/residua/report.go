package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"
	"time"
	"unicode/utf8"

	"golang.org/x/term"

	"github.com/residua/residua/solve"
)

func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(v)
}

// writeSummary prints the summary a person reads at a glance: the outcome
// in a sentence first, then the numbers that say how far to trust it, then
// where the time went. The JSON form (--json) is the summary itself.
//
// On a terminal the lines are wrapped at its width, between words, each
// continuation indented under its value (see wrapSummary); elsewhere (a
// file, a pipe) every item stays on one line for tools that read lines.
func writeSummary(out io.Writer, r *solve.Summary) {
	var buf strings.Builder
	summaryLines(&buf, r)
	text := buf.String()
	if width := terminalWidth(out); width > 0 {
		text = wrapSummary(text, width)
	}
	io.WriteString(out, text)
}

// summaryLines writes the summary, one item per line.
func summaryLines(w io.Writer, r *solve.Summary) {
	fmt.Fprintln(w, r.Headline)
	if r.Warning != "" {
		// Not to be missed: right under the headline, before any figure.
		fmt.Fprintf(w, "  WARNING (%s)  %s\n", r.Warning, r.WarningText)
	}
	if r.Error != "" && !strings.Contains(r.Headline, r.Error) {
		fmt.Fprintf(w, "  problem           %s\n", r.Error)
	}
	if r.Advice != "" {
		fmt.Fprintf(w, "  what to do        %s\n", r.Advice)
	}
	if r.Rows > 0 || r.Cols > 0 {
		fmt.Fprintf(w, "  matrix            %s: %d×%d, %d nonzeros\n", r.Matrix, r.Rows, r.Cols, r.Nonzeros)
	} else {
		fmt.Fprintf(w, "  matrix            %s\n", r.Matrix)
	}
	if r.JobID != "" {
		line := fmt.Sprintf("%s, job %s", r.Server, r.JobID)
		if r.MatrixUploaded != nil && !*r.MatrixUploaded {
			line += " (the server already held the matrix: not uploaded again)"
		}
		fmt.Fprintf(w, "  server            %s\n", line)
	}
	if r.RHS != "" {
		fmt.Fprintf(w, "  right-hand side   %s\n", r.RHS)
	}
	pc := r.Preconditioner
	switch reason := r.PreconditionerReason; {
	case strings.HasPrefix(reason, pc+":"):
		pc = reason
	case reason != "":
		pc += " (" + reason + ")"
	}
	if r.FromCache != nil && *r.FromCache && !r.LeastSquares() {
		pc += ", reused from the server's cache"
	}
	if r.MethodReason != "" {
		fmt.Fprintf(w, "  method            %s\n", r.MethodReason)
	}
	fmt.Fprintf(w, "  preconditioner    %s\n", pc)
	if mg := r.Multigrid; mg != nil {
		for _, line := range strings.Split(mg.String(), "\n") {
			fmt.Fprintf(w, "    %s\n", strings.TrimSpace(line))
		}
	}
	if r.Status == string(solve.SetupFailed) || r.Status == string(solve.Refused) {
		return
	}
	if r.ResidualNorm != nil {
		fmt.Fprintf(w, "  residual          ‖b − A·x‖ = %s (relative %s), ‖Aᵀr‖ = %s", solve.Sci(float64(*r.ResidualNorm)),
			solve.Sci(float64(r.RelativeResidual)), solve.Sci(num(r.NormalResidualNorm)))
		if r.NormEstimate != nil {
			fmt.Fprintf(w, ", ‖A‖ ≈ %s", solve.Sci(float64(*r.NormEstimate)))
		}
		fmt.Fprintln(w)
		if len(r.ZeroColumns) > 0 {
			fmt.Fprintf(w, "  zero columns      %d (A is rank deficient), first %v\n", len(r.ZeroColumns), r.ZeroColumns[:min(len(r.ZeroColumns), 10)])
		}
	} else {
		fmt.Fprintf(w, "  residual          true %s, recursive %s (relative; ‖b‖ = %s)\n",
			solve.Sci(float64(r.RelativeResidual)), solve.Sci(num(r.RecursiveRelativeResidual)), solve.Sci(float64(r.RHSNorm)))
	}
	if r.ForwardErrorEstimate != nil {
		fmt.Fprintf(w, "  forward error     ≈ %s estimated: %s\n", solve.Sci(float64(*r.ForwardErrorEstimate)), r.ForwardErrorNote)
	}
	if r.ErrorVsOnes != nil {
		fmt.Fprintf(w, "  error             max |x_i − 1| = %s (the exact solution is all ones)\n", solve.Sci(float64(*r.ErrorVsOnes)))
	}
	switch {
	case r.CondEstimate > 0 && r.LambdaMin != nil:
		of := "A"
		if r.Preconditioner != "none" {
			of = "the preconditioned operator"
		}
		how := "from below"
		if solve.Method(r.Method) == solve.MINRES {
			how = "max |θ|/min |θ| over the Ritz values θ, an estimate, not a bound, for an indefinite matrix"
		}
		fmt.Fprintf(w, "  condition         ≈ %s (Lanczos estimate for %s, %s; λ in [%s, %s])\n",
			solve.Sci(float64(r.CondEstimate)), of, how, solve.Sci(float64(*r.LambdaMin)), solve.Sci(num(r.LambdaMax)))
	case r.CondEstimate > 0:
		of := "A"
		if r.Preconditioner == "colscale" {
			of = "the column-scaled A"
		}
		fmt.Fprintf(w, "  condition         ≈ %s (LSQR's estimate of the Frobenius-norm condition ‖A‖_F·‖A⁺‖_F of %s: at least the 2-norm condition number, and on ill-conditioned problems it can exceed its target, erring on the side of caution)\n",
			solve.Sci(float64(r.CondEstimate)), of)
	}
	timeLine := fmt.Sprintf("set-up %s, solve %s", fmtSec(r.SetupSeconds), fmtSec(r.SolveSeconds))
	if r.Iterations > 0 {
		timeLine += fmt.Sprintf(", %s per iteration", fmtSec(r.SecondsPerIteration))
	}
	if r.ReadSeconds > 0 {
		timeLine += fmt.Sprintf(", read %s", fmtSec(r.ReadSeconds))
	}
	if r.UploadSeconds != nil {
		timeLine += fmt.Sprintf(", upload %s", fmtSec(*r.UploadSeconds))
	}
	fmt.Fprintf(w, "  time              %s\n", timeLine)
	for _, f := range []struct{ label, path string }{{"solution", r.SolutionFile}, {"history", r.HistoryFile}, {"plot", r.PlotFile}, {"checkpoint", r.CheckpointFile}} {
		if f.path != "" {
			fmt.Fprintf(w, "  %-17s %s\n", f.label, f.path)
		}
	}
	if r.SolutionNote != "" {
		fmt.Fprintf(w, "  solution          %s\n", r.SolutionNote)
	}
	if r.ResumedFrom != nil {
		fmt.Fprintf(w, "  resumed           from the checkpoint's iteration %d\n", *r.ResumedFrom)
	}
}

// num reads an optional figure, zero when absent.
func num(v *solve.Num) float64 {
	if v == nil {
		return 0
	}
	return float64(*v)
}

func fmtSec(s solve.Num) string {
	return formatDuration(time.Duration(float64(s) * float64(time.Second)))
}

// summaryIndent is where a summary line's value starts: two spaces, the
// label, padding to 20 columns.
const summaryIndent = 20

// terminalWidth returns the width of w when it is a terminal, else 0.
func terminalWidth(w io.Writer) int {
	f, ok := w.(*os.File)
	if !ok || !term.IsTerminal(int(f.Fd())) {
		return 0
	}
	width, _, err := term.GetSize(int(f.Fd()))
	if err != nil {
		return 0
	}
	return width
}

// wrapSummary wraps each line of a summary longer than width between
// words: a headline's continuations are indented by two spaces, an item's
// by summaryIndent, so the values read as a column. A single word longer
// than the room left (a long path) stays whole rather than being cut.
func wrapSummary(text string, width int) string {
	var b strings.Builder
	for _, line := range strings.SplitAfter(text, "\n") {
		nl := strings.HasSuffix(line, "\n")
		line = strings.TrimSuffix(line, "\n")
		indent := 2
		if strings.HasPrefix(line, "  ") && utf8.RuneCountInString(line) > summaryIndent {
			indent = summaryIndent
		}
		col := 0
		for i, word := range strings.Split(line, " ") {
			n := utf8.RuneCountInString(word)
			switch {
			case i == 0:
			case col > indent && col+1+n > width:
				b.WriteString("\n" + strings.Repeat(" ", indent))
				col = indent
				if word == "" {
					continue
				}
			default:
				b.WriteByte(' ')
				col++
			}
			b.WriteString(word)
			col += n
		}
		if nl {
			b.WriteByte('\n')
		}
	}
	return b.String()
}
