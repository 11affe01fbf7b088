package api

import (
	"io"
	"log/slog"
	"path/filepath"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

// BenchmarkReopenDataDir reopens a data folder of 100 stored matrices (3D
// Poisson of side 30, 2.1 MB each as a csrfile): start-up reads only the
// headers, so it should take a small fraction of a second whatever the
// matrices' sizes.
//
//	go test -run '^$' -bench 'ReopenDataDir' -benchtime 5x ./api
func BenchmarkReopenDataDir(b *testing.B) {
	dir := b.TempDir()
	md := filepath.Join(dir, "matrices")
	base := stencil.Poisson3D(30)
	for k := range 100 {
		a := *base
		a.Val = make([]float64, len(base.Val))
		for i, v := range base.Val {
			a.Val[i] = v * (1 + float64(k)/128)
		}
		id := wire.MatrixID(&a)
		meta, _ := proto.Marshal(newMatrixEntry(&a, "m", id, wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))).info)
		if k == 0 {
			if _, err := openDataDir(dir, DefaultDiskBudget, slog.New(slog.NewTextHandler(io.Discard, nil)), func(key) bool { return false }); err != nil {
				b.Fatal(err)
			}
		}
		if _, err := csrfile.WriteMatrix(filepath.Join(md, id+".csr"), &a, id, meta); err != nil {
			b.Fatal(err)
		}
	}
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	for b.Loop() {
		d, err := openDataDir(dir, DefaultDiskBudget, log, func(key) bool { return false })
		if err != nil || len(d.files) != 100 {
			b.Fatalf("%v, %d matrices", err, len(d.files))
		}
	}
}
