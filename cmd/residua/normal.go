package main

import (
	"context"
	"fmt"
	"path/filepath"
	"time"

	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/monitor"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

// normalOpts are solve's flags for the normal equations
// (B·diag(d)·Bᵀ + δI)·y = r: the matrix file is then B.
type normalOpts struct {
	weights string  // --weights: the vector file of d
	reg     float64 // --reg: δ
}

// solveNormal solves (B·diag(d)·Bᵀ + δI)·y = r with B read from path, d
// from --weights and r from -b (default r = N·1, so that y = 1).
func solveNormal(ctx context.Context, e *env, path string, req solve.Request, o *solveOpts, no *normalOpts) error {
	start := time.Now()
	b, _, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		return inputError(err)
	}
	d, _, err := matrixio.ReadVectorFile(no.weights, nil)
	if err != nil {
		return inputError(err)
	}
	if len(d) != b.Cols {
		return inputError(fmt.Errorf("--weights %s has %d entries but B has %d columns", no.weights, len(d), b.Cols))
	}
	m := b.Rows
	var r []float64
	rhs := "r = N·1 (no -b given): the exact solution is all ones"
	ones := o.b == ""
	if o.b != "" {
		r, _, err = matrixio.ReadVectorFile(o.b, nil)
		if err != nil {
			return inputError(err)
		}
		if len(r) != m {
			return inputError(fmt.Errorf("-b %s has %d entries but B has %d rows", o.b, len(r), m))
		}
		rhs = "from " + o.b
	}
	read := time.Since(start)
	x0, err := readX0(o.x0, m, 1)
	if err != nil {
		return err
	}
	mat := solve.Matrix{A: b, Name: path}
	setup, err := solve.PrepareNormal(mat, req, solve.Weights{D: d, Delta: no.reg}, nil)
	if err != nil {
		sum := solve.Failure(mat, req, err)
		sum.RHS, sum.ReadSeconds = rhs, solve.Seconds(read)
		return printOnly(e, o, &sum, normalFlagError(err))
	}
	if ones {
		op := sparse.NewNormal(b)
		if err := op.SetWeights(d, no.reg); err != nil {
			return inputError(err) // PrepareNormal checked them
		}
		r = make([]float64, m)
		one := make([]float64, m)
		for i := range one {
			one[i] = 1
		}
		op.MulVec(r, one)
	}
	mo := monitor.Options{Target: target(req, r), Matrix: filepath.Base(path), Preconditioner: setup.Summary().Preconditioner}
	rec, finish, err := recorders(e, o, false, mo)
	if err != nil {
		return err
	}
	y := make([]float64, m)
	sum, solveErr := setup.Solve(ctx, r, x0[0], y, rec)
	sum.RHS, sum.ReadSeconds = rhs, solve.Seconds(read)
	if ones {
		sum.ErrorVsOnes = solve.NumPtr(maxErrorVsOnes(y))
	}
	runs := []columnRun{{sum: sum, x: y, finish: finish, err: solveErr}}
	return finishRuns(e, o, runs, func(r *columnRun, err error) error { return recorderFailure(ctx, r.sum.Status, err) })
}

// normalFlagError names the flag of a refused normal-equations setting.
func normalFlagError(err error) error {
	if fe, ok := err.(*solve.FieldError); ok {
		flag := map[string]string{"weights": "weights", "reg": "reg"}[fe.Field]
		if flag == "" {
			flag = flagOf(fe.Field)
		}
		return usageErrorf("solve: --%s: %v", flag, fe.Err)
	}
	return err
}
