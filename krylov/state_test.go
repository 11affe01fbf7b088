package krylov_test

import (
	"bytes"
	"context"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"github.com/residua/residua/internal/binio"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// stateRows records progress rows without their wall time, which is the
// one thing a resumed solve cannot repeat.
type stateRows struct {
	rows []krylov.Progress
	// at, when positive, makes Record send on now when it sees that
	// iteration, so that the next iteration's start saves a checkpoint.
	at  int
	now chan struct{}
}

func (h *stateRows) Record(p krylov.Progress) error {
	p.Elapsed = 0
	h.rows = append(h.rows, p)
	if h.at > 0 && p.Iteration == h.at {
		h.now <- struct{}{}
	}
	return nil
}

func (h *stateRows) Finish(*krylov.Result) {}

var errKilled = errors.New("killed after the checkpoint")

// stateRun describes one method's solve for the resume tests: solve runs it
// with the given recorder, checkpoint and resume state.
type stateRun struct {
	name  string
	n     int // len(x)
	solve func(ctx context.Context, x []float64, rec krylov.Recorder, ck *krylov.Checkpoint, resume *krylov.State) (krylov.Result, error)
}

// resumeCase runs the uninterrupted solve, then one that saves a
// checkpoint after k iterations (through Checkpoint.Now, the on-demand
// path) and is "killed" by its Save's error, then resumes from the
// encoded and decoded checkpoint, and compares. The reference is the
// uninterrupted run itself: the definition of a correct resume is
// bitwise the same iterates, history and figures (same worker count).
func resumeCase(t *testing.T, r stateRun, k int) {
	t.Helper()
	full := &stateRows{}
	xFull := make([]float64, r.n)
	resFull, err := r.solve(context.Background(), xFull, full, nil, nil)
	if err != nil {
		t.Fatalf("uninterrupted: %v", err)
	}
	if resFull.Iterations <= k+1 {
		t.Fatalf("uninterrupted solve took %d iterations, need more than %d for the test", resFull.Iterations, k+1)
	}

	first := &stateRows{at: k, now: make(chan struct{}, 1)}
	var saved bytes.Buffer
	saves := 0
	ck := &krylov.Checkpoint{Now: first.now, Save: func(s *krylov.State) error {
		saves++
		if s.Iteration != k {
			t.Errorf("checkpoint at iteration %d, want %d", s.Iteration, k)
		}
		if err := s.Encode(&saved); err != nil {
			return err
		}
		return errKilled
	}}
	x1 := make([]float64, r.n)
	res1, err := r.solve(context.Background(), x1, first, ck, nil)
	if !errors.Is(err, errKilled) || res1.Status != krylov.Cancelled || saves != 1 {
		t.Fatalf("interrupted: status %v, error %v, %d saves; want cancelled by the save's error after 1", res1.Status, err, saves)
	}
	state, err := krylov.DecodeState(bytes.NewReader(saved.Bytes()), int64(saved.Len()))
	if err != nil {
		t.Fatalf("decode: %v", err)
	}

	second := &stateRows{}
	x2 := make([]float64, r.n)
	res2, err := r.solve(context.Background(), x2, second, nil, state)
	if err != nil {
		t.Fatalf("resumed: %v", err)
	}
	for i := range xFull {
		if math.Float64bits(x2[i]) != math.Float64bits(xFull[i]) {
			t.Fatalf("x[%d] = %v resumed, %v uninterrupted", i, x2[i], xFull[i])
		}
	}
	got := append(slices.Clone(first.rows[:k+1]), second.rows...)
	if !slices.Equal(got, full.rows) {
		t.Errorf("history differs: %d rows before the checkpoint and %d after, %d uninterrupted", k+1, len(second.rows), len(full.rows))
		for i := range min(len(got), len(full.rows)) {
			if got[i] != full.rows[i] {
				t.Errorf("first difference at row %d: %+v, want %+v", i, got[i], full.rows[i])
				break
			}
		}
	}
	if len(second.rows) > 0 && second.rows[0].Iteration != k+1 {
		t.Errorf("resumed history starts at iteration %d, want %d", second.rows[0].Iteration, k+1)
	}
	type figures struct {
		st                          krylov.Status
		it, prod                    int
		rn, tn, rel, lmin, lmax, cd float64
	}
	fig := func(r krylov.Result) figures {
		return figures{r.Status, r.Iterations, r.Products, r.ResidualNorm, r.TrueResidualNorm, r.RelResidual, r.LambdaMin, r.LambdaMax, r.Cond}
	}
	if fig(res2) != fig(resFull) {
		t.Errorf("resumed result %+v, uninterrupted %+v", fig(res2), fig(resFull))
	}
	if (res2.LSQ == nil) != (resFull.LSQ == nil) || res2.LSQ != nil && (res2.LSQ.NormalResidualNorm != resFull.LSQ.NormalResidualNorm ||
		res2.LSQ.ANormEstimate != resFull.LSQ.ANormEstimate || res2.LSQ.StoppedBy != resFull.LSQ.StoppedBy) {
		t.Errorf("least-squares figures differ: %+v resumed, %+v uninterrupted", res2.LSQ, resFull.LSQ)
	}
}

// cgStateRuns are CG, PCG with Jacobi and PCG with IC(0) on the 2D Poisson
// model problem.
func cgStateRuns(t *testing.T, side int) (a *sparse.CSR, b []float64, runs []stateRun) {
	a = stencil.Poisson2D(side)
	b = make([]float64, a.Rows)
	rng := rand.New(rand.NewPCG(12, 1))
	for i := range b {
		b[i] = rng.NormFloat64()
	}
	jac, err := precond.NewJacobi(a)
	if err != nil {
		t.Fatal(err)
	}
	ic, err := precond.NewIC0(a, precond.IC0Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		m    krylov.Preconditioner
	}{{"cg", nil}, {"pcg-jacobi", jac}, {"pcg-ic0", ic}} {
		runs = append(runs, stateRun{name: c.name, n: a.Rows, solve: func(ctx context.Context, x []float64, rec krylov.Recorder, ck *krylov.Checkpoint, rs *krylov.State) (krylov.Result, error) {
			// RefreshEvery 7 puts true-residual checks and replacements on
			// both sides of the checkpoint.
			return krylov.CG(ctx, a, b, x, c.m, krylov.Settings{
				RelTol: 1e-10, RefreshEvery: 7, Recorder: rec, Checkpoint: ck, Resume: rs,
			})
		}})
	}
	return a, b, runs
}

// lsqStateRuns are LSQR and CGLS, damped and not, with column scaling, on
// a random sparse 300×120 matrix.
func lsqStateRuns() (a *sparse.CSR, b []float64, runs []stateRun) {
	const m, n, perRow = 300, 120, 5
	rng := rand.New(rand.NewPCG(12, 2))
	rowPtr := []int{0}
	var col []int32
	var val []float64
	for range m {
		cols := rng.Perm(n)[:perRow]
		slices.Sort(cols)
		for _, j := range cols {
			col = append(col, int32(j))
			val = append(val, rng.NormFloat64()*math.Pow(10, 2*rng.Float64()))
		}
		rowPtr = append(rowPtr, len(col))
	}
	a, err := sparse.NewCSR(m, n, rowPtr, col, val)
	if err != nil {
		panic(err)
	}
	b = make([]float64, m)
	for i := range b {
		b[i] = rng.NormFloat64()
	}
	for _, c := range []struct {
		name   string
		method krylov.LSQMethod
		damp   float64
	}{{"lsqr", krylov.LSQR, 0}, {"lsqr-damped", krylov.LSQR, 0.3}, {"cgls", krylov.CGLS, 0}, {"cgls-damped", krylov.CGLS, 0.3}} {
		runs = append(runs, stateRun{name: c.name, n: n, solve: func(ctx context.Context, x []float64, rec krylov.Recorder, ck *krylov.Checkpoint, rs *krylov.State) (krylov.Result, error) {
			return krylov.LSQ(ctx, a, b, x, krylov.LSQSettings{
				Method: c.method, Damp: c.damp, ATol: 1e-12, BTol: 1e-12, Scaling: krylov.ScaleColumns,
				Recorder: rec, Checkpoint: ck, Resume: rs,
			})
		}})
	}
	return a, b, runs
}

func TestResumeBitwise(t *testing.T) {
	_, _, cgRuns := cgStateRuns(t, 24)
	_, _, lsqRuns := lsqStateRuns()
	for _, r := range append(cgRuns, lsqRuns...) {
		for _, k := range []int{1, 9, 14} {
			t.Run(r.name+"/"+string(rune('0'+k/10))+string(rune('0'+k%10)), func(t *testing.T) {
				resumeCase(t, r, k)
			})
		}
	}
}

// TestResumeSolves checks the resumed CG answer against an outside
// reference: gonum's dense Cholesky factorization of the same system
// (Golub and Van Loan, Matrix Computations, 4th ed., §4.2), to the
// accuracy the stopping test promises, ‖x − x*‖ ≤ κ·RelTol·‖x*‖ with
// κ(A) ≤ 4(side+1)²/π² + 1 for the 5-point Laplacian (from memory: its
// extreme eigenvalues are 8sin²(π/(2(side+1))) and 8cos²(...)).
func TestResumeSolves(t *testing.T) {
	const side = 16
	a, b, runs := cgStateRuns(t, side)
	n := a.Rows
	dense := mat.NewSymDense(n, nil)
	for i := range n {
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			dense.SetSym(i, int(a.ColIdx[k]), a.Val[k])
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(dense) {
		t.Fatal("gonum: the Poisson matrix is not positive definite")
	}
	var ref mat.VecDense
	if err := ch.SolveVecTo(&ref, mat.NewVecDense(n, b)); err != nil {
		t.Fatal(err)
	}
	kappa := 4*float64((side+1)*(side+1))/(math.Pi*math.Pi) + 1
	for _, r := range runs {
		now := make(chan struct{}, 1)
		rec := &stateRows{at: 5, now: now}
		var st *krylov.State
		x := make([]float64, n)
		_, err := r.solve(context.Background(), x, rec, &krylov.Checkpoint{Now: now, Save: func(s *krylov.State) error {
			var buf bytes.Buffer
			if err := s.Encode(&buf); err != nil {
				return err
			}
			var err error
			st, err = krylov.DecodeState(&buf, int64(buf.Len()))
			if err != nil {
				return err
			}
			return errKilled
		}}, nil)
		if !errors.Is(err, errKilled) {
			t.Fatalf("%s: %v", r.name, err)
		}
		res, err := r.solve(context.Background(), x, nil, nil, st)
		if err != nil || res.Status != krylov.Converged {
			t.Fatalf("%s resumed: %v, %v", r.name, res.Status, err)
		}
		var diff, norm float64
		for i := range x {
			d := x[i] - ref.AtVec(i)
			diff += d * d
			norm += ref.AtVec(i) * ref.AtVec(i)
		}
		if bound := kappa * 1e-10 * math.Sqrt(norm); math.Sqrt(diff) > bound {
			t.Errorf("%s: ‖x − x_chol‖ = %.3g > %.3g", r.name, math.Sqrt(diff), bound)
		}
	}
}

// TestCheckpointOnCancel: a cancelled solve saves its state before it
// returns, and the resumed solve finishes as the uninterrupted one.
func TestCheckpointOnCancel(t *testing.T) {
	_, _, runs := cgStateRuns(t, 20)
	_, _, lsq := lsqStateRuns()
	for _, r := range []stateRun{runs[0], lsq[0], lsq[2]} {
		xFull := make([]float64, r.n)
		full, _ := r.solve(context.Background(), xFull, nil, nil, nil)
		ctx, cancel := context.WithCancel(context.Background())
		var st *krylov.State
		ck := &krylov.Checkpoint{Save: func(s *krylov.State) error {
			var buf bytes.Buffer
			s.Encode(&buf)
			st, _ = krylov.DecodeState(&buf, int64(buf.Len()))
			return nil
		}}
		rec := &cancelAt{at: 6, cancel: cancel}
		x := make([]float64, r.n)
		res, err := r.solve(ctx, x, rec, ck, nil)
		if !errors.Is(err, context.Canceled) || res.Status != krylov.Cancelled || st == nil {
			t.Fatalf("%s: status %v, error %v, saved %v", r.name, res.Status, err, st != nil)
		}
		if st.Iteration != 6 {
			t.Errorf("%s: saved at iteration %d, want 6", r.name, st.Iteration)
		}
		x2 := make([]float64, r.n)
		res2, err := r.solve(context.Background(), x2, nil, nil, st)
		if err != nil || res2.Iterations != full.Iterations || !slices.Equal(x2, xFull) {
			t.Errorf("%s: resumed after cancel: %v, %d iterations (want %d), x equal %v", r.name, err, res2.Iterations, full.Iterations, slices.Equal(x2, xFull))
		}
	}
}

type cancelAt struct {
	at     int
	cancel func()
}

func (c *cancelAt) Record(p krylov.Progress) error {
	if p.Iteration == c.at {
		c.cancel()
	}
	return nil
}
func (c *cancelAt) Finish(*krylov.Result) {}

// TestResumeRefused: a state that does not belong to the solve is refused
// before anything is computed, naming the mismatch.
func TestResumeRefused(t *testing.T) {
	a, b, runs := cgStateRuns(t, 12)
	var st *krylov.State
	save := func(s *krylov.State) error {
		var buf bytes.Buffer
		s.Encode(&buf)
		st, _ = krylov.DecodeState(&buf, int64(buf.Len()))
		return errKilled
	}
	now := make(chan struct{}, 1)
	now <- struct{}{}
	runs[0].solve(context.Background(), make([]float64, a.Rows), nil, &krylov.Checkpoint{Now: now, Save: save}, nil)
	if st == nil {
		t.Fatal("no state saved")
	}
	b2 := slices.Clone(b)
	b2[3] += 1
	x := make([]float64, a.Rows)
	for _, c := range []struct {
		name string
		run  func() (krylov.Result, error)
	}{
		{"other rhs", func() (krylov.Result, error) {
			return krylov.CG(context.Background(), a, b2, x, nil, krylov.Settings{Resume: st})
		}},
		{"preconditioned", func() (krylov.Result, error) {
			j, _ := precond.NewJacobi(a)
			return krylov.CG(context.Background(), a, b, x, j, krylov.Settings{Resume: st})
		}},
		{"least squares", func() (krylov.Result, error) {
			return krylov.LSQ(context.Background(), a, b, x, krylov.LSQSettings{Resume: st})
		}},
		{"other size", func() (krylov.Result, error) {
			a3 := stencil.Poisson2D(11)
			return krylov.CG(context.Background(), a3, stencil.Ones(a3), make([]float64, a3.Rows), nil, krylov.Settings{Resume: st})
		}},
	} {
		res, err := c.run()
		if !errors.Is(err, krylov.ErrResume) || res.Iterations != 0 {
			t.Errorf("%s: %v after %d iterations, want ErrResume before any", c.name, err, res.Iterations)
		} else {
			t.Logf("%s: %v", c.name, err)
		}
	}
}

// TestStateCorrupt: every truncation and every flipped byte of an encoded
// state is detected, as io.ErrUnexpectedEOF or a checksum (or header)
// error, never decoded into numbers.
func TestStateCorrupt(t *testing.T) {
	_, _, runs := cgStateRuns(t, 6)
	var enc []byte
	now := make(chan struct{}, 1)
	now <- struct{}{}
	runs[1].solve(context.Background(), make([]float64, runs[1].n), nil, &krylov.Checkpoint{Now: now, Save: func(s *krylov.State) error {
		var buf bytes.Buffer
		s.Encode(&buf)
		enc = buf.Bytes()
		return errKilled
	}}, nil)
	if _, err := krylov.DecodeState(bytes.NewReader(enc), int64(len(enc))); err != nil {
		t.Fatalf("intact state: %v", err)
	}
	for cut := range len(enc) {
		_, err := krylov.DecodeState(bytes.NewReader(enc[:cut]), int64(cut))
		var be *binio.Error
		if !errors.As(err, &be) || !errors.Is(err, io.ErrUnexpectedEOF) && !errors.Is(err, binio.ErrLength) {
			t.Fatalf("truncated to %d of %d bytes: %v, want a *binio.Error for a short file", cut, len(enc), err)
		}
	}
	for i := range enc {
		bad := slices.Clone(enc)
		bad[i] ^= 0x20
		if _, err := krylov.DecodeState(bytes.NewReader(bad), int64(len(bad))); err == nil {
			t.Fatalf("byte %d flipped: decoded without error", i)
		}
	}
	if _, err := krylov.DecodeState(bytes.NewReader(append(slices.Clone(enc), 0)), int64(len(enc)+1)); err == nil {
		t.Error("a trailing byte went unnoticed")
	}
}

// TestCheckpointAllocs: the periodic checks allocate nothing and a save
// allocates nothing after the first.
func TestCheckpointAllocs(t *testing.T) {
	if cgRace {
		t.Skip("allocation counts are not meaningful under the race detector")
	}
	a := stencil.Poisson2D(30)
	b := stencil.Ones(a)
	x := make([]float64, a.Rows)
	saves := 0
	ck := &krylov.Checkpoint{Every: time.Nanosecond, Save: func(*krylov.State) error { saves++; return nil }}
	s := krylov.Settings{MaxIter: 10, Checkpoint: ck}
	base := testing.AllocsPerRun(3, func() { krylov.CG(context.Background(), a, b, x, nil, krylov.Settings{MaxIter: 10}) })
	long := testing.AllocsPerRun(3, func() { krylov.CG(context.Background(), a, b, x, nil, s) })
	s.MaxIter = 40
	longer := testing.AllocsPerRun(3, func() { krylov.CG(context.Background(), a, b, x, nil, s) })
	if saves < 30 {
		t.Fatalf("only %d saves", saves)
	}
	// A few allocations once per solve (the State's slices) are allowed;
	// none may grow with the number of iterations or saves.
	if longer > long+0.5 || long > base+6 {
		t.Errorf("allocations: %v without checkpoints, %v with 10 saves, %v with 40", base, long, longer)
	}
}
