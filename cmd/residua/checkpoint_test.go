package main

import (
	"context"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
)

// genPoisson writes the 3D Poisson matrix of the given side with
// 'residua generate' and returns its path.
func genPoisson(t *testing.T, dir string, side int) string {
	t.Helper()
	path := filepath.Join(dir, "p.mtx")
	if _, stderr, code := runCLI(t, "generate", "poisson3d", "--size", strconv.Itoa(side), "-o", path); code != 0 {
		t.Fatalf("generate: %d %s", code, stderr)
	}
	return path
}

func summaryOf(t *testing.T, stdout string) solve.Summary {
	t.Helper()
	var s solve.Summary
	if err := json.Unmarshal([]byte(stdout), &s); err != nil {
		t.Fatalf("not a JSON summary: %v\n%s", err, stdout)
	}
	return s
}

// TestCheckpointResume: a solve interrupted right after a checkpoint (as
// SIGINT would: the context is cancelled) and resumed with --resume ends
// with bitwise the x, the iteration count and the history rows of the
// uninterrupted solve. The reference is the uninterrupted run; the
// solution's quality itself is the solve tests' business.
func TestCheckpointResume(t *testing.T) {
	dir := t.TempDir()
	a := genPoisson(t, dir, 20)
	for _, c := range []struct {
		name string
		args []string
	}{
		{"cg", []string{"solve", a, "--precond", "none", "--rtol", "1e-12"}},
		{"pcg-ic0", []string{"solve", a, "--precond", "ic0", "--rtol", "1e-12"}},
		{"lsqr", []string{"lsq", a, "--atol", "1e-12", "--btol", "1e-12"}},
		{"cgls", []string{"lsq", a, "--method", "cgls", "--atol", "1e-12", "--btol", "1e-12"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			d := filepath.Join(dir, c.name)
			os.Mkdir(d, 0o755)
			x1, h1 := filepath.Join(d, "x1.mtx"), filepath.Join(d, "h1.csv")
			x2, h2 := filepath.Join(d, "x2.mtx"), filepath.Join(d, "h2.csv")
			ck := filepath.Join(d, "state.ck")
			base := append(c.args, "--json", "--quiet")
			out, stderr, code := runCLI(t, append(base, "-o", x1, "--history", h1)...)
			full := summaryOf(t, out)
			if code != 0 {
				t.Fatalf("uninterrupted: exit %d %s", code, stderr)
			}

			// Interrupted after the first periodic checkpoint. The
			// cancellation's own checkpoint follows at the next iteration.
			ctx, cancel := context.WithCancel(context.Background())
			afterCheckpoint = cancel
			out, stderr, code = runCLIContext(ctx, t, append(base, "-o", x2, "--checkpoint", ck, "--checkpoint-every", "1ns")...)
			afterCheckpoint = nil
			cut := summaryOf(t, out)
			if code != exitNotConverged || cut.Status != "cancelled" || cut.CheckpointFile != ck {
				t.Fatalf("interrupted: exit %d, status %s, checkpoint %q; %s", code, cut.Status, cut.CheckpointFile, stderr)
			}
			if !strings.Contains(stderr, "--resume "+ck) {
				t.Errorf("stderr does not say how to continue: %s", stderr)
			}
			if _, err := os.Stat(x2); err == nil {
				t.Fatal("an interrupted solve wrote its solution")
			}

			out, stderr, code = runCLI(t, append(base, "-o", x2, "--history", h2, "--resume", ck, "--checkpoint", ck)...)
			resumed := summaryOf(t, out)
			if code != 0 {
				t.Fatalf("resumed: exit %d %s", code, stderr)
			}
			if resumed.ResumedFrom == nil || *resumed.ResumedFrom != cut.Iterations {
				t.Errorf("resumed_from_iteration %v, the interrupted solve stopped after %d", resumed.ResumedFrom, cut.Iterations)
			}
			if resumed.Iterations != full.Iterations || resumed.RelativeResidual != full.RelativeResidual {
				t.Errorf("resumed: %d iterations, residual %v; uninterrupted %d, %v",
					resumed.Iterations, resumed.RelativeResidual, full.Iterations, full.RelativeResidual)
			}
			sameBits(t, x2, x1)
			r1, r2 := readHistory(t, h1).Rows, readHistory(t, h2).Rows
			if len(r1) != len(r2) {
				t.Fatalf("history: %d rows resumed, %d uninterrupted", len(r2), len(r1))
			}
			for i := range r1 {
				r1[i].Elapsed, r2[i].Elapsed = 0, 0
				if r1[i] != r2[i] {
					t.Fatalf("history row %d: %+v resumed, %+v uninterrupted", i, r2[i], r1[i])
				}
			}
			checkOnly(t, d, "h1.csv", "h2.csv", "state.ck", "x1.mtx", "x2.mtx")
		})
	}
}

// TestResumeRefusesOther: a checkpoint of another matrix, right-hand side
// or setting, and a damaged checkpoint, are refused with exit status 2 and
// a message that names the difference or the damage.
func TestResumeRefusesOther(t *testing.T) {
	dir := t.TempDir()
	a := genPoisson(t, dir, 12)
	ck := filepath.Join(dir, "state.ck")
	ctx, cancel := context.WithCancel(context.Background())
	afterCheckpoint = cancel
	_, stderr, code := runCLIContext(ctx, t, "solve", a, "--precond", "none", "--quiet", "--checkpoint", ck, "--checkpoint-every", "1ns")
	afterCheckpoint = nil
	if code != exitNotConverged {
		t.Fatalf("interrupted solve: exit %d %s", code, stderr)
	}
	other := filepath.Join(dir, "other")
	os.Mkdir(other, 0o755)
	a2 := genPoisson(t, other, 11)
	// Another right-hand side than the default b = A·1 the checkpoint has.
	b := filepath.Join(dir, "b.mtx")
	rhs := make([]float64, 12*12*12)
	for i := range rhs {
		rhs[i] = float64(i%7) - 3
	}
	if err := matrixio.WriteVectorFile(b, rhs); err != nil {
		t.Fatal(err)
	}
	torn := filepath.Join(dir, "torn.ck")
	whole, _ := os.ReadFile(ck)
	os.WriteFile(torn, whole[:len(whole)/2], 0o644)
	for _, c := range []struct {
		name string
		args []string
		want string
	}{
		{"setting", []string{"solve", a, "--precond", "none", "--rtol", "1e-6", "--resume", ck}, "setting RelTol"},
		{"preconditioner", []string{"solve", a, "--precond", "jacobi", "--resume", ck}, "setting Preconditioner"},
		{"method", []string{"lsq", a, "--resume", ck}, "setting"},
		{"matrix", []string{"solve", a2, "--precond", "none", "--resume", ck}, "matrix (id)"},
		{"right-hand side", []string{"solve", a, "-b", b, "--precond", "none", "--resume", ck}, "right-hand side"},
		{"torn", []string{"solve", a, "--precond", "none", "--resume", torn}, "truncated"},
		{"missing", []string{"solve", a, "--resume", filepath.Join(dir, "nope")}, "no such file"},
		{"every without file", []string{"solve", a, "--checkpoint-every", "5s"}, "needs --checkpoint"},
		{"remote", []string{"solve", a, "--server", "127.0.0.1:1", "--checkpoint", ck}, "local solves"},
	} {
		_, stderr, code := runCLI(t, append(c.args, "--quiet")...)
		if code != exitUsage || !strings.Contains(stderr, c.want) {
			t.Errorf("%s: exit %d, stderr %q; want 2 and %q", c.name, code, stderr, c.want)
		}
	}
}

// testCheckpointSignal drives the real binary: SIGINT during a solve with
// --checkpoint, then --resume, gives bitwise the x of an uninterrupted run
// (the same binary on the same machine, so the same worker count).
func testCheckpointSignal(t *testing.T, bin string) {
	dir := t.TempDir()
	a := genPoisson(t, dir, 40)
	x1, x2, ck := filepath.Join(dir, "x1.mtx"), filepath.Join(dir, "x2.mtx"), filepath.Join(dir, "state.ck")
	args := []string{"solve", a, "--precond", "none", "--rtol", "1e-13", "--quiet", "--json"}
	if _, stderr, code := cli(t, bin, append(args, "-o", x1)...); code != 0 {
		t.Fatalf("uninterrupted: %d %s", code, stderr)
	}
	var cut solve.Summary
	for attempt := 0; ; attempt++ {
		cmd := exec.Command(bin, append(args, "-o", x2, "--checkpoint", ck, "--checkpoint-every", "20ms")...)
		var out strings.Builder
		cmd.Stdout = &out
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		// Wait for the first checkpoint, then interrupt as Ctrl-C does.
		for {
			if _, err := os.Stat(ck); err == nil {
				break
			}
			time.Sleep(2 * time.Millisecond)
		}
		cmd.Process.Signal(syscall.SIGINT)
		err := cmd.Wait()
		cut = summaryOf(t, out.String())
		if err != nil {
			break
		}
		// The solve converged before the signal arrived (a fast machine):
		// nothing to resume, try again.
		if attempt == 3 {
			t.Skip("the solve keeps finishing before SIGINT arrives")
		}
		os.Remove(ck)
		os.Remove(x2)
	}
	if cut.Status != "cancelled" {
		t.Fatalf("after SIGINT: status %s", cut.Status)
	}
	out, stderr, code := cli(t, bin, append(args, "-o", x2, "--resume", ck)...)
	if code != 0 {
		t.Fatalf("resumed: %d %s", code, stderr)
	}
	if s := summaryOf(t, out); s.ResumedFrom == nil || *s.ResumedFrom != cut.Iterations {
		t.Errorf("resumed from %v, interrupted after %d", s.ResumedFrom, cut.Iterations)
	}
	sameBits(t, x2, x1)
}
