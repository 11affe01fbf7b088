package sparse_test

import (
	"testing"

	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// TestAnalyzePoisson3D checks the report of the 7-point Laplacian against
// what its stencil implies: symmetric, diagonal 6 everywhere, every row
// weakly dominant and exactly the boundary rows strictly dominant (they
// lose a neighbour), bandwidth n² (the z neighbour), envelope n² per row
// from the second plane on plus the partial rows of the first plane, and
// the Gershgorin interval [6 − 6, 6 + 6] = [0, 12].
func TestAnalyzePoisson3D(t *testing.T) {
	const n = 9
	a := stencil.Poisson3D(n)
	r := sparse.Analyze(a, 0)
	N := n * n * n
	interior := (n - 2) * (n - 2) * (n - 2)
	if !r.Symmetric || r.WorstPair != nil || !r.PatternSymmetric || r.Asymmetry != 0 {
		t.Errorf("symmetry: %+v", r)
	}
	if d := r.Diagonal; d.Min != 6 || d.Max != 6 || !d.Positive || d.Zero+d.Negative+d.Missing != 0 {
		t.Errorf("diagonal: %+v", d)
	}
	if r.WeaklyDominant != 1 || r.StrictlyDominant != float64(N-interior)/float64(N) {
		t.Errorf("dominance: weak %v strict %v", r.WeaklyDominant, r.StrictlyDominant)
	}
	// Envelope: rows of the first plane reach back 1 (x neighbour) or n
	// (y neighbour); rows of later planes reach back n².
	var profile int64
	for i := 0; i < N; i++ {
		x, y, z := i%n, (i/n)%n, i/(n*n)
		switch {
		case z > 0:
			profile += n * n
		case y > 0:
			profile += n
		case x > 0:
			profile++
		}
	}
	if r.Bandwidth != n*n || r.LowerBandwidth != n*n || r.Profile != profile {
		t.Errorf("bandwidth %d, profile %d (want %d, %d)", r.Bandwidth, r.Profile, n*n, profile)
	}
	if r.GershgorinLow != 0 || r.GershgorinHigh != 12 {
		t.Errorf("Gershgorin [%v, %v], want [0, 12]", r.GershgorinLow, r.GershgorinHigh)
	}
	if r.RowLength.Min != 4 || r.RowLength.Max != 7 || r.RowLength.Mean != float64(a.NNZ())/float64(N) {
		t.Errorf("row lengths %+v", r.RowLength)
	}
}
