package main

import (
	"context"
	"fmt"
	"os"
	"runtime"
	"strconv"
	"strings"
	"time"

	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

func init() {
	register(&command{
		name:    "bench",
		summary: "measure this machine: sparse matrix-vector product bandwidth over the STREAM triad's",
		run:     runBench,
	})
}

const benchAbout = `
Judges how well this machine suits residua. A Krylov solve on a large
sparse matrix is limited by memory bandwidth, and its main kernel is the
sparse matrix-vector product (SpMV). bench times y = A·x on the 7-point 3D
Poisson matrix of --size³ rows and, alternately in the same run, the STREAM
triad a[i] = b[i] + s·c[i] (McCalpin 1995) on vectors holding the same
number of bytes, then reports each kernel's effective bandwidth and their
ratio.

Bytes counted (the least each kernel must move): SpMV 12 per nonzero (value
and column index) plus 8 per row pointer plus 16 per row (x and y); triad
24 per element. A ratio near 1 means SpMV gets the bandwidth the memory
system gives; figures for problems past the last-level cache (the default
160³ is about 0.4 GB) are the ones that predict large solves. Uses
GOMAXPROCS workers.`

// benchResult is bench's JSON object.
type benchResult struct {
	Size          int       `json:"size"`
	Rows          int       `json:"rows"`
	Nonzeros      int       `json:"nonzeros"`
	Workers       int       `json:"workers"`
	Repeats       int       `json:"repeats"`
	SpMVBytes     int64     `json:"spmv_bytes"`
	SpMVSeconds   solve.Num `json:"spmv_seconds"`  // per product, mean over the repeats
	SpMVGBs       solve.Num `json:"spmv_gb_per_s"` // 10⁹ bytes per second
	TriadBytes    int64     `json:"triad_bytes"`
	TriadSeconds  solve.Num `json:"triad_seconds"`
	TriadGBs      solve.Num `json:"triad_gb_per_s"`
	SpMVOverTriad solve.Num `json:"spmv_over_triad"`
}

func runBench(ctx context.Context, e *env, args []string) error {
	f := newFlags("bench", "residua bench [--size N] [--repeat K] [--json]", benchAbout)
	size := f.Int("size", 160, "grid points per side `N` of the 3D Poisson matrix (N³ rows)")
	repeat := f.Int("repeat", 20, "timed products (and triads) `K`")
	asJSON := f.Bool("json", false, "print the figures as one JSON object")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 {
		return usageErrorf("bench: takes no arguments, got %q", pos)
	}
	if *repeat < 1 {
		return usageErrorf("bench: --repeat %d must be at least 1", *repeat)
	}
	if _, err := checkGrid("bench", *size); err != nil {
		return usageErrorf("bench: --size: %v", err)
	}
	a := stencil.Poisson3D(*size)
	r := benchResult{Size: *size, Rows: a.Rows, Nonzeros: a.NNZ(), Workers: sparse.Workers(), Repeats: *repeat}
	r.SpMVBytes = 12*int64(a.NNZ()) + 8*int64(a.Rows+1) + 16*int64(a.Rows)
	m := int(r.SpMVBytes/24) + 1
	r.TriadBytes = 24 * int64(m)
	// Every vector is written before timing: the first touch of fresh
	// memory (a page fault per page) would otherwise be timed.
	x, y := onesVec(a.Cols), onesVec(a.Rows)
	ta, tb, tc := onesVec(m), onesVec(m), onesVec(m)
	a.MulVec(y, x)
	sparse.Triad(ta, tb, tc, 0.5)
	var ts, tt time.Duration
	for k := 0; k < *repeat; k++ {
		if err := ctx.Err(); err != nil {
			return err
		}
		t0 := time.Now()
		a.MulVec(y, x)
		t1 := time.Now()
		sparse.Triad(ta, tb, tc, 0.5)
		tt += time.Since(t1)
		ts += t1.Sub(t0)
	}
	n := float64(*repeat)
	r.SpMVSeconds, r.TriadSeconds = solve.Num(ts.Seconds()/n), solve.Num(tt.Seconds()/n)
	r.SpMVGBs = solve.Num(float64(r.SpMVBytes) / float64(r.SpMVSeconds) / 1e9)
	r.TriadGBs = solve.Num(float64(r.TriadBytes) / float64(r.TriadSeconds) / 1e9)
	r.SpMVOverTriad = r.SpMVGBs / r.TriadGBs
	if *asJSON {
		return writeJSON(e.stdout, r)
	}
	fmt.Fprintf(e.stdout, "3D Poisson %d³: %d rows, %d nonzeros; %d workers (GOMAXPROCS %d), %d repeats\n",
		*size, a.Rows, a.NNZ(), r.Workers, runtime.GOMAXPROCS(0), *repeat)
	fmt.Fprintf(e.stdout, "  SpMV   %s per product, %s moved: %6.2f GB/s\n", fmtSec(r.SpMVSeconds), formatBytes(r.SpMVBytes), float64(r.SpMVGBs))
	fmt.Fprintf(e.stdout, "  triad  %s per pass,    %s moved: %6.2f GB/s\n", fmtSec(r.TriadSeconds), formatBytes(r.TriadBytes), float64(r.TriadGBs))
	fmt.Fprintf(e.stdout, "  SpMV / triad = %.2f\n", float64(r.SpMVOverTriad))
	cache, known := lastLevelCache()
	if r.SpMVBytes <= cache {
		how := "the last-level cache"
		if !known {
			how = "a last-level cache of the assumed size"
		}
		fmt.Fprintf(e.stdout, "warning: the product moves %s, which fits in %s (%s): these figures are the cache's speed, not memory's; use a larger --size to predict large solves\n",
			formatBytes(r.SpMVBytes), how, formatBytes(cache))
	}
	fmt.Fprintln(e.stdout, benchVerdict(float64(r.SpMVOverTriad)))
	return nil
}

// benchVerdict says in a sentence what the ratio of SpMV's bandwidth to
// the triad's means for residua's solves, which are memory-bound: a CG
// iteration is one SpMV and a few vector passes (Saad, Iterative Methods
// for Sparse Linear Systems, 2nd ed., §6.7). The thresholds are common
// practice for judging a kernel against STREAM, not derived values.
func benchVerdict(ratio float64) string {
	switch {
	case ratio >= 0.8:
		return fmt.Sprintf("verdict: SpMV gets %.0f%% of the triad's bandwidth, so large solves here run near the memory roofline.", 100*ratio)
	case ratio >= 0.5:
		return fmt.Sprintf("verdict: SpMV gets %.0f%% of the triad's bandwidth; large solves will run below the memory roofline (other load on the machine, or too few workers: GOMAXPROCS).", 100*ratio)
	}
	return fmt.Sprintf("verdict: SpMV gets only %.0f%% of the triad's bandwidth: solves will be slow here; check for other load, GOMAXPROCS and how memory is placed across sockets.", 100*ratio)
}

// assumedCache is the last-level cache assumed when the system does not
// say (the 2-core machines this project runs on report 260–300 MiB).
const assumedCache = 256 << 20

// lastLevelCache returns the size of the largest CPU cache the system
// reports (Linux sysfs), or assumedCache and false when it reports none.
func lastLevelCache() (int64, bool) {
	var best int64
	for i := 0; i < 8; i++ {
		b, err := os.ReadFile(fmt.Sprintf("/sys/devices/system/cpu/cpu0/cache/index%d/size", i))
		if err != nil {
			continue
		}
		t := strings.TrimSpace(string(b))
		mult := int64(1)
		switch {
		case strings.HasSuffix(t, "K"):
			mult, t = 1<<10, strings.TrimSuffix(t, "K")
		case strings.HasSuffix(t, "M"):
			mult, t = 1<<20, strings.TrimSuffix(t, "M")
		}
		if v, err := strconv.ParseInt(t, 10, 64); err == nil && v*mult > best {
			best = v * mult
		}
	}
	if best == 0 {
		return assumedCache, false
	}
	return best, true
}
