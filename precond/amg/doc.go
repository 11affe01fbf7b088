// Package amg is a smoothed-aggregation algebraic multigrid preconditioner
// for conjugate gradients on sparse SPD matrices (P. Vaněk, J. Mandel and
// M. Brezina, "Algebraic multigrid by smoothed aggregation for second and
// fourth order elliptic problems", Computing 56, 1996, 179–196; background
// in Saad, Iterative Methods for Sparse Linear Systems 2nd ed., ch. 13, and
// Briggs, Henson and McCormick, A Multigrid Tutorial 2nd ed.).
//
// New(a, opt) builds the hierarchy once; (*AMG).Precondition applies one
// symmetric V(1,1) cycle and satisfies krylov.Preconditioner. The set-up, level
// by level until a level has at most Options.MaxCoarse (2000) unknowns:
//
//   - Strength of connection (aggregate.go): i and j are strongly connected
//     when |a_ij| ≥ θ·√(|a_ii|·|a_jj|), with Frobenius norms of blocks when a
//     node holds several unknowns (Options.BlockSize). θ is 0.08 on the
//     finest level and halves on each coarser one (the paper's choice, from
//     memory).
//   - Aggregation (aggregate.go): the paper's three greedy phases, in node
//     order, so that the aggregates are the same at any worker count.
//   - Tentative prolongator (prolong.go): the near-null space (the constant
//     vector, or Options.NearNull's k vectors such as the rigid-body modes)
//     restricted to each aggregate and orthonormalised by a small QR
//     (gonum); the R factors form the coarse near-null space.
//   - Smoothing: P = (I − ω·D_F⁻¹·A_F)·P_tent with A_F the filtered matrix
//     (weak connections lumped onto the diagonal) and ω = 4/(3·ρ(D_F⁻¹A_F)),
//     ρ estimated by 10 Lanczos steps (smooth.go).
//   - Coarse operator A_c = Pᵀ·A·P by sparse.Mul (symmetric to rounding:
//     its two triangles are summed in different orders).
//   - Stall rule: if a coarse level would keep more than 80% of the finer
//     level's unknowns (StallRatio), coarsening stops at the finer level.
//   - The coarsest level is solved exactly by dense Cholesky (gonum); New
//     refuses, with an error wrapping ErrNotSPD, an operator that has none.
//     A coarsest level above MaxDirect (4000) unknowns, reached only when
//     coarsening stalls, is smoothed twice instead.
//
// The cycle (amg.go): pre-smoothing from a zero start, restriction of the
// residual by Pᵀ, the coarse cycle, prolongation, and post-smoothing with
// the same smoother. Both smoothers are self-adjoint in the A inner product
// (polynomials in D⁻¹A with D diagonal), so the cycle is a symmetric
// positive definite preconditioner and CG stays CG. The default smoother is
// a Chebyshev polynomial of degree 2 (Options.Degree) on
// [λmax/30, 1.1·λmax] of D⁻¹A, λmax estimated once per level by Lanczos;
// the alternative is one l1-Jacobi sweep (D_l1 = diag(Σ_j|a_ij|)). All
// vectors are allocated at set-up: an application allocates nothing, and
// it may run in several goroutines at once (each takes its own set of work
// vectors from a free list; a set is added only when more applications run
// at once than before).
//
// Determinism: strength, aggregation, QR and the smoothing weights are
// computed serially in a fixed order; sparse.Mul and the vector kernels are
// bitwise reproducible at any worker count; so the hierarchy and every
// application are the same bits run to run and at any GOMAXPROCS.
//
// Report gives the levels, rows and entries per level, operator complexity
// Σ nnz(A_l)/nnz(A_0), grid complexity, set-up seconds and the same in fine
// products, an application's cost in fine products, and the memory held.
//
// Errors: New returns errors wrapping ErrNotSPD (a diagonal entry missing,
// not positive or not finite; a coarsest level without a Cholesky factor)
// or ErrOptions (an option out of range, a near-null space of the wrong
// size or with non-finite entries). Precondition panics on vectors of the
// wrong length, a programmer's mistake.
package amg
