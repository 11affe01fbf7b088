package amg_test

import (
	"context"
	"fmt"
	"testing"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse/stencil"
)

func BenchmarkSetupPoisson3D(b *testing.B) {
	for _, n := range []int{100} {
		a := stencil.Poisson3D(n)
		b.Run(fmt.Sprint(n), func(b *testing.B) {
			for b.Loop() {
				if _, err := amg.New(a, amg.Options{}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

var _ = krylov.CG
var _ = context.Background
