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
// the solve ends with status Stagnated, never with a false Converged. A
// second rule catches the two residuals stalling together at round-off:
// once the true residual is at the rounding level of b − A·x (a bound on the
// error of computing it, about u·‖(w_i+1)·(|A|·|x| + |b|)_i‖: Higham,
// Accuracy and Stability of Numerical Algorithms, §3.1 and §12.1) and does
// not halve within 20 iterations, the solve ends Stagnated too (the rule is
// beside cgFloorWindow in cg.go). Result.Stagnation names the rule that
// fired: StagnationDrift or StagnationRoundoff. When
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
// # Symmetric indefinite systems: MINRES
//
// MINRES (Paige and Saunders, SIAM J. Numer. Anal. 12(4), 1975; the
// preconditioned form of Elman, Silvester and Wathen, Finite Elements and
// Fast Iterative Solvers, 2nd ed., 2014, §4.2) solves A·x = b for a
// symmetric A that need not be definite (saddle-point and KKT matrices,
// shifted operators), with an optional SPD preconditioner. It keeps CG's
// contract: the same Settings, the stopping test confirmed on the true
// residual, the statuses and errors above, the Recorder, no allocation per
// iteration. Its own residual is monotone (it minimises ‖r‖_{M⁻¹} over the
// Krylov space) but not recursively updated as a vector, so there is no
// residual replacement: a true residual that stops following the
// recursion ends the solve as Stagnated (three strikes, as CG). A singular
// system with b outside the range of A is detected and reported in
// Result.MINRES (Singular, with ‖A·r‖/(‖A‖‖r‖)) with status Stagnated,
// never as converged; the rules are beside minresStrikes in minres.go. An
// indefinite preconditioner (vᵀM⁻¹v < 0) is a breakdown wrapping
// ErrPreconditionerNotSPD. On an SPD matrix MINRES needs about as many
// iterations as CG, each a little dearer (BENCHMARKS.md).
//
// # Least squares
//
// LSQ solves the damped least-squares problem
//
//	min ‖A·x − b‖₂² + λ²‖x‖₂²,  λ = LSQSettings.Damp ≥ 0,
//
// for a TransOperator A with m rows and n columns, tall (m ≥ n) or wide
// (m < n), with products by A and Aᵀ only: AᵀA is never formed, which would
// square the condition number and fill in. Without damping, a wide or rank
// deficient A has many minimisers; started from x0 = 0 without column
// scaling the methods return the minimum-norm one (their iterates stay in
// the Krylov space of AᵀA started from Aᵀb, inside range(Aᵀ)).
//
// Two methods, equal in exact arithmetic: LSQR (Paige and Saunders, ACM TOMS
// 8(1), 1982), Golub–Kahan bidiagonalization with plane rotations, and CGLS
// (Björck, Numerical Methods for Least Squares Problems, SIAM 1996, §7.4),
// conjugate gradients on the normal equations. LSQAuto picks LSQR, always:
// the two cost the same two products per iteration, and LSQR is the more
// reliable in floating point when A is ill-conditioned (Paige and Saunders
// 1982, §7–8). Both iterate on the augmented, scaled problem
//
//	Ā·z ≈ b̄,  Ā = [A·D; λD],  b̄ = [b; 0],  x = D·z,
//
// with D the column scaling (or I); a warm start X0 solves for the
// correction from r0 = b − A·x0, the damping rows included, so it is exact
// with damping too. An iteration applies A once and Aᵀ once and allocates
// nothing. The default cap is 10·min(m, n) iterations (10·n when damped):
// in exact arithmetic both methods end within rank(Ā) iterations.
//
// Stopping rules (Paige and Saunders 1982, §6), with r̄ = [b − A·x; −λx]
// (so Āᵀr̄ = D·(Aᵀr − λ²x)) and ‖Ā‖ the Frobenius estimate ‖B_k‖_F built up
// by the bidiagonalization (CGLS builds the same number, the trace of the
// Lanczos tridiagonal of ĀᵀĀ, from its coefficients):
//
//	residual (compatible):          ‖r̄‖ ≤ BTol·‖b‖ + ATol·‖Ā‖·‖D⁻¹x‖
//	normal-residual (least squares): ‖Āᵀr̄‖ ≤ ATol·‖Ā‖·‖r̄‖
//
// ATol and BTol default to 1e-8. The first says x solves exactly a system
// whose A and b are within relative distances ATol and BTol of the given
// ones; the second, that x is the exact least-squares solution for an A
// perturbed by ATol relatively. The methods' recursive estimates only
// trigger a check: convergence is declared on the residual and normal
// residual recomputed from x (two more products), and Result.LSQ.StoppedBy
// names the rule met. Reaching MaxIter ends with IterationLimit; a failed
// check when the estimates have reached the rounding floor, or three failed
// checks in a row that do not halve the true ‖Āᵀr̄‖, end with Stagnated;
// neither is ever Converged. b = 0 with x0 = 0 returns x = 0 at iteration 0,
// Converged. LSQ returns the same Result as CG, with ‖b − A·x‖ as
// TrueResidualNorm and the condition estimate as Cond; its LSQ part adds
// ‖Aᵀr − λ²x‖, ‖x‖, the ‖Ā‖ estimate, the rule met, the zero columns, and
// echoes the settings used.
//
// Column scaling (LSQSettings.Scaling) is the default preconditioner: D_jj =
// 1/√(‖A(:, j)‖² + λ²), the inverse square roots of the diagonal of
// AᵀA + λ²I, so that Ā has unit columns. It needs the column norms, which
// the operator gives by implementing ColumnNormer; ScaleColumns on an
// operator that does not returns ErrNoColumnNorms, and ScaleAuto then uses
// no scaling. ScaleAuto scales tall problems only: for m < n the eigenvalue
// λ² of AᵀA + λ²I repeats n − m times, a cluster the Krylov methods resolve
// in one step and scaling would spread, and undamped the scaling would
// change which minimiser is found. Scaling never changes a unique minimiser
// (full column rank, or λ > 0); for a rank-deficient A without damping it
// gives the minimiser with least ‖D⁻¹(x − x0)‖. Zero columns of A are found
// whenever the column norms are known, reported 0-based in
// Result.LSQ.ZeroColumns, and never divided by: left unscaled without
// damping, where their entries of x keep x0's values (the minimum-norm
// choice from x0 = 0), and scaled by 1/λ with damping, where they go to 0,
// the damped minimiser.
//
// The Recorder gets Record at iteration 0 and after each iteration, with
// ResidualNorm = ‖b − A·x‖ and NormalResidualNorm = ‖Aᵀr − λ²x‖ (the
// methods' recursive estimates; the recomputed values at checks), and
// Finish once with the same *Result that LSQ returns (Method "lsqr" or
// "cgls", Preconditioner "colscale" or "none", the LSQ part set): one
// Recorder serves every method.
// Cancellation, the time budget, the errors and the panics follow the rules
// above; x may be X0 itself and must not be b.
//
// # Several right-hand sides
//
// CGMulti solves right-hand sides one after the other in one workspace.
// CGBlock solves up to sparse.MaxWidth of them at once, with one block
// product per iteration (BlockOperator, which *sparse.CSR is), each with its
// own Settings, scalars and stopping; a right-hand side that stops leaves
// the block. Every right-hand side takes exactly the steps CG takes on it
// alone, bit for bit: the block kernels give each column the one-vector
// kernels' bits. It shares the matrix's memory traffic, not the vectors':
// 8 right-hand sides ran 1.79× faster than one after another on the
// reference machine (BENCHMARKS.md).
//
// # Diagonal preconditioners
//
// A preconditioner that is a DiagonalPreconditioner (precond.Jacobi) is
// applied inside the residual update, with both inner products, in one
// sweep (sparse.AxpyDiagDot), bitwise the unfused sequence: a Jacobi-PCG
// iteration then costs about what a plain one does.
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
// # Checkpoints and resume
//
// A solve with Settings.Checkpoint (LSQSettings.Checkpoint) hands its full
// recurrence State to Checkpoint.Save every Checkpoint.Every of wall time,
// whenever Checkpoint.Now delivers, and once when its context is cancelled,
// always at the start of an iteration, where the recurrence is consistent:
// for CG the iterate x (whose fused update has been applied), the residual
// r, the direction p, ρ = rᵀz, the stagnation bookkeeping, the residual
// norms the epilogue reports, the Lanczos tridiagonal so far, the iteration
// and product counts and the elapsed time; for LSQR and CGLS their vectors
// and every scalar the loop carries (the layouts are listed in cg_state.go
// and lsq_state.go). The state's vectors are the solve's own, lent for the
// duration of Save, so a checkpoint costs no copy and, once the State's
// small slices exist, no allocation; the check between saves is one clock
// read per iteration.
//
// Settings.Resume continues a solve from such a state: the same operator,
// preconditioner, right-hand side and settings give bitwise the same
// iterates, progress rows (from Iteration+1 on) and Result as the
// uninterrupted solve at the same worker count, because nothing the next
// iteration reads is recomputed differently. What the methods can check
// themselves (method, dimensions, ‖b‖₂ bit for bit, whether a
// preconditioner is present, λ) they check, refusing a state that does not
// fit with an error wrapping ErrResume before anything is computed; that the
// matrix and the settings are the same is the caller's to check (the
// command line compares the matrix id and the request stored beside the
// state). State.Encode and DecodeState give a state a versioned byte form
// with a CRC-32C per section (package internal/binio).
//
// # Panics
//
// The methods panic, with a message beginning "krylov:", on programmer's
// mistakes: a non-square operator for CG, vectors of the wrong length, x and
// b the same slice, negative or NaN settings.
package krylov
