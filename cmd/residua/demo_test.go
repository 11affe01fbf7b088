package main

import (
	"strings"
	"testing"
)

// The demo solves its built-in problem end to end on a small grid: it
// converges, and since b = A·1 its answer is checked against the known
// solution of ones. Jump3D with contrast 1000 on a 12³ grid has a condition
// number of a few 10⁴ at most (Gershgorin bounds its spectrum by about
// 12·contrast above, and the Dirichlet Laplacian's smallest eigenvalue,
// about 3π²/13² ≈ 0.18, bounds it below), so rtol 1e-8 leaves an error
// well under 1e-3.
func TestDemo(t *testing.T) {
	rep, stderr, code := runJSON(t, "demo", "--size", "12")
	if code != 0 || !rep.Converged {
		t.Fatalf("exit %d, status %q: %s", code, rep.Status, stderr)
	}
	if rep.Rows != 12*12*12 || rep.ErrorVsOnes == nil || *rep.ErrorVsOnes > 1e-3 {
		t.Errorf("rows %d, error vs ones %v", rep.Rows, rep.ErrorVsOnes)
	}
	stdout, _, code := runCLI(t, "demo", "--size", "8", "--quiet")
	if code != 0 || !strings.Contains(stdout, "Heat-spreader") || !strings.Contains(stdout, "CONVERGED") {
		t.Errorf("exit %d, text summary:\n%s", code, stdout)
	}
	if _, _, code := runCLI(t, "demo", "--size", "0"); code != exitUsage {
		t.Errorf("--size 0: exit %d, want 2", code)
	}
}
