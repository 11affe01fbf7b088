package api

import (
	"fmt"
	"io"
	"log/slog"
	"path/filepath"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

// BenchmarkReopenDataDir reopens a data folder of 100 stored matrices (3D
// Poisson of side 30, 2.1 MB each as a csrfile) and 1000 finished jobs
// (each with a result and a 300-row history in the job store): the whole
// start-up of a server on the folder (NewServer and the restoration of the
// jobs Serve does first). Matrices are loaded lazily, so it should take a
// small fraction of a second whatever their sizes.
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
	js, err := openJobStore(dir, time.Second, log)
	if err != nil {
		b.Fatal(err)
	}
	info, _ := proto.Marshal(&pb.Job{Method: "cg", RhsCount: 1, Detached: true})
	res, _ := proto.Marshal(&pb.SolveResult{Status: "converged", Iterations: 300, Headline: "converged in 300 iterations"})
	rows := make([]krylov.Progress, 300)
	for i := range rows {
		rows[i] = krylov.Progress{Iteration: i, ResidualNorm: 1 / float64(i+1)}
	}
	t0 := time.Now()
	for k := range 1000 {
		id := fmt.Sprintf("j%015d", k)
		rec := &jobRecord{ID: id, Created: t0.Add(time.Duration(k)), Info: info, Detached: true, Keep: true,
			Done: true, Outcome: "converged", Finished: t0, Results: [][]byte{res}}
		if err := js.put(rec); err != nil {
			b.Fatal(err)
		}
		if err := js.putHistory(id, 0, rows); err != nil {
			b.Fatal(err)
		}
	}
	js.close()
	for b.Loop() {
		s, err := NewServer(Config{DataDir: dir, Logger: log})
		if err != nil {
			b.Fatal(err)
		}
		s.restoreJobs()
		if n := len(s.jobs.Jobs()); n != 1000 || len(s.data.files) != 100 {
			b.Fatalf("%d jobs, %d matrices", n, len(s.data.files))
		}
		s.jobsDB.close()
	}
}
