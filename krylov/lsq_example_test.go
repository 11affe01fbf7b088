package krylov_test

import (
	"context"
	"fmt"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/sparse"
)

// A made-up scenario: calibrating a strain gauge on a test rig. Six readings
// v (millivolts) were taken at known loads f (kilonewtons), and the gauge is
// modelled as v = c0 + c1·f, so the design matrix has a column of ones and a
// column of loads. Six equations, two unknowns: a least-squares problem. The
// readings were made up as 0.5 + 2·f plus a small error pattern that sums
// to zero and is orthogonal to the loads, so the fit recovers 0.5 and 2
// exactly and the residual is the error itself (norm √12·0.01).
func ExampleLSQ() {
	loads := []float64{0, 1, 2, 3, 4, 5}
	errs := []float64{0.01, -0.02, 0.01, 0.01, -0.02, 0.01} // Σ e = 0, Σ f·e = 0
	var rowPtr []int
	var cols []int32
	var vals []float64
	readings := make([]float64, len(loads))
	for i, f := range loads {
		rowPtr = append(rowPtr, len(cols))
		cols = append(cols, 0, 1)
		vals = append(vals, 1, f)
		readings[i] = 0.5 + 2*f + errs[i]
	}
	rowPtr = append(rowPtr, len(cols))
	a, err := sparse.NewCSR(len(loads), 2, rowPtr, cols, vals)
	if err != nil {
		panic(err)
	}

	c := make([]float64, 2)
	res, err := krylov.LSQ(context.Background(), a, readings, c, krylov.LSQSettings{})
	if err != nil {
		panic(err)
	}
	fmt.Printf("%s (%s) after %d iterations\n", res.Status, res.LSQ.StoppedBy, res.Iterations)
	fmt.Printf("offset %.4f mV, sensitivity %.4f mV/kN\n", c[0], c[1])
	fmt.Printf("residual %.4f mV\n", res.ResidualNorm)
	// Output:
	// converged (normal-residual) after 2 iterations
	// offset 0.5000 mV, sensitivity 2.0000 mV/kN
	// residual 0.0346 mV
}
