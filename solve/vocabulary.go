package solve

import (
	"fmt"

	"github.com/residua/residua/krylov"
)

// State is where a job is in its life. Its values are the words every front
// end shows.
type State string

const (
	// Queued: waiting for a solve slot.
	Queued State = "queued"
	// Running: setting up the preconditioner or iterating.
	Running State = "running"
	// Done: ended; the job's Outcome says how.
	Done State = "done"
)

// Outcome says how a solve (or a job, see JobOutcome) ended. Its values are
// the words every front end shows, the status key of the JSON summary and
// the outcome label of the metrics.
type Outcome string

const (
	// Converged: the true residual met the stopping test.
	Converged Outcome = "converged"
	// IterationLimit: the iteration cap came first.
	IterationLimit Outcome = "iteration-limit"
	// TimeLimit: the time budget ran out first.
	TimeLimit Outcome = "time-limit"
	// Stagnated: the iterates stopped improving short of the tolerance.
	Stagnated Outcome = "stagnated"
	// Cancelled: stopped on request (a signal, a cancel, a stream that
	// ended, shutdown).
	Cancelled Outcome = "cancelled"
	// Breakdown: the method met a quantity it cannot go on with: the
	// matrix or preconditioner is not positive definite, or a NaN or Inf
	// appeared.
	Breakdown Outcome = "breakdown"
	// SetupFailed: the preconditioner could not be built (a zero or
	// negative diagonal, an IC(0) with no positive pivots): the matrix is
	// not what the method needs, and no iteration ran.
	SetupFailed Outcome = "setup-failed"
	// Refused: the request or the matrix was refused before any work (a
	// setting out of range, conjugate gradients on a matrix that is not
	// square and symmetric).
	Refused Outcome = "refused"
	// Failed: anything else stopped it (an I/O or internal error); the
	// error says what.
	Failed Outcome = "failed"
)

// Outcomes lists every outcome, in the order the documentation gives them.
var Outcomes = []Outcome{Converged, IterationLimit, TimeLimit, Stagnated, Cancelled, Breakdown, SetupFailed, Refused, Failed}

// OutcomeOf returns the outcome that a method's status names.
func OutcomeOf(s krylov.Status) Outcome {
	switch s {
	case krylov.Converged:
		return Converged
	case krylov.IterationLimit:
		return IterationLimit
	case krylov.TimeLimit:
		return TimeLimit
	case krylov.Stagnated:
		return Stagnated
	case krylov.Cancelled:
		return Cancelled
	case krylov.Breakdown:
		return Breakdown
	}
	return Failed
}

// ParseOutcome returns the Outcome named s, or an error.
func ParseOutcome(s string) (Outcome, error) {
	for _, o := range Outcomes {
		if s == string(o) {
			return o, nil
		}
	}
	return "", fmt.Errorf("unknown outcome %q", s)
}

// JobOutcome is the outcome of a job that solved several right-hand sides:
// the first one that did not converge, or Converged when all did. A job
// stopped before its first result (cancelled while queued, a set-up that
// failed) passes its own outcome as stopped, which wins.
func JobOutcome(results []Outcome, stopped Outcome) Outcome {
	if stopped != "" {
		return stopped
	}
	for _, o := range results {
		if o != Converged {
			return o
		}
	}
	if len(results) == 0 {
		return Failed
	}
	return Converged
}
