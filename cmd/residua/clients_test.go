package main

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
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

// writeLoopbackCert writes a self-signed certificate for 127.0.0.1 and
// localhost, and its key, as PEM files in dir.
func writeLoopbackCert(t *testing.T, dir string) (certFile, keyFile string) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "residua client test"},
		DNSNames: []string{"localhost"}, IPAddresses: []net.IP{net.IPv4(127, 0, 0, 1)},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		KeyUsage:    x509.KeyUsageDigitalSignature | x509.KeyUsageCertSign,
		ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}, IsCA: true, BasicConstraintsValid: true,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kder, err := x509.MarshalPKCS8PrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	for f, b := range map[string]*pem.Block{certFile: {Type: "CERTIFICATE", Bytes: der}, keyFile: {Type: "PRIVATE KEY", Bytes: kder}} {
		if err := os.WriteFile(f, pem.EncodeToMemory(b), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	return certFile, keyFile
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
	bin := buildBinary(t)
	srv := startServer(t, bin)
	// A second server on TLS that wants a bearer token, for the client's
	// tls and token options and the UNAUTHENTICATED and UNAVAILABLE checks.
	const token = "python-client-test-token"
	keys := t.TempDir()
	tokenFile := filepath.Join(keys, "token")
	if err := os.WriteFile(tokenFile, []byte(token+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cert, key := writeLoopbackCert(t, keys)
	guarded := startServer(t, bin, "--token-file", tokenFile, "--tls-cert", cert, "--tls-key", key)

	cmd := exec.Command(systemPython, "-m", "unittest", "discover", "-v", "-s", filepath.Join(pkg, "tests"))
	cmd.Dir = pkg
	cmd.Env = append(os.Environ(), "PYTHONPATH="+pkg, "PYTHONDONTWRITEBYTECODE=1",
		"RESIDUA_ADDRESS="+srv.grpc, "RESIDUA_SHARED="+dir,
		"RESIDUA_TLS_ADDRESS="+guarded.grpc, "RESIDUA_TLS_CA="+cert, "RESIDUA_TOKEN="+token, "RESIDUA_SUMMARY_KEYS="+strings.Join(summaryJSONKeys(), ","))
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

// TestCppExample runs the C++ example (clients/cpp/heat_plate, built by
// its Makefile) against the real binary. Building it with gRPC takes a
// minute or more, too long for `go test ./...`, so .ci/run builds it and
// runs this test with RESIDUA_HEAT_PLATE set to the program's path;
// without that variable the test skips, saying how to run it.
func TestCppExample(t *testing.T) {
	prog := os.Getenv("RESIDUA_HEAT_PLATE")
	if prog == "" {
		t.Skip("RESIDUA_HEAT_PLATE is not set: make -C clients/cpp BUILD=/tmp/hp, then " +
			"RESIDUA_HEAT_PLATE=/tmp/hp/heat_plate go test -run TestCppExample ./cmd/residua (.ci/run does)")
	}
	srv := startServer(t, buildBinary(t))
	const n = 64
	cmd := exec.Command(prog, srv.grpc, strconv.Itoa(n))
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("heat_plate: %v\n%s\nserver log:\n%s", err, out, srv.log())
	}
	text := string(out)
	// The example's matrix is the 5-point Laplacian that stencil.Poisson2D
	// builds (4 on the diagonal, −1 per neighbour, row-major grid order):
	// the same content hash shows that its CSR_RAW encoding is right.
	if id := wire.MatrixID(stencil.Poisson2D(n)); !strings.Contains(text, "as matrix "+id+" (symmetric)") {
		t.Errorf("heat_plate did not upload the matrix %s:\n%s", id, text)
	}
	for _, want := range []string{"job finished: converged",
		"load case 0: residual check passed", "load case 1: residual check passed"} {
		if !strings.Contains(text, want) {
			t.Errorf("heat_plate printed no %q:\n%s", want, text)
		}
	}
	// Progress was printed for both load cases, iterations increasing
	// within each (the Solve stream contract).
	last := map[string]int{}
	for _, line := range strings.Split(text, "\n") {
		f := strings.Fields(line)
		if len(f) >= 4 && f[0] == "load" && f[1] == "case" && f[3] == "iteration" {
			it, err := strconv.Atoi(f[4])
			if err != nil {
				t.Fatalf("progress line %q", line)
			}
			if prev, ok := last[f[2]]; ok && it <= prev {
				t.Errorf("load case %s: iteration %d after %d", f[2], it, prev)
			}
			last[f[2]] = it
		}
	}
	if len(last) != 2 {
		t.Errorf("progress for %d load cases, want 2:\n%s", len(last), text)
	}
	t.Logf("heat_plate:\n%s", text)
}
