package main

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"
)

// num is a float64 that JSON-encodes NaN and ±Inf as the strings "NaN",
// "+Inf" and "-Inf" (JSON has no such numbers; the history files use the
// same spelling), and every finite value in Go's shortest round-trip form.
type num float64

func (v num) MarshalJSON() ([]byte, error) {
	f := float64(v)
	switch {
	case math.IsNaN(f):
		return []byte(`"NaN"`), nil
	case math.IsInf(f, 1):
		return []byte(`"+Inf"`), nil
	case math.IsInf(f, -1):
		return []byte(`"-Inf"`), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

func (v *num) UnmarshalJSON(b []byte) error {
	switch string(b) {
	case `"NaN"`:
		*v = num(math.NaN())
		return nil
	case `"+Inf"`:
		*v = num(math.Inf(1))
		return nil
	case `"-Inf"`:
		*v = num(math.Inf(-1))
		return nil
	}
	var f float64
	if err := json.Unmarshal(b, &f); err != nil {
		return err
	}
	*v = num(f)
	return nil
}

// solveReport is the summary of a solve or least-squares run: printed for a
// person by writeText and as one JSON object by writeJSON (--json). The JSON
// keys are documented in the README; keep the two in step.
type solveReport struct {
	// What was solved.
	Matrix   string `json:"matrix"`
	Rows     int    `json:"rows"`
	Cols     int    `json:"cols"`
	Nonzeros int    `json:"nonzeros"`
	RHS      string `json:"rhs"` // where b came from, in words

	// Remote solves only.
	Server   string `json:"server,omitempty"`
	JobID    string `json:"job_id,omitempty"`
	MatrixID string `json:"matrix_id,omitempty"`

	// Outcome.
	Method     string `json:"method"`
	Converged  bool   `json:"converged"`
	Status     string `json:"status"`
	Error      string `json:"error,omitempty"` // breakdown or failure message
	Iterations int    `json:"iterations"`

	// RelativeResidual is the true ‖b − A·x‖/‖b‖ recomputed from x.
	RelativeResidual num `json:"relative_residual"`
	TrueResidualNorm num `json:"true_residual_norm"`
	RHSNorm          num `json:"rhs_norm"`
	// CG only: the recursively updated residual at the end.
	RecursiveRelativeResidual *num `json:"recursive_relative_residual,omitempty"`
	RecursiveResidualNorm     *num `json:"recursive_residual_norm,omitempty"`

	// Least squares only: ‖b − A·x‖ and ‖Aᵀ(b − A·x)‖ at the end, and the
	// estimates of ‖A‖ and cond(A) made along the way.
	ResidualNorm       *num `json:"residual_norm,omitempty"`
	NormalResidualNorm *num `json:"normal_residual_norm,omitempty"`
	NormEstimate       *num `json:"norm_estimate,omitempty"`
	// StoppedBy names the rule met: "residual" (consistent system) or
	// "normal-residual" (least-squares solution).
	StoppedBy string `json:"stopped_by,omitempty"`
	// ZeroColumns lists A's zero columns (0-based): A is rank deficient.
	ZeroColumns []int `json:"zero_columns,omitempty"`

	// Preconditioner and timings.
	Preconditioner       string `json:"preconditioner"`
	PreconditionerReason string `json:"preconditioner_reason,omitempty"`
	Shift                *num   `json:"shift,omitempty"` // CG: IC(0)'s diagonal shift
	ShiftTries           int    `json:"shift_tries,omitempty"`
	PreconditionerBytes  *int64 `json:"preconditioner_bytes,omitempty"`
	PreconditionerCached *bool  `json:"preconditioner_from_cache,omitempty"`
	ReadSeconds          num    `json:"read_seconds"`
	UploadSeconds        *num   `json:"upload_seconds,omitempty"` // remote: the server's receive and parse time
	SetupSeconds         num    `json:"setup_seconds"`
	SolveSeconds         num    `json:"solve_seconds"`
	SecondsPerIteration  num    `json:"seconds_per_iteration"`

	// Spectral estimates from the Lanczos tridiagonal (CG) or the
	// bidiagonalisation (least squares); zero when too few iterations ran.
	LambdaMin    *num `json:"lambda_min_estimate,omitempty"` // CG only
	LambdaMax    *num `json:"lambda_max_estimate,omitempty"` // CG only
	CondEstimate num  `json:"cond_estimate"`

	// ErrorVsOnes is max_i |x_i − 1| when b = A·1, so the exact solution
	// is all ones.
	ErrorVsOnes *num `json:"error_vs_ones,omitempty"`

	// Settings used.
	RelTol           *num `json:"rtol,omitempty"` // CG only
	AbsTol           num  `json:"atol"`
	BTol             *num `json:"btol,omitempty"`
	Damp             *num `json:"damp,omitempty"`
	MaxIter          int  `json:"max_iter"`
	TimeLimitSeconds num  `json:"time_limit_seconds"`

	// Files written.
	SolutionFile string `json:"solution_file,omitempty"`
	HistoryFile  string `json:"history_file,omitempty"`
	PlotFile     string `json:"plot_file,omitempty"`
	// SolutionNote says why no solution file was written although -o was given.
	SolutionNote string `json:"solution_note,omitempty"`
}

func numPtr(v float64) *num { n := num(v); return &n }

func seconds(d time.Duration) num { return num(d.Seconds()) }

func (r *solveReport) writeJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	enc.SetEscapeHTML(false)
	return enc.Encode(r)
}

// writeText prints the summary a person reads at a glance: the outcome
// first, then the numbers that say how far to trust it, then where the time
// went.
func (r *solveReport) writeText(w io.Writer) {
	verdict := "CONVERGED"
	if !r.Converged {
		verdict = "NOT CONVERGED (" + r.Status + ")"
	}
	fmt.Fprintf(w, "%s  %s in %d iterations", verdict, r.methodName(), r.Iterations)
	switch {
	case r.ResidualNorm != nil && r.StoppedBy == "residual":
		fmt.Fprintf(w, ": consistent system, ‖b − A·x‖ ≤ btol·‖b‖ + atol·‖A‖·‖x‖\n")
	case r.ResidualNorm != nil && r.StoppedBy == "normal-residual":
		fmt.Fprintf(w, ": least-squares solution, ‖Aᵀr‖ ≤ atol·‖A‖·‖r‖\n")
	case r.ResidualNorm != nil:
		fmt.Fprintf(w, ", relative residual %s\n", sci(float64(r.RelativeResidual)))
	case r.Converged:
		fmt.Fprintf(w, ", true relative residual %s ≤ tolerance %s\n", sci(float64(r.RelativeResidual)), sci(float64(*r.RelTol)))
	default:
		fmt.Fprintf(w, ", true relative residual %s (tolerance %s)\n", sci(float64(r.RelativeResidual)), sci(float64(*r.RelTol)))
	}
	if r.Error != "" {
		fmt.Fprintf(w, "  problem           %s\n", r.Error)
	}
	fmt.Fprintf(w, "  matrix            %s: %d×%d, %d nonzeros\n", r.Matrix, r.Rows, r.Cols, r.Nonzeros)
	if r.JobID != "" {
		fmt.Fprintf(w, "  server            %s, job %s\n", r.Server, r.JobID)
	}
	fmt.Fprintf(w, "  right-hand side   %s\n", r.RHS)
	pc := r.Preconditioner
	switch reason := r.PreconditionerReason; {
	case strings.HasPrefix(reason, pc+":"):
		pc = reason
	case reason != "":
		pc += " (" + reason + ")"
	}
	if r.PreconditionerCached != nil && *r.PreconditionerCached {
		pc += ", reused from the server's cache"
	}
	fmt.Fprintf(w, "  preconditioner    %s\n", pc)
	if r.ResidualNorm != nil {
		fmt.Fprintf(w, "  residual          ‖b − A·x‖ = %s, ‖Aᵀr‖ = %s", sci(float64(*r.ResidualNorm)), sci(float64(*r.NormalResidualNorm)))
		if r.NormEstimate != nil {
			fmt.Fprintf(w, ", ‖A‖ ≈ %s", sci(float64(*r.NormEstimate)))
		}
		fmt.Fprintln(w)
		if len(r.ZeroColumns) > 0 {
			fmt.Fprintf(w, "  zero columns      %d (A is rank deficient), first %v\n", len(r.ZeroColumns), r.ZeroColumns[:min(len(r.ZeroColumns), 10)])
		}
	} else {
		fmt.Fprintf(w, "  residual          true %s, recursive %s (relative; ‖b‖ = %s)\n",
			sci(float64(r.RelativeResidual)), sci(float64(*r.RecursiveRelativeResidual)), sci(float64(r.RHSNorm)))
	}
	if r.ErrorVsOnes != nil {
		fmt.Fprintf(w, "  error             max |x_i − 1| = %s (the exact solution is all ones)\n", sci(float64(*r.ErrorVsOnes)))
	}
	switch {
	case r.CondEstimate > 0 && r.LambdaMin != nil:
		fmt.Fprintf(w, "  condition         ≈ %s (Lanczos estimate for the preconditioned operator, λ in [%s, %s])\n",
			sci(float64(r.CondEstimate)), sci(float64(*r.LambdaMin)), sci(float64(*r.LambdaMax)))
	case r.CondEstimate > 0:
		fmt.Fprintf(w, "  condition         ≈ %s (estimate for the scaled operator, from below)\n", sci(float64(r.CondEstimate)))
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
	for _, f := range []struct{ label, path string }{{"solution", r.SolutionFile}, {"history", r.HistoryFile}, {"plot", r.PlotFile}} {
		if f.path != "" {
			fmt.Fprintf(w, "  %-17s %s\n", f.label, f.path)
		}
	}
	if r.SolutionNote != "" {
		fmt.Fprintf(w, "  solution          %s\n", r.SolutionNote)
	}
}

func (r *solveReport) methodName() string {
	switch r.Method {
	case "cg":
		if r.Preconditioner != "" && r.Preconditioner != "none" {
			return "preconditioned conjugate gradients"
		}
		return "conjugate gradients"
	case "lsqr":
		return "LSQR"
	case "cgls":
		return "CGLS"
	case "":
		return "solve"
	}
	return r.Method
}

// sci formats a value in short scientific notation.
func sci(v float64) string {
	if v == 0 {
		return "0"
	}
	return strings.Replace(strconv.FormatFloat(v, 'e', 2, 64), "e-0", "e-", 1)
}

func fmtSec(s num) string {
	return formatDuration(time.Duration(float64(s) * float64(time.Second)))
}
