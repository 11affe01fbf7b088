package main

import (
	"fmt"

	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
)

// addAMGFlags registers the multigrid options of 'residua solve' (used with
// --precond amg, or auto when it picks AMG).
func addAMGFlags(f *cmdFlags, o *solveOpts) {
	f.Float64Var(&o.amg.Theta, "amg-theta", 0, "multigrid strength threshold `θ` in (0, 1), halved per level (default 0.08)")
	f.StringVar(&o.amg.Smoother, "amg-smoother", "", "multigrid `smoother`: chebyshev (default) or l1jacobi")
	f.IntVar(&o.amg.Degree, "amg-degree", 0, "Chebyshev smoother `degree`, 1 to 8 (default 2)")
	f.IntVar(&o.amg.BlockSize, "block-size", 0, "multigrid: `n` consecutive unknowns per node, aggregated together (3 for 3D elasticity; default 1)")
	f.StringVar(&o.nearNull, "near-null", "", "multigrid near-null space: a Matrix Market `file` with one row per unknown and one column per vector (default: the constant vector)")
}

// readNearNull reads a near-null space: a Matrix Market matrix (array or
// coordinate) with n rows and k columns, into row-major storage.
func readNearNull(path string) (*solve.NearNull, error) {
	m, _, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		return nil, inputError(err)
	}
	if m.Cols < 1 {
		return nil, inputError(fmt.Errorf("--near-null %s has no columns", path))
	}
	v := make([]float64, m.Rows*m.Cols)
	for i := 0; i < m.Rows; i++ {
		for p := m.RowPtr[i]; p < m.RowPtr[i+1]; p++ {
			v[i*m.Cols+int(m.ColIdx[p])] = m.Val[p]
		}
	}
	return &solve.NearNull{K: m.Cols, Values: v}, nil
}
