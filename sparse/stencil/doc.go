// Package stencil builds model problems of finite-difference type directly
// as *sparse.CSR matrices: the 2D and 3D Dirichlet Laplacians, a 27-point 3D
// stencil, an anisotropic 3D diffusion operator and a 3D diffusion operator
// whose coefficient jumps between blocks. They serve as tests of the kernels
// and solvers (their spectra are known in closed form for the Laplacians),
// as benchmark problems, and as users' own experiments through
// `residua generate`.
//
// # Grid and ordering
//
// Every problem lives on the interior points of a uniform grid with n points
// per side and homogeneous Dirichlet boundary conditions (the boundary
// values are zero and eliminated). The unknown of grid point (x, y, z), with
// 0 ≤ x, y, z < n, is row x + n·y + n²·z (x runs fastest; in 2D z is absent).
// The matrices are unscaled: the factor 1/h² with h = 1/(n+1) is left out,
// so the 5-point Laplacian has 4 on the diagonal and −1 beside it.
//
// # Storage
//
// The matrices are stored in full (both triangles, not one triangle plus a
// symmetry flag), with sorted columns in each row, as sparse.CSR requires.
// They are built in one allocation per array: the row pointers are counted
// first, then the rows are filled in parallel over independent grid lines,
// so a 200³ Poisson problem (8·10⁶ unknowns, 5.6·10⁷ entries) costs no copy.
// The result is deterministic: the same arguments give bit-identical arrays.
//
// # Panics and errors
//
// The constructors panic, with a message beginning "stencil:", if n < 1, if
// the grid has more than sparse.MaxDim points, or if a coefficient is not
// positive and finite: these are programmer mistakes. Generate, which takes a
// problem name from a user, returns an error instead.
package stencil
