package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/solve"
)

// The system python3, named by path: another python3 earlier on PATH (a
// virtual environment, pyenv) may lack Debian's modules.
const systemPython = "/usr/bin/python3"

// skipOrFail skips t, or fails it when CI=true: CI installs the toolchains
// these tests need (.ci/run) and must run them.
func skipOrFail(t *testing.T, format string, args ...any) {
	t.Helper()
	if os.Getenv("CI") == "true" {
		t.Fatalf(format, args...)
	}
	t.Skipf(format, args...)
}

// summaryJSONKeys lists the JSON keys of solve.Summary, the documented
// summary, for the Python client's check that its Summary has no others.
func summaryJSONKeys() []string {
	var keys []string
	st := reflect.TypeOf(solve.Summary{})
	for i := range st.NumField() {
		if name, _, _ := strings.Cut(st.Field(i).Tag.Get("json"), ","); name != "" && name != "-" {
			keys = append(keys, name)
		}
	}
	return keys
}

// TestPythonPackage runs the Python client's unittest suite
// (clients/python/tests) against the real binary serving on a loopback
// port, with Debian's python3-grpcio, python3-protobuf, python3-numpy and
// python3-scipy.
func TestPythonPackage(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs Python; skipped with -short")
	}
	if _, err := os.Stat(systemPython); err != nil {
		skipOrFail(t, "%s not found (Debian package python3); skipping the Python client's tests", systemPython)
	}
	if out, err := exec.Command(systemPython, "-c", "import grpc, google.protobuf, numpy, scipy").CombinedOutput(); err != nil {
		skipOrFail(t, "Debian's python3-grpcio, python3-protobuf, python3-numpy or python3-scipy missing (%v: %s); skipping the Python client's tests", err, out)
	}
	dir := shared.Dir(t)
	pkg, err := filepath.Abs(filepath.Join("..", "..", "clients", "python"))
	if err != nil {
		t.Fatal(err)
	}
	srv := startServer(t, buildBinary(t))

	cmd := exec.Command(systemPython, "-m", "unittest", "discover", "-v", "-s", filepath.Join(pkg, "tests"))
	cmd.Dir = pkg
	cmd.Env = append(os.Environ(), "PYTHONPATH="+pkg, "PYTHONDONTWRITEBYTECODE=1",
		"RESIDUA_ADDRESS="+srv.grpc, "RESIDUA_SHARED="+dir, "RESIDUA_SUMMARY_KEYS="+strings.Join(summaryJSONKeys(), ","))
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("the Python client's tests failed: %v\n%s\nserver log:\n%s", err, out, srv.log())
	}
	// unittest prints "skipped" for a test that skipped; none may here:
	// the server and the shared folder are both given.
	if strings.Contains(string(out), "skipped") {
		t.Errorf("Python tests skipped:\n%s", out)
	}
	t.Logf("python tests:\n%s", out)
}
