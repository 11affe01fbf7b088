package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"
)

func readDir(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range ents {
		names = append(names, e.Name())
	}
	return names
}

func TestWrite(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "x.mtx")
	if err := os.WriteFile(path, []byte("old"), 0o600); err != nil {
		t.Fatal(err)
	}

	// A failing writer leaves the old file and no temporary file behind.
	boom := errors.New("boom")
	err := Write(path, func(w io.Writer) error {
		io.WriteString(w, "half")
		return boom
	})
	if !errors.Is(err, boom) {
		t.Fatalf("Write = %v, want %v", err, boom)
	}
	if got, _ := os.ReadFile(path); string(got) != "old" {
		t.Errorf("after a failed write the file holds %q, want the old contents", got)
	}
	if names := readDir(t, dir); len(names) != 1 {
		t.Errorf("after a failed write the folder holds %q, want only x.mtx", names)
	}

	// A successful one replaces it whole, readable by all.
	if err := Write(path, func(w io.Writer) error { _, err := io.WriteString(w, "new"); return err }); err != nil {
		t.Fatal(err)
	}
	if got, _ := os.ReadFile(path); string(got) != "new" {
		t.Errorf("file holds %q, want %q", got, "new")
	}
	if fi, err := os.Stat(path); err != nil || fi.Mode().Perm() != 0o644 {
		t.Errorf("mode %v (%v), want 0644", fi.Mode().Perm(), err)
	}
	if names := readDir(t, dir); len(names) != 1 {
		t.Errorf("folder holds %q, want only x.mtx", names)
	}
}

func TestAbortAndCommitOnce(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "h.csv")
	f, err := Create(path)
	if err != nil {
		t.Fatal(err)
	}
	io.WriteString(f, "rows")
	f.Abort()
	f.Abort() // a second Abort is harmless
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Errorf("after Abort, Stat = %v, want not-exist", err)
	}
	if names := readDir(t, dir); len(names) != 0 {
		t.Errorf("after Abort the folder holds %q", names)
	}
	if err := f.Commit(); err == nil {
		t.Error("Commit after Abort succeeded")
	}

	// A destination folder that does not exist is an error at Create.
	if _, err := Create(filepath.Join(dir, "no", "such", "x")); err == nil {
		t.Error("Create in a missing folder succeeded")
	}
}

// TestRemoveTemps: a writer that never commits (a killed process) leaves a
// temporary file that IsTemp recognises and RemoveTemps sweeps, and
// nothing else is touched.
func TestRemoveTemps(t *testing.T) {
	dir := t.TempDir()
	keep := filepath.Join(dir, "m.csr")
	if err := WriteDurable(keep, func(w io.Writer) error { _, err := w.Write([]byte("kept")); return err }); err != nil {
		t.Fatal(err)
	}
	f, err := Create(filepath.Join(dir, "n.csr"))
	if err != nil {
		t.Fatal(err)
	}
	f.Write([]byte("torn"))
	f.tmp.Close() // as a killed process would: no Commit, no Abort
	gone, err := RemoveTemps(dir)
	if err != nil || len(gone) != 1 || !IsTemp(gone[0]) {
		t.Fatalf("RemoveTemps: %v, %v", gone, err)
	}
	if names := readDir(t, dir); len(names) != 1 || names[0] != "m.csr" {
		t.Fatalf("left %v, want only m.csr", names)
	}
	if IsTemp("m.csr") || IsTemp(".hidden") {
		t.Error("IsTemp took a plain file for a temporary one")
	}
}
