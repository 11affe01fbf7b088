package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestInspectMostlyEmpty: a matrix whose size line leaves more than half
// of its rows empty is refused, naming the flag (exit 2); with
// --allow-mostly-empty it is read, and inspect says how many rows and
// columns hold no entry (a 6×6 with entries in rows 1 and 2 and columns 1
// and 3: 4 empty rows, 4 empty columns, counted by hand).
func TestInspectMostlyEmpty(t *testing.T) {
	path := filepath.Join(t.TempDir(), "hollow.mtx")
	text := "%%MatrixMarket matrix coordinate real general\n6 6 2\n1 1 1\n2 3 1\n"
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	_, stderr, code := runCLI(t, "inspect", path)
	if code != exitUsage || !strings.Contains(stderr, "--allow-mostly-empty") || !strings.Contains(stderr, "empty rows are legal") {
		t.Errorf("inspect without the flag: exit %d, stderr %q", code, stderr)
	}
	_, stderr, code = runCLI(t, "solve", path, "--json", "--quiet")
	if code != exitUsage || !strings.Contains(stderr, "--allow-mostly-empty") {
		t.Errorf("solve without the flag: exit %d, stderr %q", code, stderr)
	}
	stdout, stderr, code := runCLI(t, "inspect", "--allow-mostly-empty", path)
	if code != 0 || !strings.Contains(stdout, "4 rows and 4 columns hold no entry") {
		t.Errorf("inspect with the flag: exit %d, stdout %q, stderr %q", code, stdout, stderr)
	}
	stdout, _, _ = runCLI(t, "inspect", "--json", "--allow-mostly-empty", path)
	var in struct {
		EmptyCols   int  `json:"empty_cols"`
		MostlyEmpty bool `json:"mostly_empty"`
		RowLength   struct {
			Empty int `json:"empty"`
		} `json:"row_length"`
	}
	if err := json.Unmarshal([]byte(stdout), &in); err != nil {
		t.Fatal(err)
	}
	if in.EmptyCols != 4 || in.RowLength.Empty != 4 || !in.MostlyEmpty {
		t.Errorf("inspect --json: %+v, want 4 empty columns, 4 empty rows, mostly_empty", in)
	}
}
