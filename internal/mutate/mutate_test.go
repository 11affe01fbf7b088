package mutate

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/residua/residua/internal/shared"
)

// EnvVar turns the long mutation check on.
const EnvVar = "RESIDUA_MUTATE"

// chromium is where the browser test looks for Debian's chromium.
const chromium = "/usr/bin/chromium"

func root(t *testing.T) string {
	t.Helper()
	wd, err := os.Getwd()
	if err != nil {
		t.Fatal(err)
	}
	r, err := ModuleRoot(wd)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

// TestMutantList checks the list against the current tree: unique names,
// each edit's text present as often as it says, packages named. It runs in
// every `go test ./...`, so a change to the code that a mutant targets
// shows up here and the mutant is updated with it.
func TestMutantList(t *testing.T) {
	r := root(t)
	seen := map[string]bool{}
	pkgs := map[string]bool{}
	for _, m := range Mutants {
		if seen[m.Name] {
			t.Errorf("mutant name %s used twice", m.Name)
		}
		seen[m.Name] = true
		if m.Bug == "" || len(m.Packages) == 0 || len(m.Edits) == 0 {
			t.Errorf("mutant %s: bug, edits and packages are required", m.Name)
		}
		if err := m.Check(r); err != nil {
			t.Error(err)
		}
		for _, e := range m.Edits {
			pkgs[strings.SplitN(e.File, "/", 2)[0]] = true
		}
	}
	// The issue asks for bugs across these packages.
	for _, p := range []string{"sparse", "matrixio", "krylov", "precond", "solve", "wire", "api", "client", "web"} {
		if !pkgs[p] {
			t.Errorf("no mutant in %s", p)
		}
	}
	if len(Mutants) < 19 {
		t.Errorf("%d mutants; the issue asks for its four survivors and at least 15 others", len(Mutants))
	}
}

// missing returns the outside tools of m that are absent, in words.
func missing(m Mutant) []string {
	var out []string
	for _, n := range m.Needs {
		switch n {
		case "chromium":
			if _, err := os.Stat(chromium); err != nil {
				out = append(out, chromium+" (Debian package chromium)")
			}
		case "shared":
			if _, err := os.Stat(shared.Path()); err != nil {
				out = append(out, "the shared data folder "+shared.Path())
			}
		}
	}
	return out
}

// TestMutants is the mutation run (see the package documentation).
func TestMutants(t *testing.T) {
	if os.Getenv(EnvVar) == "" {
		t.Skipf("the mutation run is long; set %s=1 to run it (see TESTING.md)", EnvVar)
	}
	only := regexp.MustCompile(os.Getenv("RESIDUA_MUTATE_ONLY"))
	src := root(t)
	work := t.TempDir()
	if err := CopyTree(src, work); err != nil {
		t.Fatal(err)
	}
	env := os.Environ()
	if p, err := filepath.Abs(shared.Path()); err == nil {
		env = append(env, shared.EnvVar+"="+p) // the copy has no ../shared beside it
	}
	env = append(env, "RESIDUA_ARTIFACTS="+t.TempDir())
	gotest := func(args ...string) (string, error) {
		ctx, cancel := context.WithTimeout(context.Background(), 20*time.Minute)
		defer cancel()
		cmd := exec.CommandContext(ctx, "go", append([]string{"test", "-count=1"}, args...)...)
		cmd.Dir, cmd.Env = work, env
		var out bytes.Buffer
		cmd.Stdout, cmd.Stderr = &out, &out
		err := cmd.Run()
		return out.String(), err
	}

	var selected []Mutant
	all := map[string]bool{}
	for _, m := range Mutants {
		if !only.MatchString(m.Name) {
			continue
		}
		selected = append(selected, m)
		for _, p := range m.Packages {
			all[p] = true
		}
	}
	var pkgs []string
	for p := range all {
		pkgs = append(pkgs, p)
	}
	start := time.Now()
	if out, err := gotest(pkgs...); err != nil {
		t.Fatalf("the unmutated tests fail, so no mutant can be judged: %v\n%s", err, out)
	}
	t.Logf("baseline: %s pass unmutated (%.0f s)", strings.Join(pkgs, " "), time.Since(start).Seconds())

	var report strings.Builder
	killed, survived, notRun := 0, 0, 0
	for _, m := range selected {
		if miss := missing(m); len(miss) > 0 {
			if os.Getenv("CI") == "true" {
				t.Errorf("%s: cannot run without %s; CI must provide it", m.Name, strings.Join(miss, ", "))
			}
			notRun++
			fmt.Fprintf(&report, "%-40s not run: needs %s\n", m.Name, strings.Join(miss, ", "))
			continue
		}
		restore, err := m.Apply(work)
		if err != nil {
			t.Fatal(err)
		}
		t0 := time.Now()
		verdict := ""
		if out, err := gotest(append([]string{"-run", "^$"}, m.Packages...)...); err != nil {
			verdict = "DOES NOT BUILD"
			t.Errorf("%s does not build, so it proves nothing: fix the list\n%s", m.Name, out)
		} else if out, err := gotest(append([]string{"-failfast"}, m.Packages...)...); err != nil {
			verdict = "killed by " + firstFailure(out)
			killed++
		} else {
			verdict = "SURVIVED"
			survived++
			t.Errorf("mutant %s survived: %s; %s pass with it", m.Name, m.Bug, strings.Join(m.Packages, " "))
		}
		if err := restore(); err != nil {
			t.Fatalf("restoring the copy after %s: %v", m.Name, err)
		}
		fmt.Fprintf(&report, "%-40s %-8.0f %s\n", m.Name, time.Since(t0).Seconds(), verdict)
	}
	run := killed + survived
	score := 100.0
	if run > 0 {
		score = 100 * float64(killed) / float64(run)
	}
	t.Logf("mutation run, %d mutants (%.0f s):\n%-40s %-8s %s\n%s%d killed, %d survived, %d not run: score %.0f%% of those run",
		len(selected), time.Since(start).Seconds(), "mutant", "seconds", "verdict", report.String(), killed, survived, notRun, score)
}

// firstFailure names the first failing test (or package) in go test's
// output.
func firstFailure(out string) string {
	for _, line := range strings.Split(out, "\n") {
		if f := strings.Fields(line); len(f) >= 3 && f[0] == "---" && f[1] == "FAIL:" {
			return f[2]
		}
	}
	for _, line := range strings.Split(out, "\n") {
		if strings.HasPrefix(line, "FAIL\t") || strings.HasPrefix(line, "panic:") {
			return strings.TrimSpace(line)
		}
	}
	return "a failing go test"
}
