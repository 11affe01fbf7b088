package amg_test

import (
	"testing"

	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse/stencil"
)

// BenchmarkSetup times New alone on Poisson3D 60³.
func BenchmarkSetup(b *testing.B) {
	a := stencil.Poisson3D(60)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := amg.New(a, amg.Options{}); err != nil {
			b.Fatal(err)
		}
	}
}
