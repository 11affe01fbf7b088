package api

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/internal/atomicfile"
	pb "github.com/residua/residua/proto/residua/v1"
)

// Uploaded vectors in the data folder: DIR/vectors/ID.vec, a csrfile
// vector whose header's Meta is the pb.VectorInfo, written before the
// upload's reply and read back (checksums and id verified) when a job
// names the vector and it is not in memory. They share the disk budget and
// its eviction rule with the matrices.

func (d *dataDir) vpath(id string) string { return filepath.Join(d.vectors, id+".vec") }

// openVectors sweeps partial writes and lists the stored vectors, as
// openDataDir does the matrices.
func (d *dataDir) openVectors() error {
	gone, err := atomicfile.RemoveTemps(d.vectors)
	if err != nil {
		return fmt.Errorf("api: data folder: %w", err)
	}
	for _, name := range gone {
		d.log.Warn("data folder: removed a partial write", "file", filepath.Join(d.vectors, name))
	}
	ents, err := os.ReadDir(d.vectors)
	if err != nil {
		return fmt.Errorf("api: data folder: %w", err)
	}
	for _, e := range ents {
		path := filepath.Join(d.vectors, e.Name())
		id, ok := strings.CutSuffix(e.Name(), ".vec")
		if !e.Type().IsRegular() || !ok {
			d.quarantineFile(path, "not a stored vector's name (ID.vec)")
			continue
		}
		h, err := csrfile.ReadHeader(path)
		if err != nil {
			d.quarantineFile(path, err.Error())
			continue
		}
		info := &pb.VectorInfo{}
		if h.Kind != csrfile.Vector || h.ID != id || proto.Unmarshal(h.Meta, info) != nil || info.GetId() != id {
			d.quarantineFile(path, "not the vector its name says")
			continue
		}
		mt := time.Time{}
		if fi, err := e.Info(); err == nil {
			mt = fi.ModTime()
		}
		d.files["v:"+id] = &diskFile{id: id, bytes: h.Size, vinfo: info, lastUse: mt}
		d.used += h.Size
	}
	return nil
}

// putVector stores x under its id unless it is there, under the budget's
// rules (see put).
func (d *dataDir) putVector(x []float64, info *pb.VectorInfo) error {
	raw, err := proto.Marshal(info)
	if err != nil {
		return err
	}
	id := info.GetId()
	size := csrfile.Bytes(csrfile.Vector, len(x), len(x), id, raw)
	_, err = d.storeFile("v:"+id, &diskFile{id: id, bytes: size, vinfo: info}, "vector", info.GetName(), func() error {
		_, err := csrfile.WriteVector(d.vpath(id), x, id, raw)
		return err
	})
	return err
}

// loadVector brings a stored vector into memory for a job, pinned, or is
// ErrNotFound (a damaged file is quarantined and the error says so).
func (s *Server) loadVector(id, what string) (*item, *pin, error) {
	missing := notFoundf("%s: no vector %q (upload it first; it may have been evicted)", what, id)
	if s.data == nil || !validID(id) {
		return nil, nil, missing
	}
	d := s.data
	d.mu.Lock()
	f, ok := d.files["v:"+id]
	if ok {
		f.lastUse = time.Now()
	}
	d.mu.Unlock()
	if !ok {
		return nil, nil, missing
	}
	x, _, err := csrfile.ReadVector(d.vpath(id))
	if err != nil {
		d.mu.Lock()
		if d.files["v:"+id] == f {
			delete(d.files, "v:"+id)
			d.used -= f.bytes
		}
		d.mu.Unlock()
		d.quarantineFile(d.vpath(id), err.Error())
		return nil, nil, notFoundf("%s: vector %s was damaged on disk and has been quarantined (upload it again): %v", what, id, err)
	}
	if err := s.store.reserve(8*int64(len(x)), "vector "+f.vinfo.GetName()); err != nil {
		return nil, nil, err
	}
	it, pn, _ := s.store.insert(key{kind: kindVector, id: id}, 8*int64(len(x)), true, &vectorEntry{x: x, info: f.vinfo}, nil)
	return it, pn, nil
}
