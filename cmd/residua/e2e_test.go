package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"io"
	"math"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/residua/residua/history"
	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/solve"
)

// buildBinary compiles residua into a temporary folder.
func buildBinary(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "residua")
	cmd := exec.Command("go", "build", "-o", bin, ".")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// server is a running 'residua serve' process.
type server struct {
	cmd       *exec.Cmd
	grpc, web string
	mu        sync.Mutex    // guards stderr, written by the reading goroutine
	stderr    *bytes.Buffer // everything it printed so far
	done      chan error
}

func (s *server) log() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.stderr.String()
}

// startServer runs 'residua serve' on loopback ports picked at run time
// (port 0) and reads the addresses it prints.
func startServer(t *testing.T, bin string, extra ...string) *server {
	t.Helper()
	args := append([]string{"serve", "--listen", "127.0.0.1:0", "--http", "127.0.0.1:0", "--shutdown-grace", "2s"}, extra...)
	cmd := exec.Command(bin, args...)
	pipe, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	s := &server{cmd: cmd, stderr: &bytes.Buffer{}, done: make(chan error, 1)}
	addrs := make(chan [2]string, 1)
	go func() {
		sc := bufio.NewScanner(pipe)
		var a [2]string
		for sc.Scan() {
			line := sc.Text()
			s.mu.Lock()
			s.stderr.WriteString(line + "\n")
			s.mu.Unlock()
			if v, ok := strings.CutPrefix(line, "residua: serving gRPC on "); ok {
				a[0] = v
			}
			if v, ok := strings.CutPrefix(line, "residua: watch page on "); ok {
				a[1] = strings.TrimSuffix(strings.TrimPrefix(v, "http://"), "/")
				addrs <- a
			}
		}
		s.done <- cmd.Wait()
	}()
	t.Cleanup(func() {
		if cmd.ProcessState == nil {
			cmd.Process.Kill()
			<-s.done
		}
	})
	select {
	case a := <-addrs:
		s.grpc, s.web = a[0], a[1]
	case err := <-s.done:
		t.Fatalf("server exited: %v\n%s", err, s.log())
	case <-time.After(20 * time.Second):
		t.Fatal("server printed no address within 20 s")
	}
	return s
}

// cli runs the binary and returns stdout, stderr and the exit status.
func cli(t *testing.T, bin string, args ...string) (string, string, int) {
	t.Helper()
	return cliEnv(t, nil, bin, args...)
}

// cliEnv is cli with extra environment variables ("NAME=value").
func cliEnv(t *testing.T, env []string, bin string, args ...string) (string, string, int) {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	err := cmd.Run()
	var ee *exec.ExitError
	switch {
	case errors.As(err, &ee):
		return out.String(), errb.String(), ee.ExitCode()
	case err != nil:
		t.Fatalf("running %q: %v", args, err)
	}
	return out.String(), errb.String(), 0
}

// sameBits fails unless two vector files hold bitwise equal values.
func sameBits(t *testing.T, remote, local string) {
	t.Helper()
	x1, _, err := matrixio.ReadVectorFile(remote, nil)
	if err != nil {
		t.Fatal(err)
	}
	x2, _, err := matrixio.ReadVectorFile(local, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(x1) != len(x2) {
		t.Fatalf("%d entries remote, %d local", len(x1), len(x2))
	}
	for i := range x1 {
		if math.Float64bits(x1[i]) != math.Float64bits(x2[i]) {
			t.Fatalf("x[%d]: remote %v, local %v", i, x1[i], x2[i])
		}
	}
}

func decodeReport(t *testing.T, stdout string) solve.Summary {
	t.Helper()
	var rep solve.Summary
	if err := json.Unmarshal([]byte(stdout), &rep); err != nil {
		t.Fatalf("not a JSON summary: %v\n%s", err, stdout)
	}
	return rep
}

// End to end with the real binary: a server on a loopback port picked at
// run time; a shared SuiteSparse matrix uploaded and solved through the
// CLI with --json; the solution's true residual checked here; remote and
// local solutions bitwise equal (the same krylov and precond code at the
// same worker count); detach, watch, jobs and cancel; the watch page's job
// list; a malformed upload refused with its line; shutdown on SIGTERM.
func TestEndToEnd(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs the binary")
	}
	matrix := sharedMatrix(t, "bcsstk14.mtx")
	bin := buildBinary(t)
	t.Run("token", func(t *testing.T) { testToken(t, bin) })
	srv := startServer(t, bin)
	t.Run("one outcome", func(t *testing.T) { testOneOutcome(t, bin, srv) })
	dir := t.TempDir()
	xr, xl := filepath.Join(dir, "remote.mtx"), filepath.Join(dir, "local.mtx")

	stdout, stderr, code := cli(t, bin, "solve", "--server", srv.grpc, matrix, "--json", "-o", xr)
	if code != 0 {
		t.Fatalf("remote solve: exit %d\n%s", code, stderr)
	}
	remote := decodeReport(t, stdout)
	if !remote.Converged || remote.JobID == "" || remote.Server != srv.grpc || remote.Preconditioner == "" {
		t.Errorf("remote summary: %+v", remote)
	}
	stdout, stderr, code = cli(t, bin, "solve", matrix, "--json", "--quiet", "-o", xl)
	if code != 0 {
		t.Fatalf("local solve: exit %d\n%s", code, stderr)
	}
	local := decodeReport(t, stdout)
	if remote.Iterations != local.Iterations || remote.Preconditioner != local.Preconditioner {
		t.Errorf("remote %d iterations with %s, local %d with %s", remote.Iterations, remote.Preconditioner, local.Iterations, local.Preconditioner)
	}
	a, _, err := matrixio.ReadMatrixFile(matrix, nil)
	if err != nil {
		t.Fatal(err)
	}
	x1, _, err := matrixio.ReadVectorFile(xr, nil)
	if err != nil {
		t.Fatal(err)
	}
	sameBits(t, xr, xl)
	b := make([]float64, a.Rows)
	a.MulVec(b, onesVec(a.Cols))
	r := make([]float64, a.Rows)
	a.MulVec(r, x1)
	for i := range r {
		r[i] = b[i] - r[i]
	}
	if rel := norm2(r) / norm2(b); rel > 1e-8 {
		t.Errorf("true relative residual of the received x is %g > rtol 1e-8", rel)
	}

	// Least squares through the server: the same answer, bitwise, as a
	// local lsq (the same krylov.LSQ code), and NumPy's answer
	// (../shared/reference/well1033_shipped_damp0_x.mtx, LAPACK gelsd)
	// within what the tolerances promise. krylov's TestLSQShared derives
	// that promise for this very problem: 10.1 = 1e-3·‖x_ref‖ at the
	// default atol = btol = 1e-8, from the normal-residual rule, which
	// scales with atol; at 1e-12 it is 1e-7·‖x_ref‖, and the reference's own
	// error (κ_LS·u·‖x‖ with 1e3 for the dimensions, 1.9e-7) is far below.
	lr, ll := filepath.Join(dir, "lsq-remote.mtx"), filepath.Join(dir, "lsq-local.mtx")
	well, wellB := sharedMatrix(t, "well1033.mtx"), sharedMatrix(t, "well1033_b.mtx")
	hr, hl := filepath.Join(dir, "lsq-remote.csv"), filepath.Join(dir, "lsq-local.csv")
	tight := []string{"--atol", "1e-12", "--btol", "1e-12"}
	stdout, stderr, code = cli(t, bin, append([]string{"lsq", "--server", srv.grpc, well, "-b", wellB, "--json", "-o", lr, "--history", hr}, tight...)...)
	if code != 0 {
		t.Fatalf("remote lsq: exit %d\n%s", code, stderr)
	}
	if rep := decodeReport(t, stdout); rep.NormalResidualNorm == nil || rep.JobID == "" {
		t.Errorf("remote lsq summary: %+v", rep)
	}
	if _, stderr, code := cli(t, bin, append([]string{"lsq", well, "-b", wellB, "--quiet", "-o", ll, "--history", hl}, tight...)...); code != 0 {
		t.Fatalf("local lsq: exit %d\n%s", code, stderr)
	}
	sameBits(t, lr, ll)
	xRemote, _, err := matrixio.ReadVectorFile(lr, nil)
	if err != nil {
		t.Fatal(err)
	}
	xRef, _, err := matrixio.ReadVectorFile(filepath.Join(shared.Reference(t), "well1033_shipped_damp0_x.mtx"), nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(xRemote) != len(xRef) {
		t.Fatalf("remote lsq solution has %d entries, the reference %d", len(xRemote), len(xRef))
	}
	diff := make([]float64, len(xRef))
	for i := range diff {
		diff[i] = xRemote[i] - xRef[i]
	}
	if d := norm2(diff); d > 1e-7*norm2(xRef) {
		t.Errorf("remote lsq: ‖x − x_NumPy‖ = %.3g > 1e-7·‖x_NumPy‖ = %.3g", d, 1e-7*norm2(xRef))
	}
	// The remote history carries ‖Aᵀr‖ as the local one does, row for row
	// (the elapsed times differ, the norms are the same bits).
	remoteRows, localRows := readHistory(t, hr), readHistory(t, hl)
	if !remoteRows.LeastSquares || len(remoteRows.Rows) != len(localRows.Rows) {
		t.Fatalf("remote lsq history: least squares %v, %d rows; local %d rows",
			remoteRows.LeastSquares, len(remoteRows.Rows), len(localRows.Rows))
	}
	for i, r := range remoteRows.Rows {
		l := localRows.Rows[i]
		if r.Iteration != l.Iteration || r.ResidualNorm != l.ResidualNorm || r.NormalResidualNorm != l.NormalResidualNorm {
			t.Fatalf("history row %d: remote %+v, local %+v", i, r, l)
		}
	}

	// A detached job, then watch it to the end and download its solution.
	gen := filepath.Join(dir, "j.mtx")
	if _, stderr, code := cli(t, bin, "generate", "jump3d", "--size", "24", "-o", gen); code != 0 {
		t.Fatal(stderr)
	}
	stdout, stderr, code = cli(t, bin, "solve", "--server", srv.grpc, gen, "--precond", "jacobi", "--detach")
	if code != 0 {
		t.Fatalf("detach: exit %d\n%s", code, stderr)
	}
	job := strings.TrimSpace(stdout)
	xw := filepath.Join(dir, "watched.mtx")
	stdout, stderr, code = cli(t, bin, "watch", job, "--server", srv.grpc, "--json", "-o", xw)
	if code != 0 {
		t.Fatalf("watch: exit %d\n%s", code, stderr)
	}
	if w := decodeReport(t, stdout); !w.Converged || w.JobID != job || w.SolutionFile != xw {
		t.Errorf("watch summary: %+v", w)
	}
	// The watched job's solution is the local solve's, bitwise (same code,
	// same worker count), and b = A·1 here: the local solve gives max
	// |x_i − 1| = 3.4e-6, so 1e-5 leaves a factor 3 (common practice) and
	// fails an answer ten times worse.
	xwl := filepath.Join(dir, "watched-local.mtx")
	if _, stderr, code := cli(t, bin, "solve", gen, "--precond", "jacobi", "--quiet", "-o", xwl); code != 0 {
		t.Fatalf("local solve of the watched job's problem: exit %d\n%s", code, stderr)
	}
	sameBits(t, xw, xwl)
	if x, _, err := matrixio.ReadVectorFile(xw, nil); err != nil || maxErrorVsOnes(x) > 1e-5 {
		t.Errorf("downloaded solution: %v (max |x_i − 1| %g)", err, maxErrorVsOnes(x))
	}

	// A long job (unpreconditioned CG to rtol 1e-13 on a 40³ jump3d grid
	// takes thousands of iterations, seconds) cancelled from another
	// client ends cancelled: exit 3.
	big := filepath.Join(dir, "big.mtx")
	if _, stderr, code := cli(t, bin, "generate", "jump3d", "--size", "40", "-o", big); code != 0 {
		t.Fatal(stderr)
	}
	stdout, stderr, code = cli(t, bin, "solve", "--server", srv.grpc, big, "--precond", "none", "--rtol", "1e-13", "--detach")
	long := strings.TrimSpace(stdout)
	if code != 0 || long == "" || strings.ContainsAny(long, " \n") {
		t.Fatalf("detached solve: exit %d, job id %q\n%s", code, long, stderr)
	}
	if _, stderr, code := cli(t, bin, "cancel", long, "--server", srv.grpc); code != 0 {
		t.Fatalf("cancel: exit %d\n%s", code, stderr)
	}
	stdout, _, code = cli(t, bin, "watch", long, "--server", srv.grpc, "--json")
	if w := decodeReport(t, stdout); code != exitNotConverged || w.Status != "cancelled" {
		t.Errorf("watch of a cancelled job: exit %d, status %q", code, w.Status)
	}

	// jobs --json lists all three with id and state.
	stdout, _, code = cli(t, bin, "jobs", "--server", srv.grpc, "--json")
	var list struct {
		Jobs []struct{ ID, State, Outcome string }
	}
	if err := json.Unmarshal([]byte(stdout), &list); err != nil || code != 0 {
		t.Fatalf("jobs --json: exit %d, %v\n%s", code, err, stdout)
	}
	states := map[string]string{}
	for _, j := range list.Jobs {
		states[j.ID] = j.State + "/" + j.Outcome
	}
	if states[remote.JobID] != "done/converged" || states[job] != "done/converged" || states[long] != "done/cancelled" {
		t.Errorf("jobs: %v", states)
	}

	// The watch page lists the jobs too, and serves metrics.
	resp, err := http.Get("http://" + srv.web + "/api/jobs")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK || !strings.Contains(string(body), job) {
		t.Errorf("/api/jobs: %s\n%s", resp.Status, body)
	}
	resp, err = http.Get("http://" + srv.web + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ = io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK || !strings.Contains(string(body), "residua_solves_running") {
		t.Errorf("/metrics: %s", resp.Status)
	}
	// serve wires the server's upload and store figures into the metrics:
	// after the uploads above both are positive.
	for _, name := range []string{"residua_upload_bytes_total", "residua_stored_matrix_bytes"} {
		if v := metricValue(string(body), name); !(v > 0) {
			t.Errorf("/metrics: %s = %v, want > 0", name, v)
		}
	}

	// A malformed matrix (read here before anything is sent) is refused
	// with its line: exit 2.
	bad := filepath.Join(dir, "bad.mtx")
	os.WriteFile(bad, []byte("%%MatrixMarket matrix coordinate real symmetric\n2 2 2\n1 1 4\n3 3 4\n"), 0o644)
	rhs := filepath.Join(dir, "b.mtx")
	matrixio.WriteVectorFile(rhs, []float64{1, 2})
	_, stderr, code = cli(t, bin, "solve", "--server", srv.grpc, bad, "-b", rhs)
	if code != exitUsage || !strings.Contains(stderr, ":4") {
		t.Errorf("malformed upload: exit %d, stderr %q", code, stderr)
	}

	// SIGINT stops a local solve within an iteration: it reports status
	// cancelled and exits 3.
	solve := exec.Command(bin, "solve", big, "--precond", "none", "--rtol", "1e-13", "--json", "--quiet")
	var sout bytes.Buffer
	solve.Stdout = &sout
	if err := solve.Start(); err != nil {
		t.Fatal(err)
	}
	time.Sleep(700 * time.Millisecond) // past reading the file, into the iterations
	solve.Process.Signal(syscall.SIGINT)
	err = solve.Wait()
	var ee *exec.ExitError
	if !errors.As(err, &ee) || ee.ExitCode() != exitNotConverged {
		t.Errorf("solve after SIGINT: %v, want exit 3", err)
	}
	if rep := decodeReport(t, sout.String()); rep.Status != "cancelled" || rep.Converged {
		t.Errorf("solve after SIGINT: status %q", rep.Status)
	}

	// SIGTERM shuts the server down cleanly.
	srv.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case err := <-srv.done:
		if err != nil {
			t.Errorf("server exit after SIGTERM: %v\n%s", err, srv.log())
		}
	case <-time.After(20 * time.Second):
		t.Error("server still running 20 s after SIGTERM")
	}
}

// testToken: a server started with --token-file refuses calls without the
// token (exit 1, Unauthenticated), never logs it, and accepts the address
// and token from RESIDUA_SERVER and RESIDUA_TOKEN_FILE.
func testToken(t *testing.T, bin string) {
	token := filepath.Join(t.TempDir(), "token")
	os.WriteFile(token, []byte("s3cret-for-the-test\n"), 0o600)
	srv := startServer(t, bin, "--token-file", token)
	_, stderr, code := cli(t, bin, "jobs", "--server", srv.grpc)
	if code != exitFailure || !strings.Contains(stderr, "wants a valid bearer token") {
		t.Errorf("no token: exit %d, stderr %q", code, stderr)
	}
	if strings.Contains(srv.log(), "s3cret") {
		t.Error("the server logged the token")
	}
	stdout, stderr, code := cliEnv(t, []string{envServer + "=" + srv.grpc, envTokenFile + "=" + token}, bin, "jobs", "--json")
	if code != 0 || !strings.Contains(stdout, `"jobs"`) {
		t.Errorf("token from the environment: exit %d, stdout %q, stderr %q", code, stdout, stderr)
	}
}

// metricValue returns the value of an unlabelled sample in Prometheus text
// exposition, or NaN when the metric is absent.
func metricValue(text, name string) float64 {
	for _, line := range strings.Split(text, "\n") {
		if rest, ok := strings.CutPrefix(line, name+" "); ok {
			v, err := strconv.ParseFloat(strings.TrimSpace(rest), 64)
			if err == nil {
				return v
			}
		}
	}
	return math.NaN()
}

func readHistory(t *testing.T, path string) history.History {
	t.Helper()
	h, err := history.Read(path)
	if err != nil {
		t.Fatal(err)
	}
	return h
}
