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
	tmp, err := os.CreateTemp(dir, "."+base+".tmp-*")
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
	if d, derr := os.Open(filepath.Dir(f.path)); derr == nil {
		_ = d.Sync()
		d.Close()
	}
	return nil
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
