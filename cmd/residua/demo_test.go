package main

import (
	"math"
	"strings"
	"testing"
)

// The demo solves its built-in problem end to end on a small grid: it
// converges, and since b = A·1 its answer is checked against the known
// solution of ones. Jump3D with contrast 1000 on a 12³ grid has κ₂ ≤ 7e4:
// Gershgorin bounds λmax by 12·contrast, and since every face coefficient
// is at least 1, A dominates the unit-coefficient Laplacian, whose smallest
// eigenvalue is 12·sin²(π/26) ≈ 0.175 (LeVeque §3.4). The perturbation
// bound ‖x − 1‖₂ ≤ κ₂·(‖r‖/‖b‖)·‖1‖₂ (Golub and Van Loan §2.6.2) then
// bounds the max-norm error the demo reports.
func TestDemo(t *testing.T) {
	rep, stderr, code := runJSON(t, "demo", "--size", "12")
	if code != 0 || !rep.Converged {
		t.Fatalf("exit %d, status %q: %s", code, rep.Status, stderr)
	}
	bound := 7e4 * float64(rep.RelativeResidual) * math.Sqrt(12*12*12)
	if rep.Rows != 12*12*12 || rep.ErrorVsOnes == nil || float64(*rep.ErrorVsOnes) > bound {
		t.Errorf("rows %d, error vs ones %v", rep.Rows, rep.ErrorVsOnes)
	}
	stdout, _, code := runCLI(t, "demo", "--size", "8", "--quiet")
	if code != 0 || !strings.Contains(stdout, "Heat-spreader") || !strings.Contains(stdout, "converged in ") {
		t.Errorf("exit %d, text summary:\n%s", code, stdout)
	}
	if _, _, code := runCLI(t, "demo", "--size", "0"); code != exitUsage {
		t.Errorf("--size 0: exit %d, want 2", code)
	}
}
