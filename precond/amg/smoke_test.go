package amg_test

import (
	"context"
	"testing"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse/stencil"
)

func TestSmoke(t *testing.T) {
	for _, n := range []int{20, 40, 60} {
		a := stencil.Poisson3D(n)
		b := stencil.Ones(a)
		h, err := amg.New(a, amg.Options{})
		if err != nil {
			t.Fatal(err)
		}
		t.Log(h.Report())
		x := make([]float64, a.Rows)
		res, err := krylov.CG(context.Background(), a, b, x, h, krylov.Settings{})
		t.Log(n, res.Iterations, res.Status, err)
		res, err = krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{})
		t.Log(n, "cg", res.Iterations, res.Status, err)
	}
}
