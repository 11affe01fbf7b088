package krylov_test

import (
	"context"
	"fmt"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/sparse"
)

// A made-up scenario: the steady temperature along a copper bar cut into six
// cells, both ends held at 0 °C, with 1 W of heat going into each cell. The
// finite-volume matrix is tridiag(−1, 2, −1), SPD, so conjugate gradients
// applies; its six distinct eigenvalues bound the iterations by six, and the
// symmetric load excites only the three symmetric eigenvectors.
func ExampleCG() {
	const n = 6
	var rowPtr []int
	var cols []int32
	var vals []float64
	for i := 0; i < n; i++ {
		rowPtr = append(rowPtr, len(cols))
		for j := i - 1; j <= i+1; j++ {
			if j >= 0 && j < n {
				v := -1.0
				if j == i {
					v = 2
				}
				cols = append(cols, int32(j))
				vals = append(vals, v)
			}
		}
	}
	rowPtr = append(rowPtr, len(cols))
	a, err := sparse.NewCSR(n, n, rowPtr, cols, vals)
	if err != nil {
		panic(err)
	}

	heat := []float64{1, 1, 1, 1, 1, 1}
	temp := make([]float64, n)
	res, err := krylov.CG(context.Background(), a, heat, temp, nil, krylov.Settings{})
	if err != nil {
		panic(err)
	}
	fmt.Printf("%v after %d iterations, relative residual below 1e-8: %v\n", res.Status, res.Iterations, res.RelResidual < 1e-8)
	for _, t := range temp {
		fmt.Printf("%.3f ", t)
	}
	fmt.Println()
	// Output:
	// converged after 3 iterations, relative residual below 1e-8: true
	// 3.000 5.000 6.000 6.000 5.000 3.000
}
