package main

import (
	"context"
	"encoding/json"
	"math"
	"net"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
	"time"

	"github.com/residua/residua/matrixio"
)

// TestJSONOnEveryFailure: with --json, every way solve and lsq end prints
// exactly one JSON object on stdout, with the documented status word, the
// error in words and, where there is one, advice; a server's error keeps
// its gRPC code for scripts (issue 11 §2: saylr3 --json printed nothing).
func TestJSONOnEveryFailure(t *testing.T) {
	// A port nothing listens on: bind one, then close it.
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	dead := l.Addr().String()
	l.Close()
	missing := filepath.Join(t.TempDir(), "absent.mtx")
	cases := []struct {
		name   string
		args   []string
		code   int
		status string
		grpc   string
		advice string // a phrase the advice must hold ("" for none)
	}{
		// saylr3's first diagonal entry is negative (-0.005649 in the
		// collection's file), so no preconditioner can be built and no
		// SPD method applies: Golub and Van Loan, 4th ed., §4.2 (an SPD
		// matrix has a positive diagonal).
		{"set-up failed", []string{"solve", sharedMatrix(t, "saylr3.mtx"), "--method", "cg"}, 4, "setup-failed", "", "(−A)·x = −b"},
		{"missing file", []string{"solve", missing}, 2, "refused", "", ""},
		{"b of the wrong length", []string{"lsq", sharedMatrix(t, "bcsstk01.mtx"), "-b", sharedMatrix(t, "nos4.mtx")}, 2, "refused", "", ""},
		{"no server", []string{"solve", sharedMatrix(t, "nos4.mtx"), "--server", dead}, 1, "failed", "Unavailable", ""},
		{"no server, lsq", []string{"lsq", sharedMatrix(t, "illc1033.mtx"), "--server", dead}, 1, "failed", "Unavailable", ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			stdout, stderr, code := runCLI(t, append(c.args, "--json", "--quiet")...)
			if code != c.code {
				t.Errorf("exit %d, want %d (%s)", code, c.code, stderr)
			}
			dec := json.NewDecoder(strings.NewReader(stdout))
			var got map[string]any
			if err := dec.Decode(&got); err != nil {
				t.Fatalf("stdout is not a JSON object: %v\n%q", err, stdout)
			}
			if dec.More() {
				t.Errorf("more than one JSON value on stdout:\n%s", stdout)
			}
			if got["status"] != c.status || got["converged"] != false {
				t.Errorf("status %v, converged %v; want %s, false", got["status"], got["converged"], c.status)
			}
			if e, _ := got["error"].(string); e == "" {
				t.Error("no error in words")
			}
			if h, _ := got["headline"].(string); h == "" {
				t.Error("no headline")
			}
			if g, _ := got["grpc_code"].(string); g != c.grpc {
				t.Errorf("grpc_code %q, want %q", g, c.grpc)
			}
			a, _ := got["advice"].(string)
			if c.advice != "" && !strings.Contains(a, c.advice) {
				t.Errorf("advice %q does not say what to do", a)
			}
			if c.grpc != "" && strings.Contains(stderr, "Unavailable") {
				t.Errorf("stderr shows the gRPC code to a person: %s", stderr)
			}
		})
	}
}

// TestAlwaysWrite: a solve stopped by its iteration cap keeps its last
// iterate with --always-write, and that file is the iterate the summary
// describes: its true residual, recomputed here, is the summary's.
func TestAlwaysWrite(t *testing.T) {
	path := sharedMatrix(t, "nos4.mtx")
	out := filepath.Join(t.TempDir(), "x.mtx")
	rep, stderr, code := runJSON(t, "solve", path, "--max-iter", "3", "-o", out, "--always-write", "--precond", "none")
	if code != exitNotConverged || rep.Status != "iteration-limit" {
		t.Fatalf("exit %d, status %s: %s", code, rep.Status, stderr)
	}
	if rep.SolutionFile != out || rep.SolutionNote == "" {
		t.Errorf("solution_file %q, note %q", rep.SolutionFile, rep.SolutionNote)
	}
	a, _, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		t.Fatal(err)
	}
	x, _, err := matrixio.ReadVectorFile(out, nil)
	if err != nil {
		t.Fatal(err)
	}
	// b = A·1 (no -b given); r = b − A·x.
	b, ax := make([]float64, a.Rows), make([]float64, a.Rows)
	a.MulVec(b, onesVec(a.Cols))
	a.MulVec(ax, x)
	for i := range ax {
		ax[i] = b[i] - ax[i]
	}
	if got, want := norm2(ax)/norm2(b), float64(rep.RelativeResidual); math.Abs(got-want) > 1e-12*want {
		t.Errorf("the written x has relative residual %.17g, the summary says %.17g", got, want)
	}
	// Without the flag, nothing is written.
	out2 := filepath.Join(t.TempDir(), "y.mtx")
	rep, _, _ = runJSON(t, "solve", path, "--max-iter", "3", "-o", out2, "--precond", "none")
	if _, err := os.Stat(out2); err == nil || rep.SolutionFile != "" {
		t.Errorf("a stopped solve wrote %s without --always-write", out2)
	}
}

// TestServeAnnouncements: a busy --http port is refused before anything
// says "serving"; listening beyond loopback without a token warns.
func TestServeAnnouncements(t *testing.T) {
	busy, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer busy.Close()
	_, stderr, code := runCLI(t, "serve", "--listen", "127.0.0.1:0", "--http", busy.Addr().String())
	if code != exitFailure || !strings.Contains(stderr, "--http "+busy.Addr().String()) {
		t.Errorf("busy --http port: exit %d, stderr %q", code, stderr)
	}
	if strings.Contains(stderr, "serving") {
		t.Errorf("announced serving before failing on the busy port: %q", stderr)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Second)
	defer cancel()
	_, stderr, _ = runCLIContext(ctx, t, "serve", "--listen", "0.0.0.0:0")
	if !strings.Contains(stderr, "without --token-file: anyone who can reach this port") {
		t.Errorf("no warning for an open port without a token: %q", stderr)
	}
	ctx, cancel = context.WithTimeout(context.Background(), time.Second)
	defer cancel()
	if _, stderr, _ = runCLIContext(ctx, t, "serve", "--listen", "127.0.0.1:0"); strings.Contains(stderr, "warning") {
		t.Errorf("warned on loopback: %q", stderr)
	}
}

// TestVersion: --version names the program and the Go release that built
// it (runtime.Version, which the build information records too).
func TestVersion(t *testing.T) {
	for _, arg := range []string{"--version", "version"} {
		stdout, _, code := runCLI(t, arg)
		if code != 0 || !strings.HasPrefix(stdout, "residua ") || !strings.Contains(stdout, runtime.Version()) {
			t.Errorf("%s: exit %d, %q", arg, code, stdout)
		}
	}
}
