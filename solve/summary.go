package solve

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond/amg"
)

// Num is a float64 whose JSON form is a number, or for NaN and ±Inf (which
// JSON lacks) the strings "NaN", "+Inf" and "-Inf", the spelling of the
// history files. Every finite value is written in Go's shortest round-trip
// form, so it reads back bit for bit.
type Num float64

// MarshalJSON implements json.Marshaler.
func (v Num) MarshalJSON() ([]byte, error) {
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

// UnmarshalJSON implements json.Unmarshaler.
func (v *Num) UnmarshalJSON(b []byte) error {
	switch string(b) {
	case `"NaN"`:
		*v = Num(math.NaN())
		return nil
	case `"+Inf"`:
		*v = Num(math.Inf(1))
		return nil
	case `"-Inf"`:
		*v = Num(math.Inf(-1))
		return nil
	}
	var f float64
	if err := json.Unmarshal(b, &f); err != nil {
		return err
	}
	*v = Num(f)
	return nil
}

// NumPtr returns a pointer to v as a Num, for the optional fields.
func NumPtr(v float64) *Num { n := Num(v); return &n }

// Seconds returns d in seconds as a Num.
func Seconds(d time.Duration) Num { return Num(d.Seconds()) }

// Summary is the outcome of one solve, the same whichever front end ran it:
// printed by the command line (text, or this JSON with --json), returned by
// the Go client, carried by the server's result message (package wire
// converts it both ways) and shown by the watch page. Its JSON keys are the
// schema documented in the README; a pointer field is left out when it
// does not apply (the other method's figures) or is not known.
//
// The solve fills the outcome, the residuals, the preconditioner and its
// set-up, the estimates, the timings of the set-up and the iterations, and
// the settings used; the front end fills what only it knows: where the
// matrix and b came from, read and upload times, the server and job, the
// files written and the error against a known solution.
type Summary struct {
	// What was solved.
	Matrix   string `json:"matrix"`
	Rows     int    `json:"rows"`
	Cols     int    `json:"cols"`
	Nonzeros int    `json:"nonzeros"`
	RHS      string `json:"rhs"` // where b came from, in words
	// RHSIndex is the right-hand side's index (0-based) in a job or file
	// with several.
	RHSIndex int `json:"rhs_index"`

	// Remote solves only. MatrixUploaded says whether this solve sent the
	// matrix (false: the server already held it, by its content hash).
	Server         string `json:"server,omitempty"`
	JobID          string `json:"job_id,omitempty"`
	MatrixID       string `json:"matrix_id,omitempty"`
	MatrixUploaded *bool  `json:"matrix_uploaded,omitempty"`
	FromCache      *bool  `json:"preconditioner_from_cache,omitempty"`

	// Outcome. Status is an Outcome word; Converged is Status ==
	// "converged"; Headline says it all in one sentence.
	Method    string `json:"method"`
	Converged bool   `json:"converged"`
	Status    string `json:"status"`
	Headline  string `json:"headline"`
	Error     string `json:"error,omitempty"` // what broke down or failed, in words
	// Advice says what can be done about a failure or a breakdown, in
	// words (see Advice); absent when there is nothing to add.
	Advice     string `json:"advice,omitempty"`
	Iterations int    `json:"iterations"`

	// RelativeResidual is the true ‖b − A·x‖/‖b‖ recomputed from x;
	// TrueResidualNorm is ‖b − A·x‖ and RHSNorm ‖b‖.
	RelativeResidual Num `json:"relative_residual"`
	TrueResidualNorm Num `json:"true_residual_norm"`
	RHSNorm          Num `json:"rhs_norm"`
	// Conjugate gradients only: the recursively updated residual at the end.
	RecursiveRelativeResidual *Num `json:"recursive_relative_residual,omitempty"`
	RecursiveResidualNorm     *Num `json:"recursive_residual_norm,omitempty"`

	// Least squares only: ‖b − A·x‖ and ‖Aᵀ(b − A·x) − damp²·x‖ recomputed
	// from x, ‖x‖, and the estimate of ‖A‖ (of the scaled operator) made
	// along the way; the rule met ("residual": a consistent system;
	// "normal-residual": a least-squares solution); A's zero columns
	// (0-based). Conjugate gradients use StoppedBy too, for the rule that
	// ended a stagnated solve: "roundoff" (the true residual sat at the
	// rounding level of b − A·x) or "drift" (the recursive residual ran
	// ahead of the true one).
	ResidualNorm       *Num   `json:"residual_norm,omitempty"`
	NormalResidualNorm *Num   `json:"normal_residual_norm,omitempty"`
	XNorm              *Num   `json:"x_norm,omitempty"`
	NormEstimate       *Num   `json:"norm_estimate,omitempty"`
	StoppedBy          string `json:"stopped_by,omitempty"`
	ZeroColumns        []int  `json:"zero_columns,omitempty"`

	// The preconditioner (least squares: the column scaling) and why.
	Preconditioner       string `json:"preconditioner"`
	PreconditionerReason string `json:"preconditioner_reason,omitempty"`
	Shift                *Num   `json:"shift,omitempty"` // IC(0)'s diagonal shift
	ShiftTries           int    `json:"shift_tries,omitempty"`
	PreconditionerBytes  *int64 `json:"preconditioner_bytes,omitempty"`
	// Multigrid is AMG's set-up report (precond/amg.Report): levels,
	// rows and entries per level, operator and grid complexity, set-up
	// seconds and fine products, an application's cost in fine
	// products, memory held. Only for the amg preconditioner.
	Multigrid *amg.Report `json:"multigrid,omitempty"`

	// Timings.
	ReadSeconds         Num  `json:"read_seconds"`
	UploadSeconds       *Num `json:"upload_seconds,omitempty"` // remote: the server's receive and parse time
	SetupSeconds        Num  `json:"setup_seconds"`
	SolveSeconds        Num  `json:"solve_seconds"`
	SecondsPerIteration Num  `json:"seconds_per_iteration"`

	// Spectral estimates: for conjugate gradients the Lanczos estimates
	// for the preconditioned operator (from inside, so the condition
	// estimate is a lower bound); for least squares the condition
	// estimate of the scaled operator. Zero when too few iterations ran.
	LambdaMin    *Num `json:"lambda_min_estimate,omitempty"`
	LambdaMax    *Num `json:"lambda_max_estimate,omitempty"`
	CondEstimate Num  `json:"cond_estimate"`

	// How far x can be trusted: ForwardErrorEstimate estimates the
	// relative forward error ‖x − x*‖/‖x*‖ from the condition estimate and
	// the residual, ForwardErrorNote says how and what it is (see
	// assessTrust); Warning is a stable code ("inaccurate": the estimate
	// exceeds TrustThreshold; "singular": the matrix is singular or
	// numerically so) and WarningText says it in words with what helps.
	ForwardErrorEstimate *Num   `json:"forward_error_estimate,omitempty"`
	ForwardErrorNote     string `json:"forward_error_note,omitempty"`
	Warning              string `json:"warning,omitempty"`
	WarningText          string `json:"warning_text,omitempty"`

	// ErrorVsOnes is max_i |x_i − 1| when b = A·1, so that the exact
	// solution is all ones.
	ErrorVsOnes *Num `json:"error_vs_ones,omitempty"`

	// Settings used, defaults filled in.
	RelTol           *Num `json:"rtol,omitempty"` // systems only
	AbsTol           Num  `json:"atol"`           // least squares: its relative atol
	BTol             *Num `json:"btol,omitempty"` // least squares only
	Damp             *Num `json:"damp,omitempty"` // least squares only
	MaxIter          int  `json:"max_iter"`
	TimeLimitSeconds Num  `json:"time_limit_seconds"`
	RefreshEvery     int  `json:"refresh_every,omitempty"` // systems only

	// Files written, and why no solution was written although asked for.
	SolutionFile string `json:"solution_file,omitempty"`
	HistoryFile  string `json:"history_file,omitempty"`
	PlotFile     string `json:"plot_file,omitempty"`
	SolutionNote string `json:"solution_note,omitempty"`

	// ResumedFrom is the iteration a resumed solve continued from (its
	// checkpoint's: --resume, or a server job resumed after a restart);
	// absent for a solve that started from x0. CheckpointFile is the
	// checkpoint the command line kept writing.
	ResumedFrom    *int   `json:"resumed_from_iteration,omitempty"`
	CheckpointFile string `json:"checkpoint_file,omitempty"`

	// MethodReason says why the automatic method chose Method for a
	// system ("minres: A is symmetric but not positive definite ...", or a
	// conjugate gradients breakdown that handed over to MINRES).
	MethodReason string `json:"method_reason,omitempty"`

	// Normal-equations solves only (B·D·Bᵀ + δI)·y = r: the operator in
	// words, the spread of the weights max d/min d (+Inf when a weight is
	// zero), which is what makes these systems ill-conditioned near an
	// interior-point optimum, and δ.
	Operator       string `json:"operator,omitempty"`
	WeightRatio    *Num   `json:"weight_ratio,omitempty"`
	Regularization *Num   `json:"regularization,omitempty"`
}

// LeastSquares reports whether s describes a least-squares solve.
func (s *Summary) LeastSquares() bool { return Method(s.Method).LeastSquares() }

// SetOutcome sets Status, Converged and Headline from o.
func (s *Summary) SetOutcome(o Outcome) {
	s.Status = string(o)
	s.Converged = o == Converged
	s.Headline = Headline(s)
}

// Headline says how a solve ended in one sentence, in the words of the
// trade, e.g. "converged in 297 iterations of preconditioned conjugate
// gradients: true relative residual 9.3e-9 ≤ tolerance 1e-8". For a
// converged system it names the test that was met: the relative one, or
// the absolute one (‖b − A·x‖ ≤ atol) when atol decided.
func Headline(s *Summary) string {
	method := Method(s.Method).Name(s.Preconditioner != "" && s.Preconditioner != "none")
	its := fmt.Sprintf("%d %s", s.Iterations, plural(s.Iterations, "iteration", "iterations"))
	rel := float64(s.RelativeResidual)
	res := "true relative residual " + Sci(rel)
	if s.LeastSquares() {
		res = "relative residual ‖b − A·x‖/‖b‖ = " + Sci(rel)
	}
	tolerance := ""
	if s.RelTol != nil {
		tolerance = " (tolerance " + Sci(float64(*s.RelTol)) + ")"
	}
	switch Outcome(s.Status) {
	case Converged:
		h := converged(s, its, method, res)
		if s.Warning != "" {
			h += "; but x may not be accurate (" + s.Warning + ": see the warning)"
		}
		return h
	case IterationLimit:
		return fmt.Sprintf("stopped without converging at the iteration limit, %s of %s: %s%s", its, method, res, tolerance)
	case TimeLimit:
		return fmt.Sprintf("stopped without converging at the time limit of %s, after %s of %s: %s%s",
			fmtDuration(float64(s.TimeLimitSeconds)), its, method, res, tolerance)
	case Stagnated:
		if s.Warning == WarnSingular && Method(s.Method) == MINRES {
			return fmt.Sprintf("stopped after %s of %s: A is singular and b outside its range, %s is the least-squares level (see the warning)", its, method, res)
		}
		why := "and rounding keeps it from falling further"
		switch s.StoppedBy {
		case krylov.StagnationRoundoff:
			why = "at the rounding level of b − A·x, below which float64 arithmetic cannot push it"
		case krylov.StagnationDrift:
			why = "and the true residual no longer follows the recursive one down"
		}
		return fmt.Sprintf("stagnated after %s of %s: %s, %s%s", its, method, res, why, tolerance)
	case Cancelled:
		return fmt.Sprintf("cancelled after %s of %s: %s", its, method, res)
	case Breakdown:
		return fmt.Sprintf("broke down after %s of %s: %s", its, method, orUnknown(s.Error))
	case SetupFailed:
		return fmt.Sprintf("preconditioner set-up failed, so no iteration ran: %s", orUnknown(s.Error))
	case Refused:
		return "refused: " + orUnknown(s.Error)
	case Failed:
		return "failed: " + orUnknown(s.Error)
	}
	return fmt.Sprintf("%s after %s of %s", s.Status, its, method)
}

// converged is the headline of a converged solve: it names the test that
// was met.
func converged(s *Summary, its, method, res string) string {
	rel := float64(s.RelativeResidual)
	switch {
	case s.StoppedBy == "residual":
		return fmt.Sprintf("converged in %s of %s: a consistent system, ‖b − A·x‖ ≤ btol·‖b‖ + atol·‖A‖·‖x‖ (%s)", its, method, res)
	case s.StoppedBy == "normal-residual":
		return fmt.Sprintf("converged in %s of %s: a least-squares solution, ‖Aᵀr‖ ≤ atol·‖A‖·‖r‖ (%s)", its, method, res)
	case s.LeastSquares():
		return fmt.Sprintf("converged in %s of %s: %s", its, method, res)
	case s.RelTol != nil && float64(s.AbsTol) > float64(*s.RelTol)*float64(s.RHSNorm):
		return fmt.Sprintf("converged in %s of %s: true residual ‖b − A·x‖ = %s ≤ atol %s (relative %s)",
			its, method, Sci(float64(s.TrueResidualNorm)), Sci(float64(s.AbsTol)), Sci(rel))
	case s.RelTol != nil:
		return fmt.Sprintf("converged in %s of %s: %s ≤ tolerance %s", its, method, res, Sci(float64(*s.RelTol)))
	}
	return fmt.Sprintf("converged in %s of %s: %s", its, method, res)
}

func orUnknown(s string) string {
	if s == "" {
		return "(no reason given)"
	}
	return s
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// Sci formats a value in short scientific notation, as the summaries print
// residuals and tolerances: 9.30e-9, 1.00e+00, 0.
func Sci(v float64) string {
	if v == 0 {
		return "0"
	}
	return strings.Replace(strconv.FormatFloat(v, 'e', 2, 64), "e-0", "e-", 1)
}

// ShortFloat formats a matrix entry in the fewest digits that read back.
func ShortFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// fmtDuration formats seconds as a short duration for sentences.
func fmtDuration(sec float64) string {
	d := time.Duration(sec * float64(time.Second))
	switch {
	case d >= time.Second:
		return d.Round(10 * time.Millisecond).String()
	case d >= time.Millisecond:
		return d.Round(10 * time.Microsecond).String()
	}
	return d.String()
}
