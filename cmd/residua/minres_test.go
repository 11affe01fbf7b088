package main

import (
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// TestSolveMINRES: `residua solve --method minres` on the shared symmetric
// indefinite bcsstm10 (MANIFEST.tsv: 54 negative eigenvalues although the
// diagonal is positive) reaches the tolerance on the true residual; the
// automatic method gets there too, after conjugate gradients breaks down,
// and says so; --method cg breaks down; --method lsqr is refused for solve.
func TestSolveMINRES(t *testing.T) {
	shared.Dir(t)
	path := sharedMatrix(t, "bcsstm10.mtx")
	rep, stderr, code := runJSON(t, "solve", path, "--method", "minres", "--precond", "none")
	if code != 0 || !rep.Converged || rep.Method != "minres" || float64(rep.RelativeResidual) > 1e-8 {
		t.Fatalf("minres: exit %d, %s\n%s", code, rep.Headline, stderr)
	}
	rep, stderr, code = runJSON(t, "solve", path, "--precond", "none")
	if code != 0 || !rep.Converged || rep.Method != "minres" || !strings.Contains(rep.MethodReason, "broke down") {
		t.Fatalf("auto: exit %d, %s (%s)\n%s", code, rep.Headline, rep.MethodReason, stderr)
	}
	rep, _, code = runJSON(t, "solve", path, "--method", "cg", "--precond", "none")
	if code == 0 || rep.Status != "breakdown" {
		t.Errorf("cg: exit %d, %s", code, rep.Headline)
	}
	_, stderr, code = runCLI(t, "solve", path, "--method", "lsqr")
	if code != exitUsage || !strings.Contains(stderr, "residua lsq") {
		t.Errorf("lsqr for solve: exit %d, %s", code, stderr)
	}
	out, _, _ := runCLI(t, "inspect", path)
	if !strings.Contains(out, "MINRES") {
		t.Errorf("inspect's verdict does not mention MINRES:\n%s", out)
	}
}

// TestSolveNormalEquations: `residua solve B.mtx --weights d.mtx --reg δ`
// solves (B·diag(d)·Bᵀ + δI)·y = N·1, whose exact solution is all ones
// (the summary's error against it is then bounded by κ·relres: Higham,
// 2nd ed., §7.1, with κ ≤ (max d/min d)·κ(B·Bᵀ) far below 1/1e-8 here);
// the summary reports the weight spread; a weight file of the wrong
// length is an input error.
func TestSolveNormalEquations(t *testing.T) {
	dir := t.TempDir()
	b := stencil.Constraints(50, 120, 3, 4)
	bPath, dPath, shortPath := filepath.Join(dir, "B.mtx"), filepath.Join(dir, "d.mtx"), filepath.Join(dir, "short.mtx")
	d := make([]float64, 120)
	for j := range d {
		d[j] = math.Pow(10, float64(j%5)-2) // 1e-2 … 1e2
	}
	if err := matrixio.WriteMatrixFile(bPath, b, sparse.General); err != nil {
		t.Fatal(err)
	}
	if err := matrixio.WriteVectorFile(dPath, d); err != nil {
		t.Fatal(err)
	}
	if err := matrixio.WriteVectorFile(shortPath, d[:7]); err != nil {
		t.Fatal(err)
	}
	for _, pc := range []string{"auto", "ic0"} {
		rep, stderr, code := runJSON(t, "solve", bPath, "--weights", dPath, "--reg", "1e-6", "--precond", pc)
		if code != 0 || !rep.Converged || rep.WeightRatio == nil || float64(*rep.WeightRatio) != 1e4 || rep.Rows != 50 ||
			rep.ErrorVsOnes == nil || float64(*rep.ErrorVsOnes) > 1e-4 || rep.Regularization == nil {
			t.Fatalf("%s: exit %d, %+v\n%s", pc, code, rep, stderr)
		}
	}
	_, stderr, code := runCLI(t, "solve", bPath, "--weights", shortPath)
	if code == 0 || !strings.Contains(stderr, "120 columns") {
		t.Errorf("short weights: exit %d, %s", code, stderr)
	}
}

// TestGenerateSaddle: `residua generate saddle2d` writes a symmetric
// indefinite KKT matrix (the manifest's kind of spaceStation_1) that
// `residua solve` recognises (zero (2,2) block), solves by MINRES with the
// block preconditioner to the true-residual tolerance, with the error
// against the known solution of ones small.
func TestGenerateSaddle(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "k.mtx")
	if _, stderr, code := runCLI(t, "generate", "saddle2d", "--size", "20", "--constraints", "60", "-o", path); code != 0 {
		t.Fatalf("generate: exit %d: %s", code, stderr)
	}
	rep, stderr, code := runJSON(t, "solve", path)
	if code != 0 || !rep.Converged || rep.Method != "minres" || rep.Preconditioner != "block" || rep.Rows != 460 ||
		rep.ErrorVsOnes == nil || float64(*rep.ErrorVsOnes) > 1e-5 {
		t.Fatalf("exit %d: %+v\n%s", code, rep, stderr)
	}
	if _, stderr, code := runCLI(t, "generate", "poisson2d", "--size", "5", "--reg", "1"); code != exitUsage || !strings.Contains(stderr, "saddle") {
		t.Errorf("--reg on poisson2d: exit %d, %s", code, stderr)
	}
}
