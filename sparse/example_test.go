package sparse_test

import (
	"fmt"

	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// A beam of three segments in a made-up heat-conduction demo: the 1D
// Laplacian tridiag(−1, 2, −1) times a vector, then the report a user sees
// before solving.
func Example() {
	a, err := sparse.NewCSR(3, 3,
		[]int{0, 2, 5, 7},
		[]int32{0, 1, 0, 1, 2, 1, 2},
		[]float64{2, -1, -1, 2, -1, -1, 2})
	if err != nil {
		fmt.Println(err)
		return
	}
	y := make([]float64, 3)
	a.MulVec(y, []float64{1, 2, 3})
	fmt.Println("A·x =", y)

	r := sparse.Analyze(a, 1e-12)
	fmt.Println("symmetric:", r.Symmetric, "positive diagonal:", r.Diagonal.Positive)
	fmt.Printf("Gershgorin interval: [%g, %g]\n", r.GershgorinLow, r.GershgorinHigh)
	// Output:
	// A·x = [0 0 4]
	// symmetric: true positive diagonal: true
	// Gershgorin interval: [0, 4]
}

// The fused kernels of one conjugate gradient step on the 2D Poisson
// problem with the known solution x = 1.
func ExampleCSR_MulVecDot() {
	a := stencil.Poisson2D(4)
	b := stencil.Ones(a) // b = A·1
	x := make([]float64, a.Rows)
	r := append([]float64(nil), b...) // r = b − A·0
	p := append([]float64(nil), r...)
	q := make([]float64, a.Rows)

	rr := sparse.Dot(r, r)
	pq := a.MulVecDot(q, p) // q = A·p and pᵀq in one sweep
	alpha := rr / pq
	sparse.Axpy(x, alpha, p)
	rrNew := sparse.AxpyDot(r, -alpha, q) // r −= α·q and rᵀr
	fmt.Printf("residual norm² %.4g -> %.4g\n", rr, rrNew)
	// Output:
	// residual norm² 24 -> 6.857
}
