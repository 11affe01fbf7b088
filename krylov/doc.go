// Package krylov holds residua's iterative methods for sparse linear systems:
// conjugate gradients, with or without a preconditioner, for symmetric
// positive definite (SPD) systems A·x = b, and least-squares methods for
// rectangular ones.
//
// # Operators and vectors
//
// A method sees the matrix only through Operator (y = A·x) or TransOperator
// (also y = Aᵀ·x), so a *sparse.CSR and a matrix-free operator both work,
// and the preconditioner only through Preconditioner (z = M⁻¹·r). Vectors
// are plain []float64. The solution argument x is written, never read: the
// start is Settings.X0 (never modified), or zero. x must not overlap b or
// X0, except that x may be X0 itself (then the start is read from x and
// overwritten, so X0 changes). The methods allocate their workspace once
// per call, never inside the iteration.
//
// # Settings and the stopping test
//
// Settings is a plain struct whose zero value works: relative tolerance
// 1e-8, absolute tolerance 0, at most 10·n iterations, no time budget, a true
// residual refresh every 50 iterations. Result.Settings echoes the values
// used. There is one stopping test, on the unpreconditioned residual,
//
//	‖b − A·x‖₂ ≤ max(RelTol·‖b‖₂, AbsTol),
//
// and it is only ever declared met on the true residual b − A·x recomputed
// from x, never on the recursively updated one alone: when the recursive
// residual meets the test, the true one is computed; if it falls short, the
// iteration goes on, with the true residual replacing the recursive one
// when they have drifted apart by more than a quarter of the tolerance.
// The same check runs every Settings.RefreshEvery iterations (replacing
// unconditionally would perturb CG's recurrences and cost iterations). If
// the true residual then stops improving while the recursive one still
// falls (CG's rule is documented beside cgStagnationStrikes in cg.go: three
// true-residual recomputations that fail to halve the best true residual so
// far while the recursive residual runs more than 1% below the true one),
// the solve ends with status Stagnated, never with a false Converged. When
// b = 0 the solution x = 0 is returned at once.
//
// An iteration is one product with A inside the loop; the initial
// residual's product and the true-residual recomputations are not
// iterations (Result.Products counts every product).
//
// # Statuses and errors
//
// Not converging is not a Go error: Result.Status says how the solve ended.
//
//   - Converged, IterationLimit, TimeLimit, Stagnated: nil error.
//   - Breakdown: the error is a *BreakdownError naming the quantity, its
//     value and the iteration, wrapping ErrNotPositiveDefinite (pᵀA·p ≤ 0),
//     ErrPreconditionerNotSPD (rᵀM⁻¹r ≤ 0) or ErrNotFinite (a NaN or Inf in a
//     vector, named with its first bad entry, or in a scalar).
//   - Cancelled: the error is ctx.Err() (context.Canceled or
//     context.DeadlineExceeded) when the context ended, or the Recorder's own
//     error when Record returned one. The context is checked before every
//     iteration, so a cancelled solve stops within one iteration.
//
// Whatever the status, the Result is complete and x holds the last iterate:
// Result.TrueResidualNorm is recomputed from it (one more product when the
// loop had not just done so). A wall-time budget (Settings.TimeLimit) is a
// status, TimeLimit, while a context deadline is a cancellation.
//
// # Memory
//
// CG holds, besides A, the preconditioner and the caller's b and x, the
// vectors r, p and A·p, and z = M⁻¹·r with a preconditioner: at most six
// vectors of length n in all. The Lanczos coefficients behind the
// eigenvalue estimates take at most 1 MiB, however many iterations run.
//
// # Progress
//
// A Recorder in Settings gets Record at iteration 0 (the initial residual),
// after every iteration, and Finish once with the Result, on every path
// that returns a Result, including errors.
//
// # Determinism
//
// The methods themselves are sequential; their vector sweeps add in index
// order. Given an Operator and a Preconditioner that are deterministic (as
// sparse's kernels are at a fixed worker count), the same solve gives
// bitwise identical x, history and Result (apart from the timings).
//
// # Panics
//
// The methods panic, with a message beginning "krylov:", on programmer's
// mistakes: a non-square operator for CG, vectors of the wrong length, x and
// b the same slice, negative or NaN settings.
package krylov
