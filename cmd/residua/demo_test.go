package main

import (
	"encoding/json"
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

// The bakery scenario: the interior-point method's optimum (its agreement
// with gonum's simplex is checked in package ipm) ships exactly the
// ordered loaves, the normal-equations solves are accurate, and flags of
// the other scenario are refused.
func TestDemoBakery(t *testing.T) {
	stdout, stderr, code := runCLI(t, "demo", "--scenario", "bakery", "--bakeries", "3", "--cafes", "4", "--json")
	var rep bakeryReport
	if code != 0 || json.Unmarshal([]byte(stdout), &rep) != nil {
		t.Fatalf("exit %d: %s %s", code, stdout, stderr)
	}
	if math.Abs(float64(rep.ShippedLoaves-rep.OrderedLoaves)) > 1e-6*float64(rep.OrderedLoaves) || rep.NormalSolves < 2 || rep.WorstRelResid > 1e-10 {
		t.Errorf("report %+v", rep)
	}
	if _, stderr, code := runCLI(t, "demo", "--scenario", "bakery", "--size", "8"); code != exitUsage || !strings.Contains(stderr, "heat scenario") {
		t.Errorf("--size with bakery: exit %d, %s", code, stderr)
	}
	if _, _, code := runCLI(t, "demo", "--scenario", "pastry"); code != exitUsage {
		t.Errorf("unknown scenario: exit %d", code)
	}
}
