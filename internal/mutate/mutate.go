package mutate

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
)

// Edit is one textual change: Old, which must occur exactly Count times
// (once when Count is 0) in File (slash-separated, relative to the module
// root), is replaced by New everywhere.
type Edit struct {
	File     string
	Old, New string
	Count    int
}

// Mutant is one planted bug.
type Mutant struct {
	Name     string   // short, unique, used by RESIDUA_MUTATE_ONLY
	Bug      string   // what the bug is, in words
	Edits    []Edit   // applied together
	Packages []string // the package patterns whose tests must catch it, e.g. "./krylov"
	Needs    []string // outside tools its killing tests need: "chromium", "shared"
}

// wantCount is the number of occurrences e expects.
func (e Edit) wantCount() int {
	if e.Count == 0 {
		return 1
	}
	return e.Count
}

// Check reports whether every edit of m matches the tree rooted at root as
// often as it should.
func (m Mutant) Check(root string) error {
	for _, e := range m.Edits {
		src, err := os.ReadFile(filepath.Join(root, filepath.FromSlash(e.File)))
		if err != nil {
			return fmt.Errorf("mutant %s: %w", m.Name, err)
		}
		if got := bytes.Count(src, []byte(e.Old)); got != e.wantCount() {
			return fmt.Errorf("mutant %s: %s holds %q %d times, want %d", m.Name, e.File, e.Old, got, e.wantCount())
		}
		if e.Old == e.New {
			return fmt.Errorf("mutant %s: an edit of %s changes nothing", m.Name, e.File)
		}
	}
	return nil
}

// Apply plants m in the tree at root and returns a function that restores
// the files it changed.
func (m Mutant) Apply(root string) (restore func() error, err error) {
	if err := m.Check(root); err != nil {
		return nil, err
	}
	saved := map[string][]byte{}
	restore = func() error {
		var first error
		for path, src := range saved {
			if err := os.WriteFile(path, src, 0o644); err != nil && first == nil {
				first = err
			}
		}
		return first
	}
	for _, e := range m.Edits {
		path := filepath.Join(root, filepath.FromSlash(e.File))
		src, err := os.ReadFile(path)
		if err != nil {
			restore()
			return nil, err
		}
		if _, ok := saved[path]; !ok {
			saved[path] = src
		}
		if err := os.WriteFile(path, bytes.ReplaceAll(src, []byte(e.Old), []byte(e.New)), 0o644); err != nil {
			restore()
			return nil, err
		}
	}
	return restore, nil
}

// ModuleRoot walks up from dir to the folder holding go.mod.
func ModuleRoot(dir string) (string, error) {
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			return dir, nil
		}
		parent := filepath.Dir(dir)
		if parent == dir {
			return "", fmt.Errorf("mutate: no go.mod above %s", dir)
		}
		dir = parent
	}
}

// CopyTree copies the files git knows of in src (tracked, and untracked but
// not ignored, as they are in the working tree) into dst.
func CopyTree(src, dst string) error {
	cmd := exec.Command("git", "ls-files", "-z", "--cached", "--others", "--exclude-standard")
	cmd.Dir = src
	out, err := cmd.Output()
	if err != nil {
		return fmt.Errorf("mutate: listing the tree's files with git: %w", err)
	}
	for _, name := range strings.Split(string(out), "\x00") {
		if name == "" {
			continue
		}
		from := filepath.Join(src, name)
		fi, err := os.Lstat(from)
		if os.IsNotExist(err) {
			continue // deleted in the working tree, not yet in the index
		}
		if err != nil {
			return err
		}
		if !fi.Mode().IsRegular() {
			continue
		}
		to := filepath.Join(dst, name)
		if err := os.MkdirAll(filepath.Dir(to), 0o755); err != nil {
			return err
		}
		if err := copyFile(from, to, fi.Mode().Perm()); err != nil {
			return err
		}
	}
	return nil
}

func copyFile(from, to string, perm os.FileMode) error {
	in, err := os.Open(from)
	if err != nil {
		return err
	}
	defer in.Close()
	out, err := os.OpenFile(to, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, perm)
	if err != nil {
		return err
	}
	if _, err := io.Copy(out, in); err != nil {
		out.Close()
		return err
	}
	return out.Close()
}
