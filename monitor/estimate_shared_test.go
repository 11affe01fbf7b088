package monitor

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond"
)

// rowLog keeps every progress row of a solve.
type rowLog struct{ rows []krylov.Progress }

func (l *rowLog) Record(p krylov.Progress) error { l.rows = append(l.rows, p); return nil }
func (l *rowLog) Finish(*krylov.Result)          {}

// estimatorCase is one shared matrix and preconditioner whose recorded
// history the estimator is replayed on.
type estimatorCase struct{ file, precond string }

// estimatorCases: SPD matrices of the shared collection (MANIFEST.tsv)
// whose CG runs take a few hundred to a few thousand iterations, unpreconditioned
// and with Jacobi.
var estimatorCases = []estimatorCase{
	{"bcsstk14.mtx", "none"}, {"bcsstk14.mtx", "jacobi"},
	{"bcsstk16.mtx.gz", "none"}, {"bcsstk16.mtx.gz", "jacobi"},
	{"nos6.mtx", "none"}, {"nos6.mtx", "jacobi"},
	{"1138_bus.mtx", "none"}, {"1138_bus.mtx", "jacobi"},
	{"gr_30_30.mtx", "none"}, {"bcsstk27.mtx", "jacobi"},
}

// estimatorAt replays rows into a Rate up to the row at fraction frac of
// the run and returns the estimate there with the iterations actually left.
func estimatorAt(rows []krylov.Progress, frac, target float64) (Estimate, int) {
	n := rows[len(rows)-1].Iteration
	r := NewRate(DefaultWindow)
	var e Estimate
	for _, p := range rows {
		r.Add(p)
		if float64(p.Iteration) >= frac*float64(n) {
			e = r.Estimate(target)
			return e, n - p.Iteration
		}
	}
	return r.Estimate(target), 0
}

// TestEstimatorOnSharedHistories measures the time-left estimator on real
// convergence histories: CG on shared SPD matrices with b = A·1 at rtol
// 1e-8, replayed row by row, with the estimate taken at 10%, 50% and 90%
// of the run and compared with the iterations actually left (time left is
// iterations left times the time per iteration, so its error is the same
// ratio). The figures go to BENCHMARKS.md ("Time left"). The assertions
// are the estimator's promises: a figure shown alone (Steady) is within a
// factor of three of the truth in at least three cases out of four, and
// at 90% of the run every estimate made (single or range) is within a
// factor of three or brackets the truth.
func TestEstimatorOnSharedHistories(t *testing.T) {
	if testing.Short() {
		t.Skip("runs CG on ten shared matrices")
	}
	dir := shared.Matrices(t)
	const target = 1e-8
	var table strings.Builder
	steady, steadyGood := 0, 0
	for _, c := range estimatorCases {
		a, _, err := matrixio.ReadMatrixFile(filepath.Join(dir, c.file), nil)
		if err != nil {
			t.Fatal(err)
		}
		b := make([]float64, a.Rows)
		ones := make([]float64, a.Cols)
		for i := range ones {
			ones[i] = 1
		}
		a.MulVec(b, ones)
		kind, _ := precond.ParseKind(c.precond)
		ch, err := precond.New(a, kind)
		if err != nil {
			t.Fatal(err)
		}
		var m krylov.Preconditioner
		if ch.M != nil {
			m = ch.M
		}
		log := &rowLog{}
		x := make([]float64, a.Cols)
		res, err := krylov.CG(context.Background(), a, b, x, m, krylov.Settings{RelTol: target, Recorder: log})
		if err != nil || res.Status != krylov.Converged {
			t.Fatalf("%s/%s: %v %v", c.file, c.precond, res.Status, err)
		}
		fmt.Fprintf(&table, "| %s | %s | %d |", c.file, c.precond, res.Iterations)
		for _, frac := range []float64{0.1, 0.5, 0.9} {
			e, actual := estimatorAt(log.rows, frac, target)
			cell := "unknown"
			switch {
			case !e.Predicted:
				cell = "none"
			case e.Unsteady:
			case e.Steady:
				ratio := float64(e.IterationsLeft) / float64(max(actual, 1))
				cell = fmt.Sprintf("%d (×%.2f)", e.IterationsLeft, ratio)
				steady++
				if ratio >= 1.0/3 && ratio <= 3 {
					steadyGood++
				}
			default:
				cell = fmt.Sprintf("%d–%d", e.Low, e.High)
				if actual >= e.Low && actual <= e.High {
					cell += " (brackets)"
				}
			}
			if frac == 0.9 && e.Predicted && !e.Unsteady {
				ratio := float64(e.IterationsLeft) / float64(max(actual, 1))
				if !(ratio >= 1.0/3 && ratio <= 3) && !(actual >= e.Low && actual <= e.High) {
					t.Errorf("%s/%s at 90%%: estimate %d (range %d–%d), %d actually left", c.file, c.precond, e.IterationsLeft, e.Low, e.High, actual)
				}
			}
			fmt.Fprintf(&table, " %d: %s |", actual, cell)
		}
		table.WriteString("\n")
	}
	t.Logf("matrix | precond | iterations | at 10%%: left, estimate | at 50%% | at 90%%\n%s", table.String())
	if steady > 0 && float64(steadyGood) < 0.75*float64(steady) {
		t.Errorf("single-figure estimates within a factor of 3: %d of %d", steadyGood, steady)
	}
}
