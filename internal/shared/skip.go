package shared

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"
)

// SkipsEnvVar names a file to which Main appends its package's summary line
// of skipped checks; .ci/local sets it and prints the lines after the run.
const SkipsEnvVar = "RESIDUA_SKIPS"

// skipped counts the tests skipped for a missing outside piece, by reason.
var skipped struct {
	sync.Mutex
	n map[string]int
}

// Skip skips tb because an outside piece its check needs (the shared data
// folder, protoc, Python's gRPC, Chromium) is absent, and notes why for the
// package's summary line (see Main). With CI=true it fails tb instead: CI
// installs these pieces and must run every check. The message names the
// piece and how to get it.
func Skip(tb testing.TB, format string, args ...any) {
	tb.Helper()
	msg := fmt.Sprintf(format, args...)
	if os.Getenv("CI") == "true" {
		tb.Fatalf("%s; CI=true, so this check must run", msg)
	}
	skipped.Lock()
	if skipped.n == nil {
		skipped.n = map[string]int{}
	}
	skipped.n[msg]++
	skipped.Unlock()
	tb.Skip(msg)
}

// SkipSummary returns one line saying how many tests of pkg were skipped by
// Skip, and why, or "" when none were.
func SkipSummary(pkg string) string {
	skipped.Lock()
	defer skipped.Unlock()
	if len(skipped.n) == 0 {
		return ""
	}
	total := 0
	var reasons []string
	for msg, k := range skipped.n {
		total += k
		reasons = append(reasons, fmt.Sprintf("%d× %s", k, msg))
	}
	sort.Strings(reasons)
	return fmt.Sprintf("%s: %d tests skipped: %s", pkg, total, strings.Join(reasons, "; "))
}

// Main runs the package's tests and then prints the package's line of
// skipped checks (SkipSummary), if any, to standard output, which go test
// shows with -v, and appends it to the file named by $RESIDUA_SKIPS when
// set. A package whose tests call Skip (directly or through Dir) has
//
//	func TestMain(m *testing.M) { shared.Main(m) }
func Main(m *testing.M) {
	code := m.Run()
	pkg := "."
	if wd, err := os.Getwd(); err == nil {
		pkg = wd
		if root, err := moduleRoot(); err == nil {
			if rel, err := filepath.Rel(root, wd); err == nil {
				pkg = filepath.ToSlash(rel)
			}
		}
	}
	if line := SkipSummary(pkg); line != "" {
		fmt.Println(line)
		if path := os.Getenv(SkipsEnvVar); path != "" {
			if f, err := os.OpenFile(path, os.O_APPEND|os.O_CREATE|os.O_WRONLY, 0o644); err == nil {
				fmt.Fprintln(f, line)
				f.Close()
			}
		}
	}
	os.Exit(code)
}
