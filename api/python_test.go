package api

import (
	"encoding/json"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
)

// Debian's tools for the Python check: protoc (protobuf-compiler),
// grpc_python_plugin (protobuf-compiler-grpc), and python3 with
// python3-grpcio and python3-protobuf. The system python3 is named by path:
// another python3 earlier on PATH may lack the Debian modules.
const (
	pythonBin    = "/usr/bin/python3"
	grpcPyPlugin = "/usr/bin/grpc_python_plugin"
)

// skipOrFail skips the test, or fails it when CI=true, since CI installs
// the tools and must run the check.
func skipOrFail(t *testing.T, format string, args ...any) {
	t.Helper()
	shared.Skip(t, format, args...)
}

// TestPythonClient generates Python stubs from our .proto with Debian's
// protoc and grpc_python_plugin, then runs testdata/python/check.py
// (health check, upload, solve, watch, detached solve and download, with
// the residual checked in Python) against a server on a loopback port.
func TestPythonClient(t *testing.T) {
	protoc, err := exec.LookPath("protoc")
	if err != nil {
		skipOrFail(t, "protoc not found (Debian package protobuf-compiler); skipping the Python client check")
	}
	for _, p := range []string{grpcPyPlugin, pythonBin} {
		if _, err := os.Stat(p); err != nil {
			skipOrFail(t, "%s not found (Debian packages protobuf-compiler-grpc, python3); skipping the Python client check", p)
		}
	}
	if out, err := exec.Command(pythonBin, "-c", "import grpc, google.protobuf").CombinedOutput(); err != nil {
		skipOrFail(t, "python3-grpcio or python3-protobuf missing (%v: %s); skipping the Python client check", err, out)
	}
	_, mtx := sharedMatrix(t, "bcsstk14.mtx")
	// well1033 is rectangular (1033×320, full column rank: the manifest), for
	// the least-squares part of the check.
	_, rect := sharedMatrix(t, "well1033.mtx")

	stubs := t.TempDir()
	gen := exec.Command(protoc, "--proto_path=../proto", "--proto_path=/usr/include",
		"--python_out="+stubs, "--grpc_python_out="+stubs, "--plugin=protoc-gen-grpc_python="+grpcPyPlugin,
		"residua/v1/residua.proto")
	if out, err := gen.CombinedOutput(); err != nil {
		t.Fatalf("generating the Python stubs: %v\n%s", err, out)
	}

	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	startServerOn(t, Config{}, lis)

	cmd := exec.Command(pythonBin, filepath.Join("testdata", "python", "check.py"), lis.Addr().String(), mtx, rect)
	cmd.Env = append(os.Environ(), "PYTHONPATH="+stubs, "PYTHONDONTWRITEBYTECODE=1")
	var stderr strings.Builder
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("check.py: %v\n%s", err, stderr.String())
	}
	var seen struct {
		Health           string  `json:"health"`
		Iterations       int     `json:"iterations"`
		RelativeResidual float64 `json:"relative_residual"`
		ProgressEvents   int     `json:"progress_events"`
		LSQIterations    int     `json:"lsq_iterations"`
		LSQNormalRatio   float64 `json:"lsq_normal_ratio"`
	}
	if err := json.Unmarshal(out, &seen); err != nil {
		t.Fatalf("check.py printed %q: %v", out, err)
	}
	if seen.Health != "SERVING" || seen.Iterations == 0 || seen.ProgressEvents < 2 || seen.RelativeResidual > 1.01e-8 ||
		seen.LSQIterations == 0 || !(seen.LSQNormalRatio <= 1e-7) {
		t.Errorf("check.py saw %+v", seen)
	}
	t.Logf("python client: %s", out)
}
