// Package precond builds preconditioners for conjugate gradients on sparse
// symmetric positive definite (SPD) matrices: Jacobi (the inverse diagonal),
// IC(0) (zero-fill incomplete Cholesky), smoothed-aggregation algebraic
// multigrid (KindAMG, package precond/amg, options through NewWithOptions),
// and an automatic choice between them and none.
//
// # Using it
//
// New(a, kind) builds the preconditioner of a kind (KindNone, KindJacobi,
// KindIC0, or KindAuto, which chooses by the rule below) and returns a
// *Choice holding it (M), what was built and why (Kind, Reason), IC(0)'s
// shift and tries, the set-up time and the memory held. M is nil for
// KindNone, so that CG runs unpreconditioned. NewJacobi and NewIC0 build one
// kind directly. Every preconditioner has
//
//	Precondition(dst, r []float64) // dst = M⁻¹·r
//
// which satisfies krylov.Preconditioner; this package does not import
// krylov, which sits above it.
//
// The set-up is separate from the application and reusable: build once per
// matrix and apply across any number of solves. Precondition reads only the
// preconditioner's own arrays and writes only dst; it keeps no scratch state
// and allocates nothing, so one preconditioner may serve several solves in
// several goroutines at once.
//
// # Arguments and storage
//
// Matrices are *sparse.CSR with full symmetric storage (both triangles) and
// sorted columns; they are only read, and the preconditioners keep no
// reference to them. NewIC0 reads only the lower triangle (diagonal
// included) and trusts the caller that A is symmetric.
//
// Precondition writes dst, and dst and r may be the same slice (both solves
// run in dst, reading r[i] before writing dst[i]); partial overlap is not
// allowed. It panics, with a message starting "precond:", if len(dst) or
// len(r) is not the matrix order: that is a programmer's mistake. Bad matrix
// data is an error: a missing, zero, negative or non-finite diagonal entry
// gives a *DiagonalError naming the row (0-based in the field, 1-based in the
// message), and an IC(0) factorization that finds no positive pivots at any
// shift tried gives a *BreakdownError. A preconditioner's zero value is not
// usable; build it with its constructor.
//
// # Jacobi
//
// M = diag(A) (Saad, Iterative Methods for Sparse Linear Systems, 2nd ed.,
// §10.2). The diagonal is inverted once at set-up, so applying it is one
// multiplication per entry.
//
// # IC(0)
//
// Zero-fill incomplete Cholesky (Meijerink and van der Vorst, Math. Comp. 31,
// 1977; Saad §10.3): M = (I + L)·D·(I + L)ᵀ with L strictly lower triangular
// on the pattern of A's strict lower triangle and D diagonal, computed by the
// Cholesky recurrences with every entry outside A's pattern dropped, so that
// M equals A on A's pattern. For an M-matrix or H-matrix the pivots are
// positive (Meijerink and van der Vorst; Manteuffel), but for a general SPD
// matrix one may be zero or negative. NewIC0 then factors the shifted matrix
// A + α·diag(A) with α = 1e-3, 1e-2, ... (IC0Options), as Manteuffel proposed
// (Math. Comp. 34, 1980); a large enough shift makes the matrix diagonally
// dominant, which guarantees success. The shift that worked and the number
// of factorizations tried are reported (Shift, Tries); after the last try it
// returns a *BreakdownError and never falls back to another preconditioner by
// itself.
//
// Storage: L row by row (for the forward solve) and Lᵀ row by row (for the
// backward solve), each with int32 row pointers and column indices and its
// values contiguous in the order the solve reads them, plus D⁻¹, inverted
// once. That is 2·(12·nnz(L) + 4·n) + 8·n bytes (Bytes). Each row's entries
// are ordered so that the one next to the diagonal, on which the
// recurrence's critical path runs, comes last and is taken from a register.
// The backward solve folds in D⁻¹, so one application is two passes.
//
// Sequential versus level-scheduled solves. By default the triangular
// solves run sequentially on the caller. IC0Options.Parallel runs them on
// GOMAXPROCS goroutines by level scheduling (Anderson and Saad, 1989; Saad
// §11.6.2) of row segments: maximal runs of rows each reading its
// predecessor, done in order by one goroutine, grouped into levels of
// independent segments separated by barriers (sched.go). On a 3D grid the
// segments are the grid lines and the levels the planes of lines y+z =
// const. Every row is computed by the same arithmetic as in the sequential
// solve, so the result is bitwise identical. The parallel path uses one set
// of helper goroutines for the whole package, started on first use and kept
// for the life of the process; a solve that finds them busy runs
// sequentially.
//
// Parallel is off by default because it did not pay on the machine this
// was measured on (2 cores; BENCHMARKS.md has the figures). On 3D Poisson
// 100³, whose factor fits in the last-level cache, one application took
// 6.4 to 9 ms sequentially against 10.6 to 11 ms on two goroutines: about
// 400 barriers per application, and the two goroutines each stream a
// different part of the grid. On 160³, whose factor does not fit, two
// goroutines applied it faster (35 against 56 ms, memory bandwidth being
// the limit) but the whole IC(0)-PCG solve was no faster (9.06 against
// 9.14 s, set-up included), and when the machine is shared every barrier
// at which the partner goroutine's thread is descheduled costs a
// scheduling quantum: under load the parallel application was 3 to 10
// times slower. Row-by-row level scheduling (BenchmarkLevels; the levels of
// the 7-point stencil are the anti-diagonal planes x+y+z = const, 298 of
// them at 100³, whose rows lie far apart in memory) was slower still: on
// one goroutine the level-ordered sweep took three times as long as the
// natural-order one, since it touches a new cache line for almost every
// row where the natural order streams.
//
// # The automatic choice
//
// KindAuto decides from the matrix itself, in this order (the first rule
// that applies wins; thresholds are the Auto* constants):
//
//  1. A diagonal entry that is missing, zero, negative or not finite: the
//     matrix is not SPD; New returns the *DiagonalError.
//  2. No off-diagonal entries: jacobi, which is then the exact inverse.
//  3. Every row diagonally dominant with max_i Σ_{j≠i}|a_ij|/a_ii = ρ ≤ 0.5:
//     jacobi. By Gershgorin's theorem (Golub and Van Loan, Matrix
//     Computations, 4th ed., §7.2.1) the eigenvalues of D⁻¹A lie in
//     [1−ρ, 1+ρ], so its condition number is at most (1+ρ)/(1−ρ) ≤ 3 and
//     Jacobi-CG converges in a few tens of iterations; IC(0) could not save
//     its set-up cost.
//  4. At least 2²⁰ rows (AutoAMGRows), no positive off-diagonal entry and
//     every row sum ≥ 0 (a weakly diagonally dominant Z-matrix, as a scalar
//     diffusion operator is): amg, whose iteration count does not grow with
//     the grid, so that from some size on it pays for its set-up and for an
//     iteration that costs several CG iterations (its apply is about 7.7
//     fine products on Poisson 3D). The rule weighs time, not iterations.
//     Measured on the 2-core EPYC, time to rtol 1e-8 with set-up, one run
//     each (BENCHMARKS.md, "Multigrid"): Poisson3D 200³ (8·10⁶ rows) amg
//     37.0 s against Jacobi 184.9 s and none 317.7 s (a loaded machine);
//     Poisson2D 2000² amg 11.4 s against Jacobi 53.5 s. Below the
//     threshold it loses: Poisson3D 100³ (10⁶ rows, just under 2²⁰) amg
//     3.36 s against IC(0) 2.19 s and none 2.49 s, and jump3d 100³ amg 2.53
//     s against Jacobi 1.64 s, because the set-up (2 to 2.5 s, 60 to 75%
//     of its total) is not yet recovered in 14 iterations. A set-up that
//     fails falls through to rule 5. Where amg loses whatever the size:
//     matrices with positive off-diagonal entries (the structural bcsstk
//     matrices), whose near-null space is not the constant vector; there
//     only the rigid-body modes help (--near-null), which auto cannot
//     guess.
//  5. IC(0) with shifts 0, 1e-3, 1e-2 and 1e-1 (AutoMaxShift): the first that
//     succeeds gives ic0. On the shared SPD matrices that IC(0) factors at
//     these shifts it took 1.5 (bcsstk21) to 40 (bcsstk02) times fewer
//     iterations than Jacobi. In total time (set-up included) it was the
//     fastest or within the timing noise of the fastest on all but two:
//     bcsstk21 (shift 0.1; 12 against Jacobi's 7 ms, since its iteration
//     count falls only 1.5 times) and bcsstk18 (shift 0.1; 1.2 times
//     Jacobi's time). Lowering the threshold to 0.01 would fix those two
//     but make bcsstk28 (shift 0.1) twice as slow as with IC(0).
//  6. Otherwise IC(0) would need a shift of 1 or more, which makes it a poor
//     approximation of A: on four of the five shared matrices that needed
//     shift 1 it lost to Jacobi or to no preconditioner by 1.4 to 1.6 times
//     (bcsstk13, the fifth, it won by 16%). Then: jacobi when the diagonal
//     varies (largest/smallest > 1e3, AutoFlatDiagonal), which Jacobi
//     corrects; none when the diagonal is nearly constant, since Jacobi
//     would then only rescale (on the two such shared matrices, plat362 and
//     plat1919, Jacobi-CG did not converge in 10·n iterations while plain CG
//     did, as in the SciPy reference counts).
//
// The thresholds of rules 4 to 6 are not theorems: they were fixed from the
// measurements of the shared SPD matrices and 3D Poisson problems listed in
// BENCHMARKS.md. The Choice's Reason states which rule applied, with the
// figures it used.
package precond
