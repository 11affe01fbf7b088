package krylov_test

import (
	"context"
	"fmt"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
)

// A made-up scenario: three springs in a row between two walls, with the
// middle two nodes' displacements u₁, u₂ tied by a rigid link u₁ = u₂
// enforced by a Lagrange multiplier λ (the link's force). The stiffness
// H = [[2, −1], [−1, 2]] and the constraint B = [1, −1] give the
// saddle-point matrix K = [H Bᵀ; B 0], symmetric but indefinite, so CG does
// not apply and MINRES does. With 1 N pulling node 1 and nothing on node 2,
// the linked nodes move together by 1/2 m and the link carries 1/2 N.
func ExampleMINRES() {
	k, err := sparse.NewCSR(3, 3, []int{0, 3, 6, 8},
		[]int32{0, 1, 2, 0, 1, 2, 0, 1},
		[]float64{2, -1, 1, -1, 2, -1, 1, -1})
	if err != nil {
		panic(err)
	}
	load := []float64{1, 0, 0}
	// The block preconditioner finds the zero (2,2) block by itself.
	m, err := precond.NewBlockDiagonal(k, precond.BlockOptions{H: precond.KindJacobi, S: precond.KindJacobi})
	if err != nil {
		panic(err)
	}
	x := make([]float64, 3)
	res, err := krylov.MINRES(context.Background(), k, load, x, m, krylov.Settings{RelTol: 1e-12})
	if err != nil {
		panic(err)
	}
	fmt.Printf("%v after %d iterations: u₁ = %.3f m, u₂ = %.3f m, λ = %.3f N\n", res.Status, res.Iterations, x[0], x[1], x[2])
	// Output:
	// converged after 3 iterations: u₁ = 0.500 m, u₂ = 0.500 m, λ = 0.500 N
}
