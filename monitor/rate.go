package monitor

import (
	"math"
	"time"

	"github.com/residua/residua/krylov"
)

// DefaultWindow is the number of recent iterations the rate is averaged
// over when Options.Window is zero. Fifty smooths CG's ripples (its residual
// is not monotone) while still following a change of pace within a few
// seconds of a fast solve: common practice, not a derived value.
const DefaultWindow = 50

// Rate estimates how fast a solve converges from its recent progress. It
// keeps the rows of the last Window iterations in a ring and defines the
// average reduction factor per iteration as the geometric mean of the
// per-iteration ratios over that window,
//
//	ρ = (r_k / r_{k−w})^{1/w},
//
// where r is the relative residual and w the iterations the window spans
// (the product of the ratios telescopes). From ρ < 1 it predicts the
// iterations still needed to reach a target t, ⌈log(t/r_k)/log ρ⌉, and the
// time they take at the window's mean time per iteration. It makes no
// prediction while the residual is not decreasing over the window (ρ ≥ 1),
// has not spanned two rows yet, or the oldest residual is zero.
//
// CG's rate is not constant: its residual is not monotone, and it speeds
// up as the extreme eigenvalues are resolved (superlinear convergence:
// Saad, Iterative Methods for Sparse Linear Systems, 2nd ed., §6.11.3, and
// van der Sluis and van der Vorst, Numer. Math. 48, 1986), so one window's
// rate can be far from the rest of the run's. Rate therefore also makes
// the prediction from each half of the window: when the three disagree by
// more than a factor of two, the estimate is a range (Low to High), and
// when a half of the window did not decrease at all, it is unknown.
//
// The zero Rate is not usable; make one with NewRate. Add allocates
// nothing. A Rate has no lock.
type Rate struct {
	ring  []sample
	head  int // index of the oldest sample
	count int
}

type sample struct {
	it      int
	elapsed time.Duration
	rel     float64
}

// NewRate returns a Rate averaging over the last window iterations
// (DefaultWindow if window < 1).
func NewRate(window int) *Rate {
	if window < 1 {
		window = DefaultWindow
	}
	return &Rate{ring: make([]sample, window+1)}
}

// Reset forgets every row.
func (r *Rate) Reset() { r.head, r.count = 0, 0 }

// Add takes one row of progress. A row whose iteration is not past the
// latest one replaces it (a repeated record of the same iteration).
func (r *Rate) Add(p krylov.Progress) {
	s := sample{it: p.Iteration, elapsed: p.Elapsed, rel: p.RelResidual}
	if r.count > 0 {
		last := (r.head + r.count - 1) % len(r.ring)
		if s.it <= r.ring[last].it {
			r.ring[last] = s
			return
		}
	}
	if r.count < len(r.ring) {
		r.ring[(r.head+r.count)%len(r.ring)] = s
		r.count++
	} else {
		r.ring[r.head] = s
		r.head = (r.head + 1) % len(r.ring)
	}
	// Keep only the rows within the window's span of iterations, in case
	// the recorder skipped iterations.
	for r.count > 2 && s.it-r.ring[r.head].it > len(r.ring)-1 {
		r.head = (r.head + 1) % len(r.ring)
		r.count--
	}
}

// Estimate is what Rate predicts.
type Estimate struct {
	// Iteration and RelResidual are the latest row's.
	Iteration   int
	RelResidual float64
	// Span is the number of iterations the window covers; zero until two
	// rows have been added.
	Span int
	// Factor is the average reduction per iteration ρ over the window
	// (valid when Span > 0; 0 when the latest residual is zero).
	Factor float64
	// PerIteration is the mean wall time of one iteration over the window.
	PerIteration time.Duration
	// Decreasing says ρ < 1, so the predictions below are made.
	Decreasing bool
	// Reached says the latest relative residual is at or below the target.
	Reached bool
	// IterationsLeft and TimeLeft predict what it takes to reach the
	// target from the whole window's rate; valid when Predicted is true.
	IterationsLeft int
	TimeLeft       time.Duration
	Predicted      bool
	// Low and High bound the predictions of the whole window and of each
	// of its halves (iterations, and time at PerIteration); Steady says
	// they agree within a factor of two (High ≤ 2·Low), so that one
	// figure is worth showing. Unsteady says a half of the window did not
	// decrease although the whole did: the rate is too uneven to predict.
	Low, High         int
	TimeLow, TimeHigh time.Duration
	Steady, Unsteady  bool
}

// steadyRatio is how far the half-window predictions may spread (High over
// Low) for one figure to be shown rather than a range: common practice, a
// factor of two being the usual limit of a figure a person plans by.
const steadyRatio = 2

// maxPrediction caps IterationsLeft: beyond it the estimate is noise and
// the arithmetic of TimeLeft could overflow.
const maxPrediction = 1 << 40

// Estimate predicts the progress towards the target relative residual
// (no prediction when target ≤ 0).
func (r *Rate) Estimate(target float64) Estimate {
	var e Estimate
	if r.count == 0 {
		return e
	}
	first := r.ring[r.head]
	last := r.ring[(r.head+r.count-1)%len(r.ring)]
	e.Iteration, e.RelResidual = last.it, last.rel
	e.Reached = target > 0 && last.rel <= target
	if e.Reached {
		e.Predicted = true
	}
	if r.count < 2 || !(first.rel > 0) || math.IsInf(first.rel, 0) || math.IsNaN(last.rel) {
		return e
	}
	e.Span = last.it - first.it
	e.PerIteration = (last.elapsed - first.elapsed) / time.Duration(e.Span)
	// The geometric mean of the ratios r_j/r_{j−1} over the window is the
	// span-th root of their product, which telescopes to r_k/r_{k−w}.
	e.Factor = math.Pow(last.rel/first.rel, 1/float64(e.Span))
	e.Decreasing = e.Factor < 1
	if !e.Decreasing || target <= 0 || e.Reached {
		return e
	}
	// Iterations n with r_k·ρⁿ ≤ t: n ≥ log(t/r_k)/log ρ.
	left := func(factor float64) (float64, bool) {
		n := math.Ceil(math.Log(target/last.rel) / math.Log(factor))
		return n, factor < 1 && n <= maxPrediction
	}
	n, ok := left(e.Factor)
	if !ok {
		return e
	}
	e.IterationsLeft = int(n)
	e.TimeLeft = time.Duration(n * float64(e.PerIteration))
	e.Predicted = true
	e.Low, e.High = e.IterationsLeft, e.IterationsLeft
	e.Steady = true
	if r.count >= 5 { // each half spans at least two iterations
		mid := r.ring[(r.head+r.count/2)%len(r.ring)]
		for _, h := range [2][2]sample{{first, mid}, {mid, last}} {
			span := h[1].it - h[0].it
			if span < 1 || !(h[0].rel > 0) {
				continue
			}
			f := math.Pow(h[1].rel/h[0].rel, 1/float64(span))
			nh, ok := left(f)
			if !ok {
				e.Unsteady, e.Steady = true, false
				continue
			}
			e.Low, e.High = min(e.Low, int(nh)), max(e.High, int(nh))
		}
		if !e.Unsteady {
			e.Steady = float64(e.High) <= steadyRatio*float64(max(e.Low, 1))
		}
	}
	e.TimeLow = time.Duration(float64(e.Low) * float64(e.PerIteration))
	e.TimeHigh = time.Duration(float64(e.High) * float64(e.PerIteration))
	return e
}
