package matrixio

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"runtime/metrics"
	"strconv"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// benchFile returns a Matrix Market file of the 7-point 3D Poisson matrix on
// an n³ grid, written as its lower triangle (symmetric). The file goes to
// $RESIDUA_BENCH_DIR when that is set and is kept there, so that a second
// run (for instance under /usr/bin/time -v) only reads; otherwise to the
// benchmark's temporary folder.
func benchFile(b *testing.B, n int) string {
	b.Helper()
	dir := os.Getenv("RESIDUA_BENCH_DIR")
	if dir == "" {
		dir = b.TempDir()
	}
	path := filepath.Join(dir, fmt.Sprintf("poisson3d-%d.mtx", n))
	if _, err := os.Stat(path); err == nil {
		return path
	}
	a := stencil.Poisson3D(n)
	if err := WriteMatrixFile(path, a, sparse.Symmetric); err != nil {
		b.Fatal(err)
	}
	return path
}

// cpuTime returns the processor time (user and system) the process has used.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// heapSampler records the largest heap (bytes in live and not yet swept
// objects, runtime/metrics "/memory/classes/heap/objects:bytes") seen while
// it runs, sampling every millisecond.
type heapSampler struct {
	stop chan struct{}
	wg   sync.WaitGroup
	peak uint64
}

const heapMetric = "/memory/classes/heap/objects:bytes"

func heapNow() uint64 {
	s := []metrics.Sample{{Name: heapMetric}}
	metrics.Read(s)
	return s[0].Value.Uint64()
}

func startHeapSampler() *heapSampler {
	h := &heapSampler{stop: make(chan struct{}), peak: heapNow()}
	h.wg.Add(1)
	go func() {
		defer h.wg.Done()
		t := time.NewTicker(time.Millisecond)
		defer t.Stop()
		for {
			select {
			case <-h.stop:
				return
			case <-t.C:
				h.peak = max(h.peak, heapNow())
			}
		}
	}()
	return h
}

func (h *heapSampler) finish() uint64 {
	close(h.stop)
	h.wg.Wait()
	return max(h.peak, heapNow())
}

// BenchmarkReadPoisson3D reads the 7-point Poisson matrix from a plain file
// (n = 150: 3.4·10⁶ rows, 243 MB of text, a 309 MB CSR) and from an
// in-memory stream. It reports MB/s of text, MB per second of processor time
// (user and system, all threads: what the read costs whatever share of a
// busy machine it got), and the peak heap growth during the read over the
// size of the resulting CSR ("peak/CSR"; the target is at most 1.5).
// The heap is sampled every millisecond, so a shorter peak may be missed;
// the resident-set peak of a process that only reads is the cross-check:
//
//	RESIDUA_BENCH_DIR=/tmp go test ./matrixio -run='^$' -bench=ReadPoisson3D -benchtime=3x
//	go test -c -o /tmp/mio.test ./matrixio
//	RESIDUA_BENCH_DIR=/tmp /usr/bin/time -v /tmp/mio.test -test.run='^$' -test.bench=ReadPoisson3D/file -test.benchtime=1x
//
// (the first command writes /tmp/poisson3d-150.mtx, so the last one only
// reads it; compare "Maximum resident set size" with the CSR's 309 MB).
// RESIDUA_BENCH_N sets another grid size.
func BenchmarkReadPoisson3D(b *testing.B) {
	n := 150
	if s := os.Getenv("RESIDUA_BENCH_N"); s != "" {
		var err error
		if n, err = strconv.Atoi(s); err != nil {
			b.Fatal(err)
		}
	}
	path := benchFile(b, n)
	st, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	b.Run(fmt.Sprintf("file/n=%d", n), func(b *testing.B) {
		b.SetBytes(st.Size())
		b.ReportAllocs()
		var ratio float64
		var cpu time.Duration
		for b.Loop() {
			runtime.GC()
			base := heapNow()
			h := startHeapSampler()
			c0 := cpuTime()
			a, _, err := ReadMatrixFile(path, nil)
			cpu += cpuTime() - c0
			peak := h.finish()
			if err != nil {
				b.Fatal(err)
			}
			ratio = max(ratio, float64(peak-base)/float64(a.Bytes()))
		}
		b.ReportMetric(ratio, "peak/CSR")
		// Text per second of processor time (user and system, all threads):
		// what the read costs, whatever share of the machine it got.
		b.ReportMetric(float64(st.Size())/1e6/(cpu.Seconds()/float64(b.N)), "MB/cpu-s")
	})
	b.Run(fmt.Sprintf("stream/n=%d", n), func(b *testing.B) {
		text, err := os.ReadFile(path)
		if err != nil {
			b.Fatal(err)
		}
		b.SetBytes(int64(len(text)))
		b.ReportAllocs()
		var cpu time.Duration
		for b.Loop() {
			c0 := cpuTime()
			if _, _, err := ReadMatrix(bytes.NewReader(text), nil); err != nil {
				b.Fatal(err)
			}
			cpu += cpuTime() - c0
		}
		b.ReportMetric(float64(len(text))/1e6/(cpu.Seconds()/float64(b.N)), "MB/cpu-s")
	})
}
