package main

import (
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/residua/residua/api"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
)

// inProcessServer serves the gRPC API from this test process on a loopback
// port and returns its address.
func inProcessServer(t *testing.T) string {
	t.Helper()
	srv, err := api.NewServer(api.Config{})
	if err != nil {
		t.Fatal(err)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ctx, lis) }()
	t.Cleanup(func() { cancel(); <-done })
	return lis.Addr().String()
}

// TestSeveralRightHandSides: b with k columns (an n×k Matrix Market array)
// is solved column by column with one set-up, locally and on a server:
// one summary per column (a JSON array), x written as an n×k array, each
// column bitwise the x of a solve of that column alone, remote bitwise
// local (the same method, preconditioner and arithmetic on the same
// machine), and one history file per column. The columns' true residuals
// are recomputed here against the tolerance (issue 11 §3).
func TestSeveralRightHandSides(t *testing.T) {
	addr := inProcessServer(t)
	dir := t.TempDir()
	for _, c := range []struct {
		cmd, matrix string
		extra       []string
	}{
		{"solve", "nos4.mtx", nil},
		{"lsq", "illc1033.mtx", nil},
	} {
		t.Run(c.cmd, func(t *testing.T) {
			path := sharedMatrix(t, c.matrix)
			a, _, err := matrixio.ReadMatrixFile(path, nil)
			if err != nil {
				t.Fatal(err)
			}
			// Columns: A·1, a seeded random vector, and e₁.
			rng := rand.New(rand.NewPCG(11, 0))
			cols := [][]float64{make([]float64, a.Rows), make([]float64, a.Rows), make([]float64, a.Rows)}
			a.MulVec(cols[0], onesVec(a.Cols))
			for i := range cols[1] {
				cols[1][i] = rng.NormFloat64()
			}
			cols[2][0] = 1
			bPath := filepath.Join(dir, c.cmd+"-b.mtx")
			if err := matrixio.WriteColumnsFile(bPath, cols); err != nil {
				t.Fatal(err)
			}
			run := func(where string, args ...string) ([]solve.Summary, [][]float64) {
				t.Helper()
				xPath := filepath.Join(dir, c.cmd+"-"+where+"-x.mtx")
				args = append([]string{c.cmd, path, "-b", bPath, "-o", xPath, "--json", "--quiet"}, args...)
				stdout, stderr, code := runCLI(t, args...)
				if code != 0 {
					t.Fatalf("%s: exit %d: %s\n%s", where, code, stderr, stdout)
				}
				var sums []solve.Summary
				if err := json.Unmarshal([]byte(stdout), &sums); err != nil {
					t.Fatalf("%s: not a JSON array of summaries: %v\n%s", where, err, stdout)
				}
				xs, _, err := matrixio.ReadColumnsFile(xPath, nil)
				if err != nil {
					t.Fatal(err)
				}
				return sums, xs
			}
			hist := filepath.Join(dir, c.cmd+".csv")
			local, xl := run("local", "--history", hist)
			remote, xr := run("remote", "--server", addr)
			if len(local) != 3 || len(remote) != 3 || len(xl) != 3 || len(xr) != 3 {
				t.Fatalf("%d and %d summaries, %d and %d columns; want 3", len(local), len(remote), len(xl), len(xr))
			}
			for j := range cols {
				if local[j].RHSIndex != j || !local[j].Converged || local[j].SolutionFile == "" {
					t.Errorf("column %d: rhs_index %d, converged %v, solution %q", j, local[j].RHSIndex, local[j].Converged, local[j].SolutionFile)
				}
				if _, err := os.Stat(columnPath(hist, j, 3)); err != nil {
					t.Errorf("column %d: no history file: %v", j, err)
				}
				// Alone.
				bj, xj := filepath.Join(dir, "bj.mtx"), filepath.Join(dir, "xj.mtx")
				if err := matrixio.WriteVectorFile(bj, cols[j]); err != nil {
					t.Fatal(err)
				}
				one, stderr, code := runJSON(t, c.cmd, path, "-b", bj, "-o", xj)
				if code != 0 {
					t.Fatalf("column %d alone: exit %d: %s", j, code, stderr)
				}
				alone, _, err := matrixio.ReadVectorFile(xj, nil)
				if err != nil {
					t.Fatal(err)
				}
				if one.Iterations != local[j].Iterations || remote[j].Iterations != local[j].Iterations {
					t.Errorf("column %d: %d iterations alone, %d in the block, %d remote", j, one.Iterations, local[j].Iterations, remote[j].Iterations)
				}
				for i := range alone {
					if math.Float64bits(alone[i]) != math.Float64bits(xl[j][i]) || math.Float64bits(xr[j][i]) != math.Float64bits(xl[j][i]) {
						t.Fatalf("column %d, x(%d): alone %v, local %v, remote %v", j, i+1, alone[i], xl[j][i], xr[j][i])
					}
				}
				if c.cmd != "solve" {
					continue
				}
				// ‖b − A·x‖ ≤ rtol·‖b‖ recomputed (default rtol 1e-8).
				r := make([]float64, a.Rows)
				a.MulVec(r, xl[j])
				for i := range r {
					r[i] = cols[j][i] - r[i]
				}
				if rel := norm2(r) / norm2(cols[j]); rel > 1e-8 {
					t.Errorf("column %d: true relative residual %.3g > 1e-8", j, rel)
				}
			}
		})
	}
}

// TestAMGRemote: the multigrid options reach the server and its set-up
// report comes back: a remote solve with --precond amg and the l1-Jacobi
// smoother reports the same hierarchy, smoother and iterations as the
// same solve here; a near-null space, which the request cannot carry yet,
// is refused rather than dropped.
func TestAMGRemote(t *testing.T) {
	addr := inProcessServer(t)
	path := sharedMatrix(t, "bcsstk16.mtx.gz")
	args := []string{"solve", path, "--precond", "amg", "--amg-smoother", "l1jacobi", "--amg-theta", "0.1"}
	local, stderr, code := runJSON(t, args...)
	if code != 0 {
		t.Fatalf("local: exit %d: %s", code, stderr)
	}
	remote, stderr, code := runJSON(t, append(args, "--server", addr)...)
	if code != 0 {
		t.Fatalf("remote: exit %d: %s", code, stderr)
	}
	if local.Multigrid == nil || remote.Multigrid == nil {
		t.Fatalf("multigrid report: local %v, remote %v", local.Multigrid, remote.Multigrid)
	}
	if remote.Multigrid.Smoother != "l1jacobi" || remote.Multigrid.Theta != 0.1 || len(remote.Multigrid.Levels) != len(local.Multigrid.Levels) ||
		remote.Iterations != local.Iterations {
		t.Errorf("remote %+v (%d iterations), local %+v (%d)", *remote.Multigrid, remote.Iterations, *local.Multigrid, local.Iterations)
	}
	nn := filepath.Join(t.TempDir(), "nn.mtx")
	if err := matrixio.WriteVectorFile(nn, onesVec(4884)); err != nil {
		t.Fatal(err)
	}
	if _, stderr, code := runCLI(t, append(args, "--server", addr, "--near-null", nn, "--quiet")...); code != exitUsage || !strings.Contains(stderr, "not sent to a server") {
		t.Errorf("--near-null with --server: exit %d, want %d: %s", code, exitUsage, stderr)
	}
}
