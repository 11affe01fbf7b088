// Package sparse holds residua's sparse matrix type, CSR (compressed sparse
// row storage), and the kernels the iterative methods spend their time in:
// the products y = A·x and y = Aᵀ·x, fused products that also return a dot
// product, and the vector sweeps of conjugate gradients. It also reports on
// a matrix's structure and numerics (Analyze) before a solve. Mul,
// MulTrans and Galerkin form sparse matrix-matrix products (C = A·B,
// Aᵀ·B, Pᵀ·A·P) for set-up work such as multigrid coarse operators and
// Schur complements; spgemm.go explains their two passes.
//
// # Storage
//
// Row i of a CSR holds Val[RowPtr[i]:RowPtr[i+1]] in the columns
// ColIdx[RowPtr[i]:RowPtr[i+1]], strictly increasing. Row pointers are int
// (more than 2³¹ entries are allowed), column indices int32 (rows and
// columns below 2³¹), which halves the index traffic of a product (Saad,
// Iterative Methods for Sparse Linear Systems, 2nd ed., §3.4 describes the
// format; section number from memory). Symmetric matrices are stored in full, both triangles. The zero
// value of CSR is not usable: a 0×0 matrix needs RowPtr = []int{0}.
//
// # Written arguments and aliasing
//
// Kernels write their first argument (dst, or the receiver's result vector
// named first) and never allocate; methods that build a new matrix
// (Transpose, Lower, Upper) return it. An output may be the very same slice
// as a vector input of a vector kernel (elements are read before they are
// written at the same index), but the result of a matrix product must not
// overlap its input x. Matrix methods do not modify the receiver.
//
// # Parallelism and reproducibility
//
// The large kernels run on a persistent pool of Workers() goroutines, sized
// by GOMAXPROCS when first needed; small ones run on the caller. Every
// result is bitwise identical run to run, and also at any worker count:
// products sum each row in column order, and reductions add fixed-size
// block sums in block order. pool.go explains the split.
//
// # Trusted arrays
//
// The products (MulVec, MulVecDot, Residual, MulVecTrans) check a matrix's
// arrays with Validate the first time they see them, remember the result
// on the matrix itself, keyed by the identity and lengths of its arrays),
// and from then on read the arrays without bounds checks, which
// makes the kernel about a quarter faster from memory and half again in
// cache. Giving a matrix new arrays is fine (they are checked again);
// changing RowPtr or ColIdx in place after a product is not allowed, unless
// ForgetTranspose is called afterwards. Changing Val in place is safe for
// MulVec but leaves MulVecTrans's kept transpose stale (ForgetTranspose
// again).
//
// # Panics and errors
//
// Programmer mistakes (vectors of the wrong length, indices out of range, a
// product on arrays that fail Validate) panic with a message beginning
// "sparse:"; each function's doc says when.
// Bad data (invalid arrays) is an error from Validate or the builders.
package sparse
