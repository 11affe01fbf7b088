package checkpoint

import (
	"context"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
)

// BenchmarkWrite compares writing the checkpoint of a 10⁷-unknown CG state
// (x, r, p: 240 MB) with writing the same number of bytes straight to a
// file and fsyncing it, in the same run and folder: the checkpoint's
// encoding and checksums should cost little beside the disk.
//
//	go test -run '^$' -bench 'Write' -benchtime 3x ./checkpoint
func BenchmarkWrite(b *testing.B) {
	const n = 10_000_000
	rng := rand.New(rand.NewPCG(1, 2))
	vec := func() []float64 {
		v := make([]float64, n)
		for i := range v {
			v[i] = rng.NormFloat64()
		}
		return v
	}
	f := &File{MatrixID: "m", RHSID: "b", Request: solve.Request{Method: solve.CG}, Written: time.Now(),
		History: make([]krylov.Progress, 1000),
		State: &krylov.State{Method: "cg", Rows: n, Cols: n, Scalars: make([]float64, 7), Ints: make([]int, 4),
			Vectors: [][]float64{vec(), vec(), vec(), make([]float64, 1000), make([]float64, 1000)}},
	}
	dir := b.TempDir()
	path := filepath.Join(dir, "state.ck")
	if err := Write(path, f); err != nil {
		b.Fatal(err)
	}
	st, _ := os.Stat(path)
	size := st.Size()
	b.Run("checkpoint", func(b *testing.B) {
		b.SetBytes(size)
		for b.Loop() {
			if err := Write(path, f); err != nil {
				b.Fatal(err)
			}
		}
	})
	raw := make([]byte, size)
	for i := range raw {
		raw[i] = byte(i * 7)
	}
	b.Run("raw", func(b *testing.B) {
		b.SetBytes(size)
		for b.Loop() {
			fh, err := os.Create(filepath.Join(dir, "raw"))
			if err != nil {
				b.Fatal(err)
			}
			if _, err := fh.Write(raw); err != nil {
				b.Fatal(err)
			}
			if err := fh.Sync(); err != nil {
				b.Fatal(err)
			}
			fh.Close()
		}
	})
}

// BenchmarkCGOverhead runs CG on the 3D Poisson problem of side 160 (4.1·10⁶
// unknowns) without checkpoints and with one every 30 s written to disk,
// in the same process, and reports the ratio of the solve times. Run it
// once: each solve takes about a minute on the 2-core machine.
//
//	go test -run '^$' -bench 'CGOverhead' -benchtime 1x -timeout 30m ./checkpoint
func BenchmarkCGOverhead(b *testing.B) {
	a := stencil.Poisson3D(160)
	rhs := stencil.Ones(a)
	x := make([]float64, a.Rows)
	path := filepath.Join(b.TempDir(), "state.ck")
	run := func(ck *krylov.Checkpoint) (time.Duration, int) {
		start := time.Now()
		res, err := krylov.CG(context.Background(), a, rhs, x, nil, krylov.Settings{Checkpoint: ck})
		if err != nil || res.Status != krylov.Converged {
			b.Fatalf("%v %v", res.Status, err)
		}
		return time.Since(start), res.Iterations
	}
	for b.Loop() {
		plain, it := run(nil)
		saves := 0
		var saving time.Duration
		withCk, _ := run(&krylov.Checkpoint{Every: 30 * time.Second, Save: func(s *krylov.State) error {
			t0 := time.Now()
			err := Write(path, &File{MatrixID: "m", RHSID: "b", Written: t0, State: s})
			saving += time.Since(t0)
			saves++
			return err
		}})
		b.ReportMetric(plain.Seconds(), "s-plain")
		b.ReportMetric(withCk.Seconds(), "s-checkpointed")
		b.ReportMetric(float64(saves), "checkpoints")
		b.ReportMetric(saving.Seconds(), "s-saving")
		b.ReportMetric(withCk.Seconds()/plain.Seconds(), "ratio")
		b.ReportMetric(float64(it), "iterations")
	}
}
