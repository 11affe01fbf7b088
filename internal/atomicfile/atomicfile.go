// Package atomicfile writes files so that a reader, or a run interrupted at
// any point, sees either the old file or the complete new one, never a part:
// the bytes go to a temporary file in the destination's folder, which is
// flushed to disk and then renamed over the destination. Every file residua
// writes (solutions, generated matrices, histories, pictures) goes through
// it.
package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
)

// File is a file being written atomically. Write to it, then Commit to put
// it in place or Abort to throw it away. A File is not safe for concurrent
// use.
type File struct {
	tmp  *os.File
	path string
	done bool
}

// Create starts writing path. Nothing appears under path until Commit.
func Create(path string) (*File, error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	tmp, err := os.CreateTemp(dir, "."+base+tempMark+"*")
	if err != nil {
		return nil, err
	}
	return &File{tmp: tmp, path: path}, nil
}

// Write writes to the temporary file.
func (f *File) Write(p []byte) (int, error) { return f.tmp.Write(p) }

// Commit makes the file readable by all (mode 0644), syncs it to disk,
// closes it and renames it over the destination, then syncs the folder so
// the rename itself is durable where the system allows (a failure there is
// ignored: the file is complete either way). On any error the temporary
// file is removed and the destination is left as it was.
func (f *File) Commit() error {
	if f.done {
		return errors.New("atomicfile: Commit after Commit or Abort")
	}
	f.done = true
	err := f.tmp.Chmod(0o644)
	if err == nil {
		err = f.tmp.Sync()
	}
	if cerr := f.tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(f.tmp.Name(), f.path)
	}
	if err != nil {
		os.Remove(f.tmp.Name())
		return err
	}
	_ = syncDir(filepath.Dir(f.path))
	return nil
}

// CommitDurable is Commit for files a service promises to keep (stored
// matrices, checkpoints, job solutions): it also reports a failure to sync
// the folder, since until the folder is synced a crash can lose the rename.
// The file is in place even when the folder sync fails.
func (f *File) CommitDurable() error {
	if err := f.Commit(); err != nil {
		return err
	}
	return syncDir(filepath.Dir(f.path))
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}

// tempMark is in the name of every temporary file, between the
// destination's name (after a leading dot) and a random suffix.
const tempMark = ".tmp-"

// IsTemp reports whether name (a base name) is one of this package's
// temporary files, left behind by a process killed before Commit.
func IsTemp(name string) bool {
	return strings.HasPrefix(name, ".") && strings.Contains(name, tempMark)
}

// RemoveTemps removes the temporary files a killed writer left in dir
// (start-up of a data folder calls it) and returns their names. A
// temporary file is never the only copy of anything: the destination was
// either renamed in place (then the temporary file is gone) or not yet.
func RemoveTemps(dir string) ([]string, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, err
	}
	var gone []string
	for _, e := range ents {
		if e.Type().IsRegular() && IsTemp(e.Name()) {
			if err := os.Remove(filepath.Join(dir, e.Name())); err != nil && !errors.Is(err, os.ErrNotExist) {
				return gone, err
			}
			gone = append(gone, e.Name())
		}
	}
	return gone, nil
}

// Abort closes and removes the temporary file, leaving the destination as
// it was. It does nothing after Commit or a previous Abort, so it can be
// deferred.
func (f *File) Abort() {
	if f.done {
		return
	}
	f.done = true
	f.tmp.Close()
	os.Remove(f.tmp.Name())
}

// Write writes path atomically with the bytes that write produces; if write
// fails, nothing changes under path and its error is returned.
func Write(path string, write func(w io.Writer) error) error {
	f, err := Create(path)
	if err != nil {
		return err
	}
	defer f.Abort()
	if err := write(f); err != nil {
		return err
	}
	return f.Commit()
}

// WriteDurable is Write with CommitDurable.
func WriteDurable(path string, write func(w io.Writer) error) error {
	f, err := Create(path)
	if err != nil {
		return err
	}
	defer f.Abort()
	if err := write(f); err != nil {
		return err
	}
	return f.CommitDurable()
}
