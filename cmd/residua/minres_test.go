package main

import (
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
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
