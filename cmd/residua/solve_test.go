package main

import (
	"archive/tar"
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"encoding/xml"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/history"
	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

// runJSON runs a command with --json and decodes its summary.
func runJSON(t *testing.T, args ...string) (rep solve.Summary, stderr string, code int) {
	t.Helper()
	stdout, stderr, code := runCLI(t, append(args, "--json", "--quiet")...)
	if stdout == "" {
		return rep, stderr, code
	}
	if err := json.Unmarshal([]byte(stdout), &rep); err != nil {
		t.Fatalf("residua %q: stdout is not one JSON object: %v\n%s", args, err, stdout)
	}
	return rep, stderr, code
}

func sharedMatrix(t *testing.T, name string) string {
	t.Helper()
	return filepath.Join(shared.Matrices(t), name)
}

// denseCond returns the 2-norm condition number of a small matrix from
// gonum's SVD (mat.Cond).
func denseCond(a *sparse.CSR) float64 {
	d := mat.NewDense(a.Rows, a.Cols, nil)
	for i := 0; i < a.Rows; i++ {
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			d.Set(i, int(a.ColIdx[k]), a.Val[k])
		}
	}
	return mat.Cond(d, 2)
}

// Small shared SPD matrices with b = A·1: solve converges, the true
// residual meets the tolerance, and the error against the known solution
// of ones obeys the perturbation bound ‖x − 1‖₂/‖1‖₂ ≤ κ₂(A)·‖r‖/‖b‖
// (Golub and Van Loan, Matrix Computations, 4th ed., §2.6.2), with κ₂ from
// gonum's SVD; error_vs_ones is the max norm, which is at most the 2-norm,
// and ‖1‖₂ = √n.
func TestSolveSharedSPD(t *testing.T) {
	for _, name := range []string{"bcsstk01.mtx", "nos4.mtx", "494_bus.mtx", "gr_30_30.mtx", "bcsstk16.mtx.gz"} {
		cond := 0.0 // κ₂(A), computed once per matrix
		for _, pc := range []string{"auto", "none", "jacobi", "ic0"} {
			t.Run(name+"/"+pc, func(t *testing.T) {
				path := sharedMatrix(t, name)
				rep, stderr, code := runJSON(t, "solve", path, "--precond", pc)
				if code != 0 || !rep.Converged || rep.Status != "converged" {
					t.Fatalf("exit %d, status %s: %s", code, rep.Status, stderr)
				}
				if rep.RelativeResidual > 1e-8 {
					t.Errorf("true relative residual %g > rtol 1e-8", rep.RelativeResidual)
				}
				if pc != "auto" && rep.Preconditioner != pc {
					t.Errorf("preconditioner %q, want %q", rep.Preconditioner, pc)
				}
				if rep.ErrorVsOnes == nil {
					t.Fatal("error_vs_ones missing for b = A·1")
				}
				if name == "bcsstk16.mtx.gz" {
					return // too large for a dense SVD in a quick test
				}
				a, _, err := matrixio.ReadMatrixFile(path, nil)
				if err != nil {
					t.Fatal(err)
				}
				if cond == 0 {
					cond = denseCond(a)
				}
				bound := cond * float64(rep.RelativeResidual) * math.Sqrt(float64(a.Rows))
				if got := float64(*rep.ErrorVsOnes); got > bound {
					t.Errorf("max |x_i − 1| = %g exceeds κ₂·‖r‖/‖b‖·√n = %g", got, bound)
				}
			})
		}
	}
}

// The CLI passes the settings through unchanged: iteration counts for none
// and Jacobi agree with SciPy's reference counts in
// ../shared/reference/cg-scipy.tsv (b = A·1, rtol 1e-8) within a few
// percent, on matrices where SciPy and the reference's textbook PCG agree
// (so the count is a property of the matrix, not of rounding).
func TestSolveIterationsMatchReference(t *testing.T) {
	cases := []struct {
		file, pc string
		want     int // cg-scipy.tsv, column iterations
	}{
		{"bcsstk01.mtx", "none", 130},
		{"bcsstk01.mtx", "jacobi", 47},
		{"nos4.mtx", "jacobi", 77},
		{"494_bus.mtx", "jacobi", 393},
		{"gr_30_30.mtx", "none", 41},
	}
	for _, c := range cases {
		t.Run(c.file+"/"+c.pc, func(t *testing.T) {
			rep, stderr, code := runJSON(t, "solve", sharedMatrix(t, c.file), "--precond", c.pc)
			if code != 0 {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			if d := math.Abs(float64(rep.Iterations - c.want)); d > math.Max(2, 0.05*float64(c.want)) {
				t.Errorf("%d iterations, reference %d", rep.Iterations, c.want)
			}
		})
	}
}

// Each way a solve can end gives its documented exit status, and the
// message says what to do.
func TestSolveExitStatus(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "bad.mtx")
	// A malformed file: an index out of range on line 4 (Matrix Market
	// format definition: indices are 1-based and within the size line).
	os.WriteFile(bad, []byte("%%MatrixMarket matrix coordinate real general\n% c\n2 2 2\n1 1 1.0\n3 1 2.0\n"), 0o644)
	short := filepath.Join(dir, "short.mtx")
	os.WriteFile(short, []byte("%%MatrixMarket matrix array real general\n3 1\n1\n2\n3\n"), 0o644)
	cases := []struct {
		name string
		args []string
		code int
		want string // in stderr
	}{
		{"malformed", []string{"solve", bad}, exitUsage, bad + ":5"},
		{"missing file", []string{"solve", filepath.Join(dir, "nope.mtx")}, exitUsage, "nope.mtx"},
		{"rectangular", []string{"solve", sharedMatrix(t, "well1033.mtx")}, exitUsage, "residua lsq"},
		{"nonsymmetric", []string{"solve", sharedMatrix(t, "west0479.mtx")}, exitBreakdown, "residua lsq"},
		// Asked for CG explicitly: the automatic method solves these three by
		// MINRES (TestSolveMINRES).
		{"negative definite", []string{"solve", sharedMatrix(t, "bfwb62.mtx"), "--method", "cg", "--precond", "none"}, exitBreakdown, "not positive definite"},
		{"indefinite", []string{"solve", sharedMatrix(t, "bcsstm10.mtx"), "--method", "cg", "--precond", "none"}, exitBreakdown, "not positive definite"},
		{"jacobi on negative diagonal", []string{"solve", sharedMatrix(t, "saylr3.mtx"), "--method", "cg", "--precond", "jacobi"}, exitBreakdown, "jacobi"},
		{"iteration cap", []string{"solve", sharedMatrix(t, "494_bus.mtx"), "--precond", "none", "--max-iter", "5"}, exitNotConverged, "iteration-limit"},
		{"time limit", []string{"solve", sharedMatrix(t, "494_bus.mtx"), "--precond", "none", "--time-limit", "1ns"}, exitNotConverged, "time-limit"},
		{"wrong b length", []string{"solve", sharedMatrix(t, "nos4.mtx"), "-b", short}, exitUsage, "3 entries"},
		{"bad precond", []string{"solve", sharedMatrix(t, "nos4.mtx"), "--precond", "ilu"}, exitUsage, "ilu"},
		{"bad rtol", []string{"solve", sharedMatrix(t, "nos4.mtx"), "--rtol", "-1"}, exitUsage, "--rtol"},
		{"bad history name", []string{"solve", sharedMatrix(t, "nos4.mtx"), "--history", "h.txt"}, exitUsage, ".csv"},
		{"two matrices", []string{"solve", "a.mtx", "b.mtx"}, exitUsage, "one matrix"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, stderr, code := runCLI(t, append(c.args, "--quiet")...)
			if code != c.code {
				t.Errorf("exit %d, want %d; stderr %q", code, c.code, stderr)
			}
			if !strings.Contains(stderr, c.want) {
				t.Errorf("stderr %q lacks %q", stderr, c.want)
			}
		})
	}
}

// A cancelled context (what SIGINT and SIGTERM do) ends the solve with
// status cancelled and exit status 3.
func TestSolveCancelled(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	stdout, stderr, code := runCLIContext(ctx, t, "solve", sharedMatrix(t, "nos4.mtx"), "--json", "--quiet")
	var rep solve.Summary
	if err := json.Unmarshal([]byte(stdout), &rep); err != nil {
		t.Fatalf("%v: %s", err, stdout)
	}
	if code != exitNotConverged || rep.Status != "cancelled" || rep.Converged {
		t.Errorf("exit %d, status %q; stderr %q", code, rep.Status, stderr)
	}
}

// Outputs: the solution is written atomically and only when the solve
// converged; history and plot are written whatever the outcome; nothing
// temporary is left behind; an existing -o file survives a failed solve.
func TestSolveOutputs(t *testing.T) {
	dir := t.TempDir()
	path := sharedMatrix(t, "nos4.mtx")
	x, h, hj, svg, pngf := filepath.Join(dir, "x.mtx"), filepath.Join(dir, "h.csv"), filepath.Join(dir, "h.json"), filepath.Join(dir, "c.svg"), filepath.Join(dir, "c.png")

	rep, stderr, code := runJSON(t, "solve", path, "-o", x, "--history", h, "--plot", svg)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if rep.SolutionFile != x || rep.HistoryFile != h || rep.PlotFile != svg {
		t.Errorf("files reported %q %q %q", rep.SolutionFile, rep.HistoryFile, rep.PlotFile)
	}
	a, _, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		t.Fatal(err)
	}
	sol, _, err := matrixio.ReadVectorFile(x, nil)
	if err != nil {
		t.Fatal(err)
	}
	// The written x is the solution: its true residual, recomputed here,
	// is the one reported (the file holds the exact float64 values).
	b := make([]float64, a.Rows)
	a.MulVec(b, onesVec(a.Cols))
	r := make([]float64, a.Rows)
	a.MulVec(r, sol)
	for i := range r {
		r[i] = b[i] - r[i]
	}
	if rel := norm2(r) / norm2(b); rel > 1e-8 || math.Abs(rel-float64(rep.RelativeResidual)) > 1e-3*rel {
		t.Errorf("residual of the written x %g, reported %g", rel, rep.RelativeResidual)
	}
	hist, err := history.Read(h)
	if err != nil {
		t.Fatal(err)
	}
	if len(hist.Rows) != rep.Iterations+1 || hist.Rows[0].Iteration != 0 || hist.Rows[0].RelResidual != 1 {
		t.Errorf("history: %d rows, first %+v; want %d rows from iteration 0 at relative residual 1", len(hist.Rows), hist.Rows[0], rep.Iterations+1)
	}
	checkSVG(t, svg)
	checkOnly(t, dir, "c.svg", "h.csv", "x.mtx")

	// A solve that stops early leaves the existing solution alone but still
	// writes its history (JSON lines) and plot (PNG).
	before, _ := os.ReadFile(x)
	rep, _, code = runJSON(t, "solve", path, "--precond", "none", "--max-iter", "3", "-o", x, "--history", hj, "--plot", pngf)
	if code != exitNotConverged || rep.SolutionFile != "" || rep.SolutionNote == "" {
		t.Errorf("exit %d, solution %q, note %q", code, rep.SolutionFile, rep.SolutionNote)
	}
	if after, _ := os.ReadFile(x); !bytes.Equal(before, after) {
		t.Error("the existing solution file changed after a failed solve")
	}
	hist, err = history.Read(hj)
	if err != nil || len(hist.Rows) != 4 {
		t.Errorf("history after 3 iterations: %d rows, %v", len(hist.Rows), err)
	}
	checkPNG(t, pngf)
	checkOnly(t, dir, "c.png", "c.svg", "h.csv", "h.json", "x.mtx")

	// A breakdown writes no solution either.
	rep, _, code = runJSON(t, "solve", sharedMatrix(t, "bfwb62.mtx"), "--method", "cg", "--precond", "none", "-o", x)
	if code != exitBreakdown || rep.Status != "breakdown" || rep.Error == "" {
		t.Errorf("exit %d, status %q, error %q", code, rep.Status, rep.Error)
	}
	if after, _ := os.ReadFile(x); !bytes.Equal(before, after) {
		t.Error("the existing solution file changed after a breakdown")
	}
}

func checkSVG(t *testing.T, path string) {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	dec := xml.NewDecoder(bytes.NewReader(data))
	root := ""
	for {
		tok, err := dec.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("%s is not well-formed XML: %v", path, err)
		}
		if se, ok := tok.(xml.StartElement); ok && root == "" {
			root = se.Name.Local
		}
	}
	if root != "svg" {
		t.Errorf("%s: root element %q, want svg", path, root)
	}
}

func checkPNG(t *testing.T, path string) {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	if b := img.Bounds(); b.Dx() < 200 || b.Dy() < 100 {
		t.Errorf("%s: %v is too small for a chart", path, b)
	}
}

// A collection bundle NAME.tar.gz (NAME/NAME.mtx and NAME/NAME_b.mtx, the
// collection's layout) is solved with its own right-hand side; -b and --x0
// override and warm-start.
func TestSolveBundle(t *testing.T) {
	src := sharedMatrix(t, "nos4.mtx")
	a, _, err := matrixio.ReadMatrixFile(src, nil)
	if err != nil {
		t.Fatal(err)
	}
	// b = A·(1, 2, ..., n), so the solution is known and is not all ones.
	want := make([]float64, a.Cols)
	for i := range want {
		want[i] = float64(i + 1)
	}
	b := make([]float64, a.Rows)
	a.MulVec(b, want)
	var bText bytes.Buffer
	if err := matrixio.WriteVector(&bText, b); err != nil {
		t.Fatal(err)
	}
	mText, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	bundle := filepath.Join(dir, "nos4.tar.gz")
	var buf bytes.Buffer
	gz := gzip.NewWriter(&buf)
	tw := tar.NewWriter(gz)
	for _, m := range []struct {
		name string
		data []byte
	}{{"nos4/nos4.mtx", mText}, {"nos4/nos4_b.mtx", bText.Bytes()}} {
		tw.WriteHeader(&tar.Header{Name: m.name, Mode: 0o644, Size: int64(len(m.data)), Typeflag: tar.TypeReg})
		tw.Write(m.data)
	}
	tw.Close()
	gz.Close()
	os.WriteFile(bundle, buf.Bytes(), 0o644)

	x := filepath.Join(dir, "x.mtx")
	rep, stderr, code := runJSON(t, "solve", bundle, "-o", x, "--rtol", "1e-12")
	if code != 0 || !strings.Contains(rep.RHS, "bundle") || rep.ErrorVsOnes != nil {
		t.Fatalf("exit %d, rhs %q: %s", code, rep.RHS, stderr)
	}
	sol, _, err := matrixio.ReadVectorFile(x, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range sol {
		// nos4's condition number is about 2.7e3 (gonum SVD), so rtol
		// 1e-12 leaves a relative error of a few 1e-9 at most.
		if math.Abs(sol[i]-want[i]) > 1e-7*want[i] {
			t.Fatalf("x[%d] = %v, want %v", i, sol[i], want[i])
		}
	}

	// Warm start from the solution itself: converged at iteration 0.
	rep, stderr, code = runJSON(t, "solve", bundle, "--x0", x, "--rtol", "1e-8")
	if code != 0 || rep.Iterations != 0 {
		t.Errorf("warm start: exit %d, %d iterations: %s", code, rep.Iterations, stderr)
	}
}
