package monitor

import (
	"math"
	"strings"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
)

// On a residual that falls by exactly ρ per iteration the geometric mean of
// the ratios is ρ, and the iterations to a target t from r_k are
// ⌈log(t/r_k)/log ρ⌉ (the average reduction factor as the mean of the
// per-step factors; the definition of an average rate of convergence, Varga,
// Matrix Iterative Analysis, 2nd ed., §3.2, from memory).
func TestRateGeometric(t *testing.T) {
	for _, rho := range []float64{0.5, 0.9, 0.999} {
		r := NewRate(20)
		for k := 0; k <= 100; k++ {
			r.Add(geometric(k, rho))
		}
		e := r.Estimate(1e-12)
		// ρ^k by math.Pow carries a relative error of about one ulp, and the
		// 20th root divides it by 20: 1e-14 is ample.
		if math.Abs(e.Factor-rho) > 1e-14 || e.Span != 20 || !e.Decreasing {
			t.Errorf("ρ=%v: factor %v over %d iterations", rho, e.Factor, e.Span)
		}
		want := int(math.Ceil(math.Log(1e-12/math.Pow(rho, 100)) / math.Log(rho)))
		if rho == 0.5 {
			want = 0 // 0.5^100 = 7.9e-31 is already below 1e-12
		}
		if e.Reached != (want == 0) || (want > 0 && (e.IterationsLeft != want || e.TimeLeft != time.Duration(want)*10*time.Millisecond)) {
			t.Errorf("ρ=%v: %+v, want %d iterations left", rho, e, want)
		}
		if e.PerIteration != 10*time.Millisecond {
			t.Errorf("ρ=%v: %v per iteration", rho, e.PerIteration)
		}
	}
}

// The estimate follows the last window only: after a change of pace, the
// old rate is forgotten once the window has passed.
func TestRateWindow(t *testing.T) {
	r := NewRate(10)
	k, v := 0, 1.0
	for ; k <= 50; k++ {
		r.Add(row(k, v))
		v *= 0.5
	}
	for ; k <= 70; k++ {
		r.Add(row(k, v))
		v *= 0.9
	}
	if e := r.Estimate(0); math.Abs(e.Factor-0.9) > 1e-12 || e.Predicted {
		t.Errorf("after the change: %+v", e)
	}
	// Skipped iterations: the span still covers at most the window.
	r.Reset()
	for k := 0; k <= 300; k += 7 {
		r.Add(row(k, math.Pow(0.8, float64(k))))
	}
	if e := r.Estimate(0); e.Span > 10 || e.Span < 7 || math.Abs(e.Factor-0.8) > 1e-12 {
		t.Errorf("with gaps: %+v", e)
	}
}

func row(k int, v float64) krylov.Progress {
	return krylov.Progress{Iteration: k, Elapsed: time.Duration(k) * time.Second, RelResidual: v}
}

// No prediction while the residual is not decreasing over the window, with
// fewer than two rows, or with a zero or NaN residual at the window's start.
func TestRateNoEstimate(t *testing.T) {
	r := NewRate(5)
	if e := r.Estimate(1e-8); e.Span != 0 || e.Predicted {
		t.Errorf("empty: %+v", e)
	}
	r.Add(row(0, 1))
	if e := r.Estimate(1e-8); e.Span != 0 || e.Predicted || e.Iteration != 0 {
		t.Errorf("one row: %+v", e)
	}
	for k, v := range []float64{1, 2, 0.5, 3, 4, 5} {
		r.Add(row(k+1, v))
	}
	if e := r.Estimate(1e-8); e.Decreasing || e.Predicted || e.Factor <= 1 {
		t.Errorf("rising: %+v", e)
	}
	r.Reset()
	r.Add(row(0, 1))
	r.Add(row(1, 0))
	if e := r.Estimate(1e-8); !e.Reached || e.Factor != 0 || e.IterationsLeft != 0 {
		t.Errorf("exact solution: %+v", e)
	}
	r.Reset()
	r.Add(row(0, math.NaN()))
	r.Add(row(1, 0.5))
	if e := r.Estimate(1e-8); e.Predicted || e.Span != 0 {
		t.Errorf("NaN start: %+v", e)
	}
	// A repeated iteration replaces the last row instead of adding one.
	r.Reset()
	r.Add(row(0, 1))
	r.Add(row(1, 0.5))
	r.Add(row(1, 0.25))
	if e := r.Estimate(0); e.Span != 1 || e.Factor != 0.25 {
		t.Errorf("repeated iteration: %+v", e)
	}
}

// TestRateSpread: a geometric residual (constant rate) gives one figure,
// the exact count ⌈log(t/r_k)/log ρ⌉; a rate that doubles its speed
// halfway through the window gives a range holding both halves'
// predictions; a window whose newer half rises gives no figure at all.
func TestRateSpread(t *testing.T) {
	feed := func(rel func(k int) float64) Estimate {
		r := NewRate(50)
		for k := 0; k <= 100; k++ {
			r.Add(krylov.Progress{Iteration: k, RelResidual: rel(k), Elapsed: time.Duration(k) * time.Millisecond})
		}
		return r.Estimate(1e-12)
	}
	e := feed(func(k int) float64 { return math.Pow(0.9, float64(k)) })
	want := int(math.Ceil(math.Log(1e-12/math.Pow(0.9, 100)) / math.Log(0.9)))
	if !e.Predicted || !e.Steady || e.IterationsLeft != want || e.Low != want || e.High != want {
		t.Errorf("geometric: %+v, want %d steady", e, want)
	}
	// ρ = 0.99 up to iteration 75, then 0.9: the halves predict very
	// differently.
	e = feed(func(k int) float64 {
		if k <= 75 {
			return math.Pow(0.99, float64(k))
		}
		return math.Pow(0.99, 75) * math.Pow(0.9, float64(k-75))
	})
	if !e.Predicted || e.Steady || e.Unsteady || !(e.Low < e.IterationsLeft && e.IterationsLeft < e.High) {
		t.Errorf("changing rate: %+v, want a range around the whole window's figure", e)
	}
	if got := fields(e, 1e-12, time.Second)[3]; !strings.Contains(got, "–") {
		t.Errorf("changing rate shown as %q, want a range", got)
	}
	e = feed(func(k int) float64 {
		if k <= 75 {
			return math.Pow(0.8, float64(k))
		}
		return math.Pow(0.8, 75) * math.Pow(1.01, float64(k-75))
	})
	if !e.Unsteady || fields(e, 1e-12, time.Second)[3] != "left: unknown (rate unsteady)" {
		t.Errorf("rising newer half: %+v, shown %q", e, fields(e, 1e-12, time.Second)[3])
	}
}
