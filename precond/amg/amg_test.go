package amg_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

func randVec(n int, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 5))
	v := make([]float64, n)
	for i := range v {
		v[i] = 2*rng.Float64() - 1
	}
	return v
}

func dot(x, y []float64) float64 {
	s := 0.0
	for i := range x {
		s += x[i] * y[i]
	}
	return s
}

func norm(x []float64) float64 { return math.Sqrt(dot(x, x)) }

// pcg solves A·x = b (b = A·1) with AMG-preconditioned CG to rtol and
// returns the result and the true relative residual recomputed here.
func pcg(t *testing.T, a *sparse.CSR, m krylov.Preconditioner, rtol float64) (krylov.Result, float64) {
	t.Helper()
	b := make([]float64, a.Rows)
	a.MulVec(b, stencil.Ones(a))
	x := make([]float64, a.Rows)
	res, err := krylov.CG(context.Background(), a, b, x, m, krylov.Settings{RelTol: rtol})
	if err != nil {
		t.Fatalf("CG: %v", err)
	}
	r := make([]float64, a.Rows)
	a.Residual(r, b, x)
	return res, norm(r) / norm(b)
}

// spdShared reads every matrix of kind spd in ../shared/matrices/MANIFEST.tsv.
func spdShared(t *testing.T) ([]shared.Entry, []*sparse.CSR) {
	t.Helper()
	dir := shared.Matrices(t)
	var es []shared.Entry
	var as []*sparse.CSR
	for _, e := range shared.Manifest(t) {
		if e.Kind != "spd" {
			continue
		}
		a, _, err := matrixio.ReadMatrixFile(e.Path(dir), nil)
		if err != nil {
			t.Fatalf("%s: %v", e.File, err)
		}
		es, as = append(es, e), append(as, a)
	}
	return es, as
}

// slow lists the shared matrices whose AMG solves take over a second
// under the race detector; they run without -short and -race.
var slow = map[string]bool{
	"bcsstk13": true, "bcsstk15": true, "bcsstk16": true, "bcsstk18": true, "bcsstk25": true,
	"bcsstk28": true, "plat362": true, "plat1919": true, "mhd4800b": true, "bcsstk21": true,
}

func skipSlow(t *testing.T, name string, rows int) {
	if slow[name] && (testing.Short() || raceEnabled) {
		t.Skip("slow solve; runs without -short and -race")
	}
	if raceEnabled && rows > 1000 {
		t.Skip("over 1000 rows: runs without -race")
	}
}

// smallCoarse makes even the small shared matrices multilevel: with the
// default 2000 rows most of them would be one level, solved exactly.
var smallCoarse = amg.Options{MaxCoarse: 40}

// TestSymmetricPositiveDefinite checks that M⁻¹ (one V-cycle) is symmetric
// and positive definite: ⟨M⁻¹x, y⟩ = ⟨x, M⁻¹y⟩ to rounding and ⟨M⁻¹x, x⟩ > 0
// on random vectors, for every shared SPD matrix and both smoothers. The
// symmetry follows from the cycle's construction (Briggs, Henson and
// McCormick, A Multigrid Tutorial 2nd ed., ch. 10 from memory: a V-cycle
// whose post-smoother is the adjoint of its pre-smoother is symmetric);
// positivity needs convergent smoothers. The tolerance 1e-10 relative to
// ‖M⁻¹x‖·‖y‖ allows rounding in a few hundred operations per entry at
// condition numbers up to 10⁶ (common practice).
func TestSymmetricPositiveDefinite(t *testing.T) {
	es, as := spdShared(t)
	for k, e := range es {
		a := as[k]
		for _, sm := range []amg.Smoother{amg.Chebyshev, amg.L1Jacobi} {
			t.Run(e.Name+"/"+string(sm), func(t *testing.T) {
				skipSlow(t, e.Name, a.Rows)
				opt := smallCoarse
				opt.Smoother = sm
				h, err := amg.New(a, opt)
				if err != nil {
					t.Fatal(err)
				}
				// bcsstm05 is diagonal: every node is isolated and the
				// hierarchy has one level by the stall rule.
				if len(h.Report().Levels) < 2 && a.Rows > 40 && e.Name != "bcsstm05" {
					t.Fatalf("one level for %d rows", a.Rows)
				}
				n := a.Rows
				mx, my := make([]float64, n), make([]float64, n)
				for s := range 3 {
					x, y := randVec(n, uint64(2*s+1)), randVec(n, uint64(2*s+2))
					h.Precondition(mx, x)
					h.Precondition(my, y)
					l, r := dot(mx, y), dot(x, my)
					if math.Abs(l-r) > 1e-10*norm(mx)*norm(y) {
						t.Errorf("⟨Mx,y⟩ = %.15g, ⟨x,My⟩ = %.15g", l, r)
					}
					if q := dot(mx, x); !(q > 0) {
						t.Errorf("⟨Mx,x⟩ = %g, not positive", q)
					}
				}
			})
		}
	}
}

// TestSharedConverge: every shared SPD matrix converges with AMG-PCG to a
// true relative residual ≤ 1e-8 (recomputed here), with the default
// options and with a small coarsest level. The logged counts go into
// BENCHMARKS.md beside Jacobi's and IC(0)'s.
func TestSharedConverge(t *testing.T) {
	es, as := spdShared(t)
	for k, e := range es {
		a := as[k]
		for _, oc := range []struct {
			name string
			opt  amg.Options
		}{{"default", amg.Options{}}, {"coarse40", smallCoarse}} {
			t.Run(e.Name+"/"+oc.name, func(t *testing.T) {
				skipSlow(t, e.Name, a.Rows)
				h, err := amg.New(a, oc.opt)
				if err != nil {
					t.Fatal(err)
				}
				res, rel := pcg(t, a, h, 1e-8)
				if res.Status != krylov.Converged || rel > 1e-8 {
					t.Errorf("status %v after %d iterations, true relative residual %.3g", res.Status, res.Iterations, rel)
				}
				rep := h.Report()
				t.Logf("%s %s: %d iterations, %d levels, operator complexity %.3f", e.Name, oc.name, res.Iterations, len(rep.Levels), rep.OperatorComplexity)
			})
		}
	}
}

// TestGridIndependence: AMG-PCG's iteration count stays nearly constant as
// the grid is refined (the convergence theory of Vaněk, Mandel and Brezina
// 1996, and the multigrid literature's Poisson counts), growing at most
// 1.3 times from the coarsest to the finest grid, while CG's grows like
// the square root of the condition number, h⁻¹ (Saad §6.11.3): by the
// refinement factor. The large grids (1000², 100³) run without -short.
func TestGridIndependence(t *testing.T) {
	type grid struct {
		name  string
		build func(int) *sparse.CSR
		sizes []int
		full  []int
	}
	for _, g := range []grid{
		{"poisson2d", stencil.Poisson2D, []int{125, 250}, []int{125, 250, 500, 1000}},
		{"poisson3d", stencil.Poisson3D, []int{20, 40}, []int{20, 40, 60, 100}},
	} {
		t.Run(g.name, func(t *testing.T) {
			sizes := g.full
			if testing.Short() || raceEnabled {
				sizes = g.sizes
			}
			first, firstCG := 0, 0
			for _, n := range sizes {
				a := g.build(n)
				h, err := amg.New(a, amg.Options{})
				if err != nil {
					t.Fatal(err)
				}
				res, rel := pcg(t, a, h, 1e-8)
				if res.Status != krylov.Converged || rel > 1e-8 {
					t.Fatalf("%d: status %v, relative residual %g", n, res.Status, rel)
				}
				if first == 0 {
					first = res.Iterations
				}
				line := fmt.Sprintf("%s %d: AMG-PCG %d iterations (%s)", g.name, n, res.Iterations, h.Report().String())
				// Plain CG only on the grids it solves in a second or so.
				if n == sizes[0] || n == sizes[1] {
					cg, _ := pcg(t, a, nil, 1e-8)
					if firstCG == 0 {
						firstCG = cg.Iterations
					} else if ratio := float64(cg.Iterations) / float64(firstCG); ratio < 0.8*float64(n)/float64(sizes[0]) {
						t.Errorf("CG iterations grew %.2f times for %g times finer grid: the test problem is not hard", ratio, float64(n)/float64(sizes[0]))
					}
					line += fmt.Sprintf("; CG %d", cg.Iterations)
				}
				t.Log(line)
				if float64(res.Iterations) > 1.3*float64(first) {
					t.Errorf("%d: %d iterations, more than 1.3 × %d on the coarsest grid", n, res.Iterations, first)
				}
			}
		})
	}
}

// TestLevelsAreGalerkin rebuilds each coarse operator with gonum dense
// products, Pᵀ·A·P (the Galerkin condition, Saad §13.3 from memory), on a
// problem small enough for dense matrices, through the exported
// Hierarchy accessors.
func TestLevelsAreGalerkin(t *testing.T) {
	a := stencil.Poisson2D(24)
	h, err := amg.New(a, amg.Options{MaxCoarse: 10})
	if err != nil {
		t.Fatal(err)
	}
	levels := h.Levels()
	if len(levels) < 3 {
		t.Fatalf("%d levels, want at least 3", len(levels))
	}
	for l := 0; l+1 < len(levels); l++ {
		al, p, ac := levels[l].A, levels[l].P, levels[l+1].A
		var ap, ptap mat.Dense
		ap.Mul(al, p)
		ptap.Mul(p.T(), &ap)
		r, c := ptap.Dims()
		if r != ac.Rows || c != ac.Cols {
			t.Fatalf("level %d: coarse operator %d×%d, Pᵀ·A·P %d×%d", l+1, ac.Rows, ac.Cols, r, c)
		}
		for i := range r {
			for j := range c {
				// Sums of a few hundred terms of size ≤ 8: 1e-12.
				if d := math.Abs(ac.At(i, j) - ptap.At(i, j)); d > 1e-12 {
					t.Fatalf("level %d: A_c(%d,%d) = %g, dense Pᵀ·A·P = %g", l+1, i, j, ac.At(i, j), ptap.At(i, j))
				}
			}
		}
	}
}

// TestDeterministic: the hierarchy, the preconditioner's output and the
// whole CG history are the same bits at GOMAXPROCS 1, 2 and 3 and run to
// run (the package documentation's claim; sparse.Mul and the vector
// kernels are bitwise reproducible at any worker count).
func TestDeterministic(t *testing.T) {
	n := 40
	if testing.Short() || raceEnabled {
		n = 24
	}
	a := stencil.Poisson3D(n)
	type outcome struct {
		levels []*sparse.CSR
		hist   []float64
		x      []float64
	}
	run := func(procs int) outcome {
		old := runtime.GOMAXPROCS(procs)
		defer runtime.GOMAXPROCS(old)
		h, err := amg.New(a, amg.Options{})
		if err != nil {
			t.Fatal(err)
		}
		var o outcome
		for _, lv := range h.Levels() {
			o.levels = append(o.levels, lv.A)
			if lv.P != nil {
				o.levels = append(o.levels, lv.P)
			}
		}
		b := randVec(a.Rows, 9)
		x := make([]float64, a.Rows)
		rec := &histRec{}
		if _, err := krylov.CG(context.Background(), a, b, x, h, krylov.Settings{Recorder: rec}); err != nil {
			t.Fatal(err)
		}
		o.hist, o.x = rec.r, x
		return o
	}
	ref := run(1)
	for _, procs := range []int{1, 2, 3} {
		got := run(procs)
		for l := range ref.levels {
			if !sameCSR(ref.levels[l], got.levels[l]) {
				t.Fatalf("GOMAXPROCS %d: matrix %d of the hierarchy differs", procs, l)
			}
		}
		if !sameBits(ref.hist, got.hist) || !sameBits(ref.x, got.x) {
			t.Fatalf("GOMAXPROCS %d: history or solution differs", procs)
		}
	}
}

type histRec struct{ r []float64 }

func (h *histRec) Record(p krylov.Progress) error { h.r = append(h.r, p.ResidualNorm); return nil }
func (h *histRec) Finish(*krylov.Result)          {}

func sameBits(x, y []float64) bool {
	if len(x) != len(y) {
		return false
	}
	for i := range x {
		if math.Float64bits(x[i]) != math.Float64bits(y[i]) {
			return false
		}
	}
	return true
}

func sameCSR(a, b *sparse.CSR) bool {
	if a.Rows != b.Rows || a.Cols != b.Cols || a.NNZ() != b.NNZ() {
		return false
	}
	for i := range a.RowPtr {
		if a.RowPtr[i] != b.RowPtr[i] {
			return false
		}
	}
	for p := range a.ColIdx {
		if a.ColIdx[p] != b.ColIdx[p] || math.Float64bits(a.Val[p]) != math.Float64bits(b.Val[p]) {
			return false
		}
	}
	return true
}

// TestNoAllocations: an application allocates nothing (the krylov
// Preconditioner contract).
func TestNoAllocations(t *testing.T) {
	a := stencil.Poisson3D(30)
	for _, sm := range []amg.Smoother{amg.Chebyshev, amg.L1Jacobi} {
		h, err := amg.New(a, amg.Options{Smoother: sm, MaxCoarse: 100})
		if err != nil {
			t.Fatal(err)
		}
		r, z := randVec(a.Rows, 1), make([]float64, a.Rows)
		h.Precondition(z, r)
		if n := testing.AllocsPerRun(5, func() { h.Precondition(z, r) }); n != 0 {
			t.Errorf("%s: %v allocations per application", sm, n)
		}
	}
}

// TestConcurrentApply: applications from several goroutines at once give
// the same bits as one at a time (run under -race for the data races).
func TestConcurrentApply(t *testing.T) {
	a := stencil.Poisson2D(60)
	h, err := amg.New(a, amg.Options{MaxCoarse: 50})
	if err != nil {
		t.Fatal(err)
	}
	r := randVec(a.Rows, 3)
	want := make([]float64, a.Rows)
	h.Precondition(want, r)
	var wg sync.WaitGroup
	errs := make(chan string, 4)
	for g := range 4 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			z := make([]float64, a.Rows)
			for range 5 {
				h.Precondition(z, r)
				if !sameBits(z, want) {
					errs <- fmt.Sprintf("goroutine %d: result differs", g)
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Error(e)
	}
	// dst and r the same slice.
	z := append([]float64(nil), r...)
	h.Precondition(z, z)
	if !sameBits(z, want) {
		t.Error("in-place application differs")
	}
}

// TestRefusals: bad input gives a clear error naming what and where.
func TestRefusals(t *testing.T) {
	// An indefinite matrix with a positive diagonal: eigenvalues −1 and 3
	// of [[1, 2], [2, 1]]; dense Cholesky refuses it (Golub and Van Loan
	// §4.2: Cholesky exists iff the matrix is SPD).
	indef := &sparse.CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 2, 4}, ColIdx: []int32{0, 1, 0, 1}, Val: []float64{1, 2, 2, 1}}
	negDiag := &sparse.CSR{Rows: 2, Cols: 2, RowPtr: []int{0, 1, 2}, ColIdx: []int32{0, 1}, Val: []float64{1, -1}}
	p := stencil.Poisson2D(10)
	for _, tc := range []struct {
		name string
		a    *sparse.CSR
		opt  amg.Options
		want error
	}{
		{"indefinite", indef, amg.Options{}, amg.ErrNotSPD},
		{"negative diagonal", negDiag, amg.Options{}, amg.ErrNotSPD},
		{"theta", p, amg.Options{Theta: 1.5}, amg.ErrOptions},
		{"smoother", p, amg.Options{Smoother: "gauss"}, amg.ErrOptions},
		{"degree", p, amg.Options{Degree: 99}, amg.ErrOptions},
		{"block size", p, amg.Options{BlockSize: 3}, amg.ErrOptions},
		{"near-null size", p, amg.Options{NearNull: make([]float64, 7), K: 1}, amg.ErrOptions},
		{"near-null NaN", p, amg.Options{NearNull: append(make([]float64, 99), math.NaN()), K: 1}, amg.ErrOptions},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := amg.New(tc.a, tc.opt)
			if !errors.Is(err, tc.want) {
				t.Fatalf("error %v, want %v", err, tc.want)
			}
			t.Log(err)
		})
	}
}

// TestElasticityNearNull: on 3D elasticity (stencil.Elasticity3D, clamped
// on one face) smoothed aggregation with the six rigid-body modes and
// nodes of three unknowns needs clearly fewer iterations than with the
// constant vector alone, and its count stays roughly flat as the mesh is
// refined (Vaněk, Mandel and Brezina 1996, §5: the near-null space must
// contain the rigid-body modes for elasticity).
func TestElasticityNearNull(t *testing.T) {
	sizes := []int{8, 16}
	if testing.Short() || raceEnabled {
		sizes = []int{6, 10}
	}
	var first int
	for _, n := range sizes {
		a := stencil.Elasticity3D(n, stencil.DefaultYoung, stencil.DefaultPoisson)
		hc, err := amg.New(a, amg.Options{MaxCoarse: 200})
		if err != nil {
			t.Fatal(err)
		}
		hr, err := amg.New(a, amg.Options{MaxCoarse: 200, NearNull: stencil.RigidBodyModes(n), K: 6, BlockSize: 3})
		if err != nil {
			t.Fatal(err)
		}
		rc, relc := pcg(t, a, hc, 1e-8)
		rr, relr := pcg(t, a, hr, 1e-8)
		if relc > 1e-8 || relr > 1e-8 {
			t.Fatalf("n=%d: relative residuals %g (constant), %g (rigid-body modes)", n, relc, relr)
		}
		t.Logf("elasticity3d %d (%d rows): constant %d iterations, rigid-body modes %d (%s)", n, a.Rows, rc.Iterations, rr.Iterations, hr.Report())
		if float64(rr.Iterations) > 0.75*float64(rc.Iterations) {
			t.Errorf("n=%d: rigid-body modes %d iterations, constant %d: not clearly fewer", n, rr.Iterations, rc.Iterations)
		}
		if first == 0 {
			first = rr.Iterations
		} else if float64(rr.Iterations) > 1.5*float64(first) {
			t.Errorf("n=%d: %d iterations with rigid-body modes, against %d on the coarser mesh", n, rr.Iterations, first)
		}
	}
}
