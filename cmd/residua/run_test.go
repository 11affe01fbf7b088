package main

import (
	"bytes"
	"context"
	"errors"
	"io"
	"os"
	"reflect"
	"strings"
	"testing"
)

// runCLI drives run in-process as main would, returning what went to stdout
// and stderr and the exit status main would give.
func runCLI(t *testing.T, args ...string) (stdout, stderr string, code int) {
	t.Helper()
	return runCLIContext(context.Background(), t, args...)
}

func runCLIContext(ctx context.Context, t *testing.T, args ...string) (stdout, stderr string, code int) {
	t.Helper()
	var out, errb bytes.Buffer
	err := run(ctx, args, strings.NewReader(""), &out, &errb)
	code = exitStatus(err, &errb)
	return out.String(), errb.String(), code
}

func TestParseInterleaved(t *testing.T) {
	tests := []struct {
		name    string
		args    []string
		wantPos []string
		wantB   string
		wantN   int
	}{
		{"flags first", []string{"-b", "b.mtx", "--n", "3", "A.mtx"}, []string{"A.mtx"}, "b.mtx", 3},
		{"flags after", []string{"A.mtx", "-b", "b.mtx", "--n=3"}, []string{"A.mtx"}, "b.mtx", 3},
		{"interleaved", []string{"A.mtx", "-b", "b.mtx", "B.mtx", "--n", "4", "C.mtx"}, []string{"A.mtx", "B.mtx", "C.mtx"}, "b.mtx", 4},
		{"double dash", []string{"A.mtx", "--", "-b", "x"}, []string{"A.mtx", "-b", "x"}, "", 0},
		{"stdin dash", []string{"-", "-b", "b.mtx"}, []string{"-"}, "b.mtx", 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			f := newFlags("x", "x", "")
			b := f.String("b", "", "")
			n := f.Int("n", 0, "")
			pos, err := f.parse(&env{stdout: io.Discard}, tt.args)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(pos, tt.wantPos) || *b != tt.wantB || *n != tt.wantN {
				t.Errorf("got %q b=%q n=%d, want %q b=%q n=%d", pos, *b, *n, tt.wantPos, tt.wantB, tt.wantN)
			}
		})
	}
}

func TestUsageErrors(t *testing.T) {
	for _, args := range [][]string{
		{},
		{"no-such-command"},
		{"generate", "--no-such-flag"},
		{"generate", "poisson2d"},           // --size missing
		{"generate", "cube", "--size", "4"}, // unknown kind
		{"generate", "poisson3d", "--size", "4", "--contrast", "10"}, // flag of another kind
		{"generate", "jump3d", "--size", "4", "--contrast", "-1"},
		{"generate", "poisson3d", "--size", "0"},
		{"help", "no-such-command"},
	} {
		_, stderr, code := runCLI(t, args...)
		if code != exitUsage {
			t.Errorf("residua %q: exit %d, want %d; stderr %q", args, code, exitUsage, stderr)
		}
		if stderr == "" {
			t.Errorf("residua %q: nothing on stderr", args)
		}
	}
}

// Every command's --help goes to stdout, exits 0 and lists the exit statuses.
func TestHelp(t *testing.T) {
	stdout, _, code := runCLI(t, "help")
	if code != 0 {
		t.Fatalf("help: exit %d", code)
	}
	for _, c := range commands {
		if !strings.Contains(stdout, c.name) {
			t.Errorf("help does not list %s", c.name)
		}
		for _, args := range [][]string{{c.name, "--help"}, {"help", c.name}, {c.name, "-h"}} {
			out, errOut, code := runCLI(t, args...)
			if code != 0 || errOut != "" {
				t.Errorf("%q: exit %d, stderr %q", args, code, errOut)
			}
			for _, want := range []string{"Usage: residua " + c.name, "Exit status", "  2  bad usage"} {
				if !strings.Contains(out, want) {
					t.Errorf("%q: help lacks %q:\n%s", args, want, out)
				}
			}
			// Only the commands that report a solve's outcome list 3 and 4
			// (issue 11 §4: each help lists the statuses it can return).
			solving := len(exitsOf(c.name)) == 5
			if got := strings.Contains(out, "  4  breakdown"); got != solving {
				t.Errorf("%q: lists status 4: %v, want %v", args, got, solving)
			}
		}
	}
}

func TestExitStatus(t *testing.T) {
	var buf bytes.Buffer
	if got := exitStatus(nil, &buf); got != 0 || buf.Len() != 0 {
		t.Errorf("nil: %d %q", got, buf.String())
	}
	if got := exitStatus(errors.New("boom"), &buf); got != exitFailure || !strings.Contains(buf.String(), "residua: boom") {
		t.Errorf("plain error: %d %q", got, buf.String())
	}
	buf.Reset()
	wrapped := &exitError{code: exitBreakdown, err: errors.New("not SPD")}
	if got := exitStatus(wrapped, &buf); got != exitBreakdown {
		t.Errorf("breakdown: %d", got)
	}
	buf.Reset()
	if got := exitStatus(&exitError{code: exitNotConverged, err: errors.New("x"), quiet: true}, &buf); got != exitNotConverged || buf.Len() != 0 {
		t.Errorf("quiet: %d %q", got, buf.String())
	}
}

// checkOnly fails unless dir holds exactly the named files (no temporaries).
func checkOnly(t *testing.T, dir string, names ...string) {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, e := range ents {
		got = append(got, e.Name())
	}
	if !reflect.DeepEqual(got, names) {
		t.Errorf("%s holds %q, want %q", dir, got, names)
	}
}
