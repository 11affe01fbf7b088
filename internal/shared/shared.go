// Package shared finds the project's shared data folder (SuiteSparse matrices
// and reference results kept beside the checkout, never copied into it) and
// reads its manifest, for tests and benchmarks.
//
// The folder is $RESIDUA_SHARED, or ../shared relative to the module root by
// default. Tests call Dir (or Matrices, Reference): when the folder is absent
// they skip with a message saying where they looked, except when the
// environment variable CI is "true", where a missing folder fails the test,
// because CI must run these checks.
package shared

import (
	"bufio"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// EnvVar names the environment variable that overrides the folder's path.
const EnvVar = "RESIDUA_SHARED"

// Path returns the shared folder's path without checking that it exists.
func Path() string {
	if p := os.Getenv(EnvVar); p != "" {
		return p
	}
	root, err := moduleRoot()
	if err != nil {
		return filepath.Join("..", "shared")
	}
	return filepath.Join(root, "..", "shared")
}

// moduleRoot walks up from the working directory to the folder holding go.mod.
func moduleRoot() (string, error) {
	dir, err := os.Getwd()
	if err != nil {
		return "", err
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			return dir, nil
		}
		parent := filepath.Dir(dir)
		if parent == dir {
			return "", fmt.Errorf("shared: no go.mod above the working directory")
		}
		dir = parent
	}
}

// Dir returns the shared folder, skipping tb when it is absent (failing it
// when CI=true; see Skip).
func Dir(tb testing.TB) string {
	tb.Helper()
	p := Path()
	if _, err := os.Stat(p); err != nil {
		Skip(tb, "shared data folder %s not found (set %s to its path): checks against the SuiteSparse matrices and reference results", p, EnvVar)
	}
	return p
}

// Matrices returns the folder of SuiteSparse matrices.
func Matrices(tb testing.TB) string { tb.Helper(); return filepath.Join(Dir(tb), "matrices") }

// Reference returns the folder of reference results.
func Reference(tb testing.TB) string { tb.Helper(); return filepath.Join(Dir(tb), "reference") }

// Entry is one row of matrices/MANIFEST.tsv.
type Entry struct {
	File          string // file name inside matrices/, e.g. "bcsstk13.mtx.gz"
	Group, Name   string // the collection's group and name, e.g. "HB", "bcsstk13"
	Rows, Cols    int
	StoredEntries int    // entries stored in the file (one triangle for symmetric)
	Symmetry      string // header symmetry: general, symmetric, ...
	SPD           string // free text starting with "yes", "no" or "n/a"
	Kind          string // spd, least-squares, indefinite, nonsymmetric, rhs, solution
	RHSFile       string // right-hand side shipped with it, or ""
	SHA256        string
	Notes         string
}

// Path returns the entry's file path inside dir (as returned by Matrices).
func (e Entry) Path(dir string) string { return filepath.Join(dir, e.File) }

// Manifest reads matrices/MANIFEST.tsv.
func Manifest(tb testing.TB) []Entry {
	tb.Helper()
	dir := Matrices(tb)
	entries, err := ReadManifest(filepath.Join(dir, "MANIFEST.tsv"))
	if err != nil {
		tb.Fatal(err)
	}
	return entries
}

// ReadManifest parses a MANIFEST.tsv file: a header row naming the columns,
// then one tab-separated row per file.
func ReadManifest(path string) ([]Entry, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	var col map[string]int
	var out []Entry
	line := 0
	for sc.Scan() {
		line++
		text := sc.Text()
		if strings.TrimSpace(text) == "" || strings.HasPrefix(text, "#") {
			continue
		}
		fields := strings.Split(text, "\t")
		if col == nil {
			col = make(map[string]int, len(fields))
			for i, name := range fields {
				col[name] = i
			}
			for _, need := range []string{"file", "rows", "cols", "stored_entries", "symmetry", "kind"} {
				if _, ok := col[need]; !ok {
					return nil, fmt.Errorf("%s: header lacks column %q", path, need)
				}
			}
			continue
		}
		get := func(name string) string {
			i, ok := col[name]
			if !ok || i >= len(fields) {
				return ""
			}
			return fields[i]
		}
		atoi := func(name string) (int, error) {
			n, err := strconv.Atoi(get(name))
			if err != nil {
				return 0, fmt.Errorf("%s:%d: column %s: %v", path, line, name, err)
			}
			return n, nil
		}
		var e Entry
		e.File, e.Group, e.Name = get("file"), get("collection_group"), get("collection_name")
		if e.Rows, err = atoi("rows"); err != nil {
			return nil, err
		}
		if e.Cols, err = atoi("cols"); err != nil {
			return nil, err
		}
		if e.StoredEntries, err = atoi("stored_entries"); err != nil {
			return nil, err
		}
		e.Symmetry, e.SPD, e.Kind = get("symmetry"), get("spd"), get("kind")
		if rhs := get("rhs_file"); rhs != "-" && rhs != "" {
			e.RHSFile, _, _ = strings.Cut(rhs, " ")
		}
		e.SHA256, e.Notes = get("sha256"), get("notes")
		out = append(out, e)
	}
	if err := sc.Err(); err != nil {
		return nil, err
	}
	return out, nil
}
