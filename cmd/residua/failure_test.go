package main

import (
	"encoding/json"
	"net"
	"path/filepath"
	"strings"
	"testing"
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
		{"set-up failed", []string{"solve", sharedMatrix(t, "saylr3.mtx")}, 4, "setup-failed", "", "(−A)·x = −b"},
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
