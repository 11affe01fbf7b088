package api

import (
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"syscall"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/internal/atomicfile"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/wire"
)

// DefaultDiskBudget is the default of Config.DiskBudget.
const DefaultDiskBudget = 64 << 30

// dataDir is the server's data folder (Config.DataDir): every uploaded
// matrix as a csrfile named by its id, written before the upload's reply,
// so that a reply means the matrix survives a crash. Layout:
//
//	DIR/matrices/ID.csr   one matrix (package csrfile; its header's Meta is
//	                      the pb.Matrix description)
//	DIR/quarantine/       files found damaged, moved aside with a log line
//
// Files are accounted against a disk budget with the memory store's rule:
// to make room the least recently used are deleted first, never one that a
// queued or running job holds (pinned in the memory store). Start-up reads
// only the headers (so reopening is quick whatever the sizes); a matrix's
// arrays are read, and every checksum and its id verified, on its first
// use.
type dataDir struct {
	root, matrices, vectors, quarantine string
	budget                              int64
	log                                 *slog.Logger
	// inUse reports whether a queued or running job holds the matrix or
	// vector.
	inUse func(k key) bool

	mu       sync.Mutex // guards files, jobFiles and used
	files    map[string]*diskFile
	jobFiles map[string]int64 // path → bytes of the job files (see reserveFile)
	used     int64
}

// diskFile is one stored matrix or vector on disk. Vectors are keyed
// "v:ID" in dataDir.files, matrices by their id.
type diskFile struct {
	id      string
	bytes   int64
	info    *pb.Matrix // a matrix's description, from the header's Meta
	vinfo   *pb.VectorInfo
	lastUse time.Time
}

func (f *diskFile) key() key {
	if f.vinfo != nil {
		return key{kind: kindVector, id: f.id}
	}
	return key{kind: kindMatrix, id: f.id}
}

// openDataDir opens (creating it when absent) the data folder at root: it
// removes the temporary files a killed writer left, lists the stored
// matrices by their headers, and quarantines every file whose header is
// damaged, whose name is not its id, or which is not a matrix, with a log
// line naming it and why.
func openDataDir(root string, budget int64, log *slog.Logger, inUse func(key) bool) (*dataDir, error) {
	start := time.Now()
	d := &dataDir{
		root: root, matrices: filepath.Join(root, "matrices"), vectors: filepath.Join(root, "vectors"),
		quarantine: filepath.Join(root, "quarantine"),
		budget:     budget, log: log, inUse: inUse, files: make(map[string]*diskFile),
		jobFiles: make(map[string]int64),
	}
	for _, dir := range []string{d.matrices, d.vectors, d.quarantine} {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return nil, fmt.Errorf("api: data folder: %w", err)
		}
	}
	gone, err := atomicfile.RemoveTemps(d.matrices)
	if err != nil {
		return nil, fmt.Errorf("api: data folder: %w", err)
	}
	for _, name := range gone {
		log.Warn("data folder: removed a partial write", "file", filepath.Join(d.matrices, name))
	}
	ents, err := os.ReadDir(d.matrices)
	if err != nil {
		return nil, fmt.Errorf("api: data folder: %w", err)
	}
	for _, e := range ents {
		path := filepath.Join(d.matrices, e.Name())
		id, ok := strings.CutSuffix(e.Name(), ".csr")
		if !e.Type().IsRegular() || !ok {
			d.quarantineFile(path, "not a stored matrix's name (ID.csr)")
			continue
		}
		h, err := csrfile.ReadHeader(path)
		if err != nil {
			d.quarantineFile(path, err.Error())
			continue
		}
		info := &pb.Matrix{}
		switch {
		case h.Kind != csrfile.Matrix:
			d.quarantineFile(path, "holds a "+h.Kind.String()+", not a matrix")
			continue
		case h.ID != id:
			d.quarantineFile(path, "its header names matrix "+h.ID)
			continue
		case proto.Unmarshal(h.Meta, info) != nil || info.GetId() != id:
			d.quarantineFile(path, "its description does not decode or names another matrix")
			continue
		}
		mt := time.Time{}
		if fi, err := e.Info(); err == nil {
			mt = fi.ModTime()
		}
		d.files[id] = &diskFile{id: id, bytes: h.Size, info: info, lastUse: mt}
		d.used += h.Size
	}
	if err := d.openVectors(); err != nil {
		return nil, err
	}
	d.countJobFiles(filepath.Join(root, "jobs"))
	log.Info("data folder opened", "folder", root, "files", len(d.files), "bytes", d.used,
		"disk_budget_bytes", budget, "duration", time.Since(start).String())
	return d, nil
}

// quarantineFile moves a damaged file aside, logging its name and why; it
// is never served again.
func (d *dataDir) quarantineFile(path, why string) {
	dst := filepath.Join(d.quarantine, fmt.Sprintf("%s.%d", filepath.Base(path), time.Now().UnixNano()))
	if err := os.Rename(path, dst); err != nil {
		d.log.Error("data folder: damaged file could not be moved aside", "file", path, "reason", why, "error", err.Error())
		return
	}
	d.log.Warn("data folder: quarantined a damaged file", "file", path, "moved_to", dst, "reason", why)
}

func (d *dataDir) path(id string) string { return filepath.Join(d.matrices, id+".csr") }

// validID reports whether id can name a file: a matrix id is lowercase hex.
func validID(id string) bool {
	if id == "" || len(id) > 128 {
		return false
	}
	for _, c := range id {
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'f') {
			return false
		}
	}
	return true
}

// put stores a under id (its info without the per-upload fields) unless it
// is there already, making room in the disk budget first. A budget that
// cannot make room, or a full disk, is ErrLimit with the figures; a failed
// write leaves nothing behind (atomicfile).
func (d *dataDir) put(id string, a *sparse.CSR, info *pb.Matrix) error {
	meta := proto.Clone(info).(*pb.Matrix)
	meta.AlreadyStored, meta.UploadSeconds, meta.UploadBytes, meta.JobsUsing = false, 0, 0, 0
	raw, err := proto.Marshal(meta)
	if err != nil {
		return err
	}
	size := csrfile.Bytes(csrfile.Matrix, a.Rows, a.NNZ(), id, raw)
	f := &diskFile{id: id, bytes: size, info: meta}
	stored, err := d.storeFile(id, f, "matrix", info.GetName(), func() error {
		_, err := csrfile.WriteMatrix(d.path(id), a, id, raw)
		return err
	})
	if err != nil || !stored {
		return err
	}
	d.log.Info("data folder: matrix stored", "matrix", id, "bytes", size)
	return nil
}

// storeFile adds f (its bytes set) to the folder under key unless key is
// held already (then only its use time is refreshed, and stored is false):
// it makes room in the budget, reserves the bytes before write runs so
// that concurrent uploads cannot take the same room, and gives them back
// if write fails. A full disk is ErrLimit with the figures; kind and name
// ("matrix", its upload name) go into the messages.
func (d *dataDir) storeFile(key string, f *diskFile, kind, name string, write func() error) (stored bool, err error) {
	d.mu.Lock()
	if old, ok := d.files[key]; ok {
		old.lastUse = time.Now()
		d.mu.Unlock()
		return false, nil
	}
	if err := d.makeRoomLocked(f.bytes, kind+" "+name); err != nil {
		d.mu.Unlock()
		return false, err
	}
	d.used += f.bytes
	d.mu.Unlock()
	if err := write(); err != nil {
		d.mu.Lock()
		d.used -= f.bytes
		d.mu.Unlock()
		if errors.Is(err, syscall.ENOSPC) || errors.Is(err, syscall.EDQUOT) {
			return false, limitf("the data folder's disk is full: %s %s needs %s; the folder holds %s of its %s budget (%v)",
				kind, name, human(f.bytes), human(d.usedBytes()), human(d.budget), err)
		}
		return false, fmt.Errorf("storing %s %s in the data folder: %w", kind, f.id, err)
	}
	f.lastUse = time.Now()
	d.mu.Lock()
	d.files[key] = f
	d.mu.Unlock()
	return true, nil
}

func (d *dataDir) usedBytes() int64 {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.used
}

// makeRoomLocked deletes idle files, least recently used first, until n
// more bytes fit in the budget, or fails with the figures, deleting
// nothing, when the files that queued or running jobs hold leave no room.
// d.mu must be held.
func (d *dataDir) makeRoomLocked(n int64, what string) error {
	if d.used+n <= d.budget {
		return nil
	}
	if n > d.budget {
		return limitf("%s needs %s on disk, more than the data folder's disk budget of %s", what, human(n), human(d.budget))
	}
	var idle []*diskFile
	var idleBytes int64
	for _, f := range d.files {
		if !d.inUse(f.key()) {
			idle = append(idle, f)
			idleBytes += f.bytes
		}
	}
	if d.used-idleBytes+n > d.budget {
		return limitf("%s needs %s on disk, but %s of the %s disk budget holds matrices of queued or running jobs",
			what, human(n), human(d.used-idleBytes), human(d.budget))
	}
	sort.Slice(idle, func(i, j int) bool { return idle[i].lastUse.Before(idle[j].lastUse) })
	for _, f := range idle {
		if d.used+n <= d.budget {
			break
		}
		path, mapKey, what := d.path(f.id), f.id, "matrix"
		if f.vinfo != nil {
			path, mapKey, what = d.vpath(f.id), "v:"+f.id, "vector"
		}
		if err := os.Remove(path); err != nil && !errors.Is(err, os.ErrNotExist) {
			return fmt.Errorf("data folder: evicting %s %s: %w", what, f.id, err)
		}
		delete(d.files, mapKey)
		d.used -= f.bytes
		d.log.Info("data folder: "+what+" evicted", what, f.id, "bytes", f.bytes, "last_use", f.lastUse.Format(time.RFC3339))
	}
	return nil
}

// has reports whether id is stored, and marks it used.
func (d *dataDir) has(id string) bool {
	d.mu.Lock()
	defer d.mu.Unlock()
	f, ok := d.files[id]
	if ok {
		f.lastUse = time.Now()
	}
	return ok
}

// read reads the matrix id, verifying every checksum and the id. A damaged
// file is quarantined and forgotten, and the error says so.
func (d *dataDir) read(id string) (*sparse.CSR, *pb.Matrix, error) {
	d.mu.Lock()
	f, ok := d.files[id]
	d.mu.Unlock()
	if !ok {
		return nil, nil, notFoundf("no matrix %q", id)
	}
	a, _, err := csrfile.ReadMatrix(d.path(id))
	if err != nil {
		d.mu.Lock()
		if d.files[id] == f {
			delete(d.files, id)
			d.used -= f.bytes
		}
		d.mu.Unlock()
		d.quarantineFile(d.path(id), err.Error())
		return nil, nil, notFoundf("matrix %s was damaged on disk and has been quarantined (upload it again): %v", id, err)
	}
	return a, proto.Clone(f.info).(*pb.Matrix), nil
}

// remove deletes the stored matrix id (DeleteMatrix), reporting the bytes
// freed on disk.
func (d *dataDir) remove(id string) (int64, bool) {
	d.mu.Lock()
	defer d.mu.Unlock()
	f, ok := d.files[id]
	if !ok {
		return 0, false
	}
	if err := os.Remove(d.path(id)); err != nil && !errors.Is(err, os.ErrNotExist) {
		d.log.Error("data folder: deleting a matrix", "matrix", id, "error", err.Error())
		return 0, true
	}
	delete(d.files, id)
	d.used -= f.bytes
	return f.bytes, true
}

// list returns the descriptions of the stored matrices, most recently used
// first.
func (d *dataDir) list() []*pb.Matrix {
	d.mu.Lock()
	fs := make([]*diskFile, 0, len(d.files))
	for _, f := range d.files {
		if f.info != nil {
			fs = append(fs, f)
		}
	}
	d.mu.Unlock()
	sort.Slice(fs, func(i, j int) bool { return fs[i].lastUse.After(fs[j].lastUse) })
	out := make([]*pb.Matrix, len(fs))
	for i, f := range fs {
		out[i] = proto.Clone(f.info).(*pb.Matrix)
	}
	return out
}

// newMatrixEntry describes a matrix for the store: the inspect report, the
// symmetry verdicts and the sizes. The id is computed beside the report
// when id is "".
func newMatrixEntry(a *sparse.CSR, name, id string, bytes int64) *matrixEntry {
	idc := make(chan string, 1)
	if id == "" {
		// The content hash and the inspect report each read the whole
		// matrix; they run side by side.
		go func() { idc <- wire.MatrixID(a) }()
	} else {
		idc <- id
	}
	e := &matrixEntry{a: a}
	e.info = &pb.Matrix{
		Name: name,
		Rows: int64(a.Rows), Cols: int64(a.Cols), Nonzeros: int64(a.NNZ()),
		Symmetry: "general", Bytes: bytes,
	}
	e.info.InspectJson, e.symmetric, e.exactSym, e.asymmetry = inspect(a)
	if e.symmetric {
		e.info.Symmetry = "symmetric"
	}
	e.info.Id = <-idc
	return e
}

// loadStored brings a matrix of the data folder into memory for a job and
// returns its store item pinned: the arrays are read and checked (a
// damaged file is quarantined), memory is reserved under the budget's
// rules, and the entry is described as at upload. Without a data folder,
// or when the matrix is not there, it is ErrNotFound.
func (s *Server) loadStored(id string) (*item, *pin, error) {
	if s.data == nil || !validID(id) || !s.data.has(id) {
		return nil, nil, notFoundf("no matrix %q (upload it first; it may have been evicted or deleted)", id)
	}
	start := time.Now()
	a, info, err := s.data.read(id)
	if err != nil {
		s.log.Warn("data folder: matrix unreadable", "matrix", id, "error", err.Error())
		return nil, nil, err
	}
	n := wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))
	if err := s.store.reserve(n, "matrix "+info.GetName()); err != nil {
		return nil, nil, err
	}
	e := newMatrixEntry(a, info.GetName(), id, n)
	it, pn, _ := s.store.insert(key{kind: kindMatrix, id: id}, n, true, e, func() { s.matrixEvicted(id) })
	s.log.Info("data folder: matrix loaded", "matrix", id, "bytes", n, "duration", time.Since(start).String())
	return it, pn, nil
}

// inUse reports whether a queued or running job holds the matrix or
// vector (a pin on its memory item): the data folder never evicts those.
func (s *Server) inUse(k key) bool {
	for _, e := range s.store.snapshot(func(o key) bool { return o == k }) {
		return e.pins > 0
	}
	return false
}

// The job files (checkpoints and kept solutions, jobstore.go) count
// against the same disk budget: a write reserves its size first, making
// room by evicting idle matrices and vectors, and a file that cannot fit
// is not written (the job goes on; a log line says so). They are not
// evicted themselves: checkpoints go when their right-hand side ends,
// solutions when their job is forgotten.

// reserveFile accounts for the file at path taking size bytes (replacing
// what it took before).
func (d *dataDir) reserveFile(path string, size int64, what string) error {
	d.mu.Lock()
	defer d.mu.Unlock()
	delta := size - d.jobFiles[path]
	if delta > 0 {
		if err := d.makeRoomLocked(delta, what); err != nil {
			return err
		}
	}
	d.used += delta
	d.jobFiles[path] = size
	return nil
}

// releaseFile removes path and its accounting.
func (d *dataDir) releaseFile(path string) {
	os.Remove(path)
	d.mu.Lock()
	d.used -= d.jobFiles[path]
	delete(d.jobFiles, path)
	d.mu.Unlock()
}

// countJobFiles accounts for the job files found at start-up (temporary
// ones are swept by the job store).
func (d *dataDir) countJobFiles(dir string) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return
	}
	for _, e := range ents {
		if fi, err := e.Info(); err == nil && e.Type().IsRegular() && !atomicfile.IsTemp(e.Name()) {
			path := filepath.Join(dir, e.Name())
			d.jobFiles[path] = fi.Size()
			d.used += fi.Size()
		}
	}
}
