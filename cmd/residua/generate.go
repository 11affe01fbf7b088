package main

import (
	"bufio"
	"context"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

func init() {
	register(&command{
		name:    "generate",
		summary: "write a model problem (Poisson, 27-point, anisotropic, jumping coefficients, elasticity) as Matrix Market",
		run:     runGenerate,
	})
}

const generateAbout = `
Builds a finite-difference model problem on a grid of N points per side with
zero Dirichlet boundaries and writes it as a Matrix Market coordinate file,
symmetric, lower triangle only. KIND is one of:

  poisson2d      5-point Laplacian on an N×N grid (N² unknowns)
  poisson3d      7-point Laplacian on an N×N×N grid (N³ unknowns)
  stencil27      27-point operator on an N×N×N grid
  anisotropic3d  7-point diffusion with coefficients --kx, --ky, --kz along the axes
  jump3d         7-point diffusion whose coefficient jumps between 1 and --contrast
                 in a 2×2×2 checkerboard of blocks
  saddle2d       the saddle-point (KKT) matrix [H Bᵀ; B −c·I] with H the poisson2d
                 matrix, B a random sparse constraint matrix of full row rank with
                 --constraints rows (default a quarter of H's) and --per-row entries
                 per row (default 4, fixed --seed), c = --reg (default 0: a zero
                 (2,2) block): symmetric indefinite, for 'residua solve' (MINRES)
  saddle3d       the same with H the poisson3d matrix
  elasticity3d   3D linear elasticity on the unit cube in N×N×N trilinear brick
                 elements (Hughes, The Finite Element Method, 1987), material
                 --young and --poisson, the face x = 0 clamped: 3·N·(N+1)²
                 unknowns, three per node; --near-null FILE also writes its six
                 rigid-body modes (for solve --precond amg --block-size 3
                 --near-null FILE)

With --rhs, also writes b = A·1 as a Matrix Market array, so the solution of
A·x = b is known to be all ones. Both files are written atomically (a
temporary file renamed into place). The summary goes to stdout.`

func runGenerate(ctx context.Context, e *env, args []string) error {
	f := newFlags("generate", "residua generate KIND --size N [-o A.mtx] [--rhs b.mtx] [flags]", generateAbout)
	size := f.Int("size", 0, "grid points per side `N` (required)")
	out := f.String("o", "", "matrix output `file` (default KIND-N.mtx)")
	rhs := f.String("rhs", "", "also write b = A·1 to this `file`")
	kx := f.Float64("kx", stencil.DefaultKX, "anisotropic3d: diffusion coefficient along x")
	ky := f.Float64("ky", stencil.DefaultKY, "anisotropic3d: diffusion coefficient along y")
	kz := f.Float64("kz", stencil.DefaultKZ, "anisotropic3d: diffusion coefficient along z")
	contrast := f.Float64("contrast", stencil.DefaultContrast, "jump3d: ratio of the two blocks' coefficients")
	so := &saddleOpts{}
	f.IntVar(&so.constraints, "constraints", 0, "saddle2d, saddle3d: constraint rows `M` (default a quarter of H's rows)")
	f.IntVar(&so.perRow, "per-row", 4, "saddle2d, saddle3d: entries per constraint row")
	f.Uint64Var(&so.seed, "seed", 1, "saddle2d, saddle3d: seed of the random constraints")
	f.Float64Var(&so.reg, "reg", 0, "saddle2d, saddle3d: c ≥ 0 in the (2,2) block −c·I")
	young := f.Float64("young", stencil.DefaultYoung, "elasticity3d: Young's modulus")
	poisson := f.Float64("poisson", stencil.DefaultPoisson, "elasticity3d: Poisson's ratio, in (-1, 0.5)")
	nearNull := f.String("near-null", "", "elasticity3d: also write the rigid-body modes, an N-row 6-column Matrix Market array, to this `file`")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("generate: want one KIND (%s), got %d arguments", strings.Join(stencil.Names(), ", "), len(pos))
	}
	kind := pos[0]
	kinds := append(stencil.Names(), saddleKinds...)
	if !slices.Contains(kinds, kind) {
		return usageErrorf("generate: unknown kind %q: want one of %s", kind, strings.Join(kinds, ", "))
	}
	set := map[string]bool{}
	f.Visit(func(fl *flag.Flag) { set[fl.Name] = true })
	for _, name := range []string{"constraints", "per-row", "seed", "reg"} {
		if set[name] && !slices.Contains(saddleKinds, kind) {
			return usageErrorf("generate: --%s applies to saddle2d and saddle3d only", name)
		}
	}
	for _, name := range []string{"kx", "ky", "kz"} {
		if set[name] && kind != "anisotropic3d" {
			return usageErrorf("generate: --%s applies to anisotropic3d only", name)
		}
	}
	if set["contrast"] && kind != "jump3d" {
		return usageErrorf("generate: --contrast applies to jump3d only")
	}
	for _, name := range []string{"young", "poisson", "near-null"} {
		if set[name] && kind != "elasticity3d" {
			return usageErrorf("generate: --%s applies to elasticity3d only", name)
		}
	}
	if !(*young > 0) || math.IsInf(*young, 0) {
		return usageErrorf("generate: --young %v must be positive and finite", *young)
	}
	if !(*poisson > -1 && *poisson < 0.5) {
		return usageErrorf("generate: --poisson %v must lie in (-1, 0.5)", *poisson)
	}
	for name, v := range map[string]float64{"kx": *kx, "ky": *ky, "kz": *kz, "contrast": *contrast} {
		if !(v > 0) || math.IsInf(v, 0) {
			return usageErrorf("generate: --%s %v must be positive and finite", name, v)
		}
	}
	if !set["size"] {
		return usageErrorf("generate: --size N is required")
	}
	var a *sparse.CSR
	switch {
	case slices.Contains(saddleKinds, kind):
		a, err = buildSaddle(kind, *size, so)
	case kind == "elasticity3d":
		switch n := *size; {
		case n < 1:
			err = fmt.Errorf("elements per side %d must be at least 1", n)
		case 3*float64(n)*float64(n+1)*float64(n+1) > sparse.MaxDim:
			err = fmt.Errorf("elasticity3d with %d elements per side has more than %d unknowns", n, sparse.MaxDim)
		default:
			a = stencil.Elasticity3D(n, *young, *poisson)
		}
	default:
		a, err = buildProblem(kind, *size, *kx, *ky, *kz, *contrast)
	}
	if err != nil {
		return usageErrorf("generate: %v", err)
	}
	if *out == "" {
		*out = fmt.Sprintf("%s-%d.mtx", kind, *size)
	}
	start := time.Now()
	if err := matrixio.WriteMatrixFile(*out, a, sparse.Symmetric); err != nil {
		return fmt.Errorf("generate: writing %s: %w", *out, err)
	}
	elapsed := time.Since(start)
	var bytes int64
	if st, err := os.Stat(*out); err == nil {
		bytes = st.Size()
	}
	fmt.Fprintf(e.stdout, "wrote %s: %s with N=%d, %d×%d, %d nonzeros (lower triangle stored), %s in %s\n",
		*out, kind, *size, a.Rows, a.Cols, a.NNZ(), formatBytes(bytes), formatDuration(elapsed))
	if *rhs != "" {
		b := stencil.Ones(a)
		if err := matrixio.WriteVectorFile(*rhs, b); err != nil {
			return fmt.Errorf("generate: writing %s: %w", *rhs, err)
		}
		fmt.Fprintf(e.stdout, "wrote %s: b = A·1, so the solution of A·x = b is all ones\n", *rhs)
	}
	if *nearNull != "" {
		if err := writeArray(*nearNull, stencil.RigidBodyModes(*size), a.Rows, 6); err != nil {
			return fmt.Errorf("generate: writing %s: %w", *nearNull, err)
		}
		fmt.Fprintf(e.stdout, "wrote %s: the six rigid-body modes (translations along x, y, z; rotations about z, x, y), %d×6\n", *nearNull, a.Rows)
	}
	return nil
}

// writeArray writes the row-major rows×cols matrix v as a Matrix Market
// array file (real general; entries column by column, as the format
// defines), atomically.
func writeArray(path string, v []float64, rows, cols int) error {
	return atomicfile.Write(path, func(w io.Writer) error {
		bw := bufio.NewWriterSize(w, 1<<16)
		fmt.Fprintf(bw, "%%%%MatrixMarket matrix array real general\n%d %d\n", rows, cols)
		buf := make([]byte, 0, 32)
		for c := range cols {
			for r := range rows {
				buf = strconv.AppendFloat(buf[:0], v[r*cols+c], 'g', -1, 64)
				buf = append(buf, '\n')
				if _, err := bw.Write(buf); err != nil {
					return err
				}
			}
		}
		return bw.Flush()
	})
}

// buildProblem returns the named model problem, checking the grid side
// (users' input) so that the stencil constructors never panic.
func buildProblem(kind string, n int, kx, ky, kz, contrast float64) (*sparse.CSR, error) {
	switch kind {
	case "anisotropic3d", "jump3d":
		// Check the side and size through Generate's own validation first.
		if _, err := checkGrid(kind, n); err != nil {
			return nil, err
		}
		if kind == "jump3d" {
			return stencil.Jump3D(n, contrast), nil
		}
		return stencil.Anisotropic3D(n, kx, ky, kz), nil
	}
	return stencil.Generate(kind, n)
}

// checkGrid validates a grid side for a 3D kind the way stencil.Generate does.
func checkGrid(kind string, n int) (int, error) {
	if n < 1 {
		return 0, fmt.Errorf("grid side %d must be at least 1", n)
	}
	if float64(n) > math.Cbrt(sparse.MaxDim) {
		return 0, fmt.Errorf("%s with side %d has more than %d unknowns", kind, n, sparse.MaxDim)
	}
	return n * n * n, nil
}

// formatBytes renders a byte count with a binary unit.
func formatBytes(n int64) string {
	switch {
	case n >= 1<<30:
		return fmt.Sprintf("%.2f GiB", float64(n)/(1<<30))
	case n >= 1<<20:
		return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20))
	case n >= 1<<10:
		return fmt.Sprintf("%.1f KiB", float64(n)/(1<<10))
	}
	return fmt.Sprintf("%d B", n)
}

// formatDuration rounds a duration to a precision a person reads easily.
func formatDuration(d time.Duration) string {
	switch {
	case d >= time.Minute:
		return d.Round(time.Second).String()
	case d >= time.Second:
		return d.Round(10 * time.Millisecond).String()
	case d >= time.Millisecond:
		return d.Round(10 * time.Microsecond).String()
	}
	return d.Round(time.Microsecond).String()
}

// saddleKinds are generate's saddle-point problems (see generateAbout).
var saddleKinds = []string{"saddle2d", "saddle3d"}

// saddleOpts are generate's flags for the saddle-point kinds.
type saddleOpts struct {
	constraints, perRow int
	seed                uint64
	reg                 float64
}

// buildSaddle returns the saddle-point matrix [H Bᵀ; B −c·I] of the named
// kind, checking the users' numbers so that the constructors never panic.
func buildSaddle(kind string, n int, so *saddleOpts) (*sparse.CSR, error) {
	h, err := stencil.Generate(map[string]string{"saddle2d": "poisson2d", "saddle3d": "poisson3d"}[kind], n)
	if err != nil {
		return nil, err
	}
	m := so.constraints
	if m == 0 {
		m = max(1, h.Rows/4)
	}
	switch {
	case m < 1 || m > h.Rows:
		return nil, fmt.Errorf("--constraints %d must be in 1…%d (H's rows), so that B can have full row rank", m, h.Rows)
	case so.perRow < 1:
		return nil, fmt.Errorf("--per-row %d must be at least 1", so.perRow)
	case !(so.reg >= 0) || math.IsInf(so.reg, 0):
		return nil, fmt.Errorf("--reg %v must be finite and ≥ 0", so.reg)
	case h.Rows+m > sparse.MaxDim:
		return nil, fmt.Errorf("%s with side %d and %d constraints has more than %d unknowns", kind, n, m, sparse.MaxDim)
	}
	return stencil.Saddle(h, stencil.Constraints(m, h.Rows, so.perRow, so.seed), so.reg), nil
}
