package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// plot reads what solve --history writes, in both formats, and overlays
// the curves; malformed histories exit 2 naming the file and line.
func TestPlotRoundTrip(t *testing.T) {
	dir := t.TempDir()
	a := sharedMatrix(t, "494_bus.mtx")
	jac, ic := filepath.Join(dir, "jacobi.csv"), filepath.Join(dir, "ic0.json")
	for _, c := range []struct{ pc, hist string }{{"jacobi", jac}, {"ic0", ic}} {
		if _, stderr, code := runCLI(t, "solve", a, "--precond", c.pc, "--history", c.hist, "--quiet"); code != 0 {
			t.Fatalf("solve %s: exit %d: %s", c.pc, code, stderr)
		}
	}
	for _, out := range []string{"cmp.png", "cmp.svg"} {
		path := filepath.Join(dir, out)
		stdout, stderr, code := runCLI(t, "plot", jac, ic, "-o", path, "--tol", "1e-8")
		if code != 0 || !strings.Contains(stdout, "2 curves") {
			t.Fatalf("plot: exit %d: %s%s", code, stdout, stderr)
		}
		if strings.HasSuffix(out, ".png") {
			checkPNG(t, path)
		} else {
			checkSVG(t, path)
			svg, _ := os.ReadFile(path)
			// The legend names each curve after its file.
			for _, label := range []string{"jacobi", "ic0"} {
				if !strings.Contains(string(svg), label) {
					t.Errorf("SVG lacks the legend entry %q", label)
				}
			}
		}
	}
	checkOnly(t, dir, "cmp.png", "cmp.svg", "ic0.json", "jacobi.csv")

	bad := filepath.Join(dir, "bad.csv")
	os.WriteFile(bad, []byte("iteration,elapsed_seconds,residual_norm,relative_residual\n0,0,1,1\n1,x,0.5,0.5\n"), 0o644)
	_, stderr, code := runCLI(t, "plot", bad, "-o", filepath.Join(dir, "bad.png"))
	if code != exitUsage || !strings.Contains(stderr, "bad.csv:3") {
		t.Errorf("malformed history: exit %d, stderr %q", code, stderr)
	}
	if _, err := os.Stat(filepath.Join(dir, "bad.png")); !os.IsNotExist(err) {
		t.Errorf("a picture was written for a malformed history: %v", err)
	}
}
