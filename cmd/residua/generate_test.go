package main

import (
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// generate writes each model problem as a symmetric Matrix Market file that
// reads back to exactly the matrix the stencil package builds, and --rhs
// writes b = A·1.
func TestGenerate(t *testing.T) {
	tests := []struct {
		kind  string
		extra []string
		want  *sparse.CSR
	}{
		{"poisson2d", nil, stencil.Poisson2D(7)},
		{"poisson3d", nil, stencil.Poisson3D(7)},
		{"stencil27", nil, stencil.Stencil27(7)},
		{"anisotropic3d", nil, stencil.Anisotropic3D(7, stencil.DefaultKX, stencil.DefaultKY, stencil.DefaultKZ)},
		{"anisotropic3d", []string{"--kx", "3", "--ky", "0.5", "--kz", "1e-3"}, stencil.Anisotropic3D(7, 3, 0.5, 1e-3)},
		{"jump3d", nil, stencil.Jump3D(7, stencil.DefaultContrast)},
		{"jump3d", []string{"--contrast", "250"}, stencil.Jump3D(7, 250)},
	}
	for _, tt := range tests {
		t.Run(tt.kind+strings.Join(tt.extra, ""), func(t *testing.T) {
			dir := t.TempDir()
			a, b := filepath.Join(dir, "A.mtx"), filepath.Join(dir, "b.mtx")
			args := append([]string{"generate", tt.kind, "-o", a, "--size", "7", "--rhs", b}, tt.extra...)
			stdout, stderr, code := runCLI(t, args...)
			if code != 0 {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			if !strings.Contains(stdout, "wrote "+a) || !strings.Contains(stdout, "all ones") {
				t.Errorf("summary lacks the files written:\n%s", stdout)
			}
			got, info, err := matrixio.ReadMatrixFile(a, nil)
			if err != nil {
				t.Fatal(err)
			}
			// Matrix Market format definition (Boisvert, Pozo, Remington,
			// NIST 1996): a symmetric file stores the lower triangle with the
			// diagonal, (nnz + n)/2 entries.
			if info.Header.Symmetry != "symmetric" || info.Entries != (tt.want.NNZ()+tt.want.Rows)/2 {
				t.Errorf("header %+v with %d entries, want symmetric with %d", info.Header, info.Entries, (tt.want.NNZ()+tt.want.Rows)/2)
			}
			if !reflect.DeepEqual(got, tt.want) {
				t.Errorf("read-back matrix differs from the stencil package's")
			}
			rhs, _, err := matrixio.ReadVectorFile(b, nil)
			if err != nil {
				t.Fatal(err)
			}
			ones := make([]float64, got.Cols)
			for i := range ones {
				ones[i] = 1
			}
			ax := make([]float64, got.Rows)
			got.MulVec(ax, ones)
			for i := range ax {
				// b was written in the shortest form that reads back
				// bit-exactly, and stencil.Ones adds each row's entries in
				// the product's order, so b equals A·1 bit for bit.
				if rhs[i] != ax[i] {
					t.Fatalf("b[%d] = %v, A·1 = %v", i, rhs[i], ax[i])
				}
			}
			checkOnly(t, dir, "A.mtx", "b.mtx")
		})
	}
}

// A failing generate (an output folder that does not exist) leaves nothing.
func TestGenerateUnwritable(t *testing.T) {
	dir := t.TempDir()
	_, stderr, code := runCLI(t, "generate", "poisson2d", "--size", "3", "-o", filepath.Join(dir, "missing", "A.mtx"))
	if code != exitFailure || !strings.Contains(stderr, "missing") {
		t.Errorf("exit %d, stderr %q", code, stderr)
	}
	if _, err := os.Stat(filepath.Join(dir, "missing")); !os.IsNotExist(err) {
		t.Errorf("folder created: %v", err)
	}
}
