package solve

import (
	"context"
	"encoding/json"
	"errors"
	"math"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

func TestParseMethod(t *testing.T) {
	t.Parallel()
	for _, m := range Methods {
		got, err := ParseMethod(string(m))
		if err != nil || got != m {
			t.Errorf("ParseMethod(%q) = %q, %v", m, got, err)
		}
	}
	if got, err := ParseMethod(""); err != nil || got != Auto {
		t.Errorf(`ParseMethod("") = %q, %v; want auto`, got, err)
	}
	if _, err := ParseMethod("lsq"); err == nil || !strings.Contains(err.Error(), "auto, cg, lsqr, cgls or minres") {
		t.Errorf("ParseMethod(lsq) error %v does not list the methods", err)
	}
}

func TestValidate(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		name  string
		req   Request
		field string // "" for no error
		want  Request
	}{
		{"zero is a system by CG", Request{}, "", Request{Method: CG, Preconditioner: "auto", auto: true}},
		{"minres is a system", Request{Method: MINRES}, "", Request{Method: MINRES, Preconditioner: "auto"}},
		{"auto with block is MINRES", Request{Preconditioner: "block"}, "", Request{Method: MINRES, Preconditioner: "block", auto: true}},
		{"minres for least squares", Request{LeastSquares: true, Method: MINRES}, "method", Request{}},
		{"block for cg", Request{Method: CG, Preconditioner: "block"}, "preconditioner", Request{}},
		{"auto least squares is LSQR", Request{LeastSquares: true}, "", Request{LeastSquares: true, Method: LSQR, Preconditioner: "auto"}},
		{"cgls implies least squares", Request{Method: CGLS, Preconditioner: "colscale"}, "", Request{LeastSquares: true, Method: CGLS, Preconditioner: "colscale"}},
		{"unknown method", Request{Method: "gmres"}, "method", Request{}},
		{"cg for least squares", Request{LeastSquares: true, Method: CG}, "method", Request{}},
		{"scaling for a system", Request{Preconditioner: "colscale"}, "preconditioner", Request{}},
		{"ic0 for least squares", Request{LeastSquares: true, Preconditioner: "ic0"}, "preconditioner", Request{}},
		{"negative rtol", Request{RelTol: -1}, "rtol", Request{}},
		{"NaN atol", Request{AbsTol: math.NaN()}, "atol", Request{}},
		{"infinite damp", Request{LeastSquares: true, Damp: math.Inf(1)}, "damp", Request{}},
		{"negative max_iter", Request{MaxIter: -1}, "max_iter", Request{}},
		{"negative time limit", Request{TimeLimit: -1}, "time_limit", Request{}},
		{"rtol for least squares", Request{LeastSquares: true, RelTol: 1e-6}, "rtol", Request{}},
		{"damp for a system", Request{Damp: 1}, "damp", Request{}},
		{"btol for a system", Request{BTol: 1}, "btol", Request{}},
		{"refresh for least squares", Request{LeastSquares: true, RefreshEvery: 5}, "refresh_every", Request{}},
		{"amg options", Request{Preconditioner: "amg", AMG: AMGOptions{Theta: 0.1, Smoother: "l1jacobi"}}, "", Request{Method: CG, Preconditioner: "amg", AMG: AMGOptions{Theta: 0.1, Smoother: "l1jacobi"}, auto: true}},
		{"amg options for ic0", Request{Preconditioner: "ic0", AMG: AMGOptions{Theta: 0.1}}, "amg", Request{}},
		{"amg theta", Request{Preconditioner: "amg", AMG: AMGOptions{Theta: 1}}, "amg_theta", Request{}},
		{"amg smoother", Request{Preconditioner: "amg", AMG: AMGOptions{Smoother: "sor"}}, "amg_smoother", Request{}},
		{"amg degree", Request{Preconditioner: "amg", AMG: AMGOptions{Degree: 9}}, "amg_degree", Request{}},
		{"near-null NaN", Request{Preconditioner: "amg", AMG: AMGOptions{NearNull: &NearNull{K: 1, Values: []float64{1, math.NaN()}}}}, "near_null", Request{}},
		{"near-null ragged", Request{Preconditioner: "amg", AMG: AMGOptions{NearNull: &NearNull{K: 2, Values: []float64{1, 2, 3}}}}, "near_null", Request{}},
	} {
		got, err := c.req.Validate()
		var fe *FieldError
		switch {
		case c.field == "" && err != nil:
			t.Errorf("%s: %v", c.name, err)
		case c.field == "" && got != c.want:
			t.Errorf("%s: got %+v, want %+v", c.name, got, c.want)
		case c.field != "" && (!errors.As(err, &fe) || fe.Field != c.field || !errors.Is(err, ErrInvalid)):
			t.Errorf("%s: error %v, want a FieldError on %q", c.name, err, c.field)
		}
	}
}

// TestRunSystem solves the shared bcsstk14 (b = A·1) and checks the summary
// against the method's own result and against the true residual recomputed
// here.
func TestRunSystem(t *testing.T) {
	t.Parallel()
	a, info, err := matrixio.ReadMatrixFile(filepath.Join(shared.Matrices(t), "bcsstk14.mtx"), nil)
	if err != nil {
		t.Fatal(err)
	}
	m := Check(a, "bcsstk14.mtx", info.Header.Symmetry == "symmetric")
	b := ones(a.Rows)
	a.MulVec(b, ones(a.Cols))
	x := make([]float64, a.Cols)
	sum, setup, err := Run(context.Background(), m, Request{Preconditioner: "jacobi"}, b, nil, x, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !sum.Converged || sum.Status != "converged" || !strings.HasPrefix(sum.Headline, "converged in ") {
		t.Fatalf("summary %+v", sum)
	}
	// The same solve straight through krylov gives the same numbers.
	y := make([]float64, a.Cols)
	res, _ := krylov.CG(context.Background(), a, b, y, setup.Choice.M, krylov.Settings{})
	if res.Iterations != sum.Iterations || float64(sum.RelativeResidual) != res.RelResidual || !reflect.DeepEqual(x, y) {
		t.Errorf("summary iterations %d, relres %v; krylov %d, %v", sum.Iterations, sum.RelativeResidual, res.Iterations, res.RelResidual)
	}
	// The residual recomputed here meets the default test (1e-8·‖b‖).
	if rel := relResidual(a, b, x); rel > 1e-8 || math.Abs(rel-float64(sum.RelativeResidual)) > 1e-3*rel {
		t.Errorf("recomputed relative residual %g, summary %g", rel, sum.RelativeResidual)
	}
	if *sum.RelTol != 1e-8 || sum.MaxIter != 10*a.Rows || sum.Preconditioner != "jacobi" || sum.PreconditionerBytes == nil {
		t.Errorf("settings echoed: rtol %v, max_iter %d, preconditioner %s", *sum.RelTol, sum.MaxIter, sum.Preconditioner)
	}
}

// With a large atol the test that is met is the absolute one; the headline
// must say so in its own units, not claim the relative tolerance.
func TestHeadlineAbsoluteTolerance(t *testing.T) {
	t.Parallel()
	a := stencil.Poisson2D(10)
	b := ones(a.Rows)
	x := make([]float64, a.Cols)
	sum, _, err := Run(context.Background(), Check(a, "poisson", true), Request{AbsTol: 1e3}, b, nil, x, nil)
	if err != nil {
		t.Fatal(err)
	}
	if sum.Iterations != 0 || !strings.Contains(sum.Headline, "≤ atol 1.00e+03") || strings.Contains(sum.Headline, "tolerance 1.00e-8") {
		t.Errorf("headline %q", sum.Headline)
	}
}

func TestRunLeastSquares(t *testing.T) {
	t.Parallel()
	a, _, err := matrixio.ReadMatrixFile(filepath.Join(shared.Matrices(t), "well1033.mtx"), nil)
	if err != nil {
		t.Fatal(err)
	}
	b := make([]float64, a.Rows)
	a.MulVec(b, ones(a.Cols))
	x := make([]float64, a.Cols)
	sum, setup, err := Run(context.Background(), Check(a, "well1033", false), Request{LeastSquares: true}, b, nil, x, nil)
	if err != nil {
		t.Fatal(err)
	}
	if setup.Scaling != krylov.ScaleColumns || sum.Method != "lsqr" || sum.Preconditioner != "colscale" ||
		!strings.HasPrefix(sum.PreconditionerReason, "colscale: auto: 1033 rows ≥ 320 columns") {
		t.Errorf("scaling %v, method %s, preconditioner %s (%s)", setup.Scaling, sum.Method, sum.Preconditioner, sum.PreconditionerReason)
	}
	if !sum.Converged || sum.ResidualNorm == nil || sum.NormalResidualNorm == nil || sum.RelTol != nil || sum.LambdaMin != nil {
		t.Errorf("least-squares summary %+v", sum)
	}
	// b = A·1 is consistent: the recomputed residual is small relative to ‖b‖
	// (rule 1 of Paige and Saunders 1982, §6, with btol = 1e-8 and the
	// atol·‖A‖·‖x‖ term, which on this well-conditioned matrix is of the
	// same order).
	if rel := relResidual(a, b, x); rel > 1e-6 {
		t.Errorf("recomputed relative residual %g", rel)
	}
}

func TestFailure(t *testing.T) {
	t.Parallel()
	// A negative diagonal entry: Jacobi cannot be built for conjugate
	// gradients, so the set-up fails (the matrix is not SPD).
	a, err := sparse.NewCSR(2, 2, []int{0, 1, 2}, []int32{0, 1}, []float64{1, -1})
	if err != nil {
		t.Fatal(err)
	}
	m := Check(a, "neg", true)
	sum, _, err := Run(context.Background(), m, Request{Method: CG, Preconditioner: "jacobi"}, []float64{1, 1}, nil, make([]float64, 2), nil)
	var se *SetupError
	if !errors.As(err, &se) || sum.Status != string(SetupFailed) || sum.Converged || sum.Rows != 2 ||
		sum.Preconditioner != "jacobi" || !strings.Contains(sum.Headline, "set-up failed") || strings.Contains(sum.Error, "precond:") {
		t.Errorf("err %v, summary %+v", err, sum)
	}
	// A rectangular matrix is refused for a system.
	r, _ := sparse.NewCSR(2, 1, []int{0, 1, 2}, []int32{0, 0}, []float64{1, 1})
	sum, _, err = Run(context.Background(), Check(r, "tall", false), Request{}, []float64{1, 1}, nil, make([]float64, 1), nil)
	if !errors.Is(err, ErrNotSquare) || sum.Status != string(Refused) {
		t.Errorf("rectangular: err %v, status %s", err, sum.Status)
	}
}

// The JSON of a summary reads back equal, NaN and infinities included, in
// the one spelling the README documents.
func TestSummaryJSON(t *testing.T) {
	t.Parallel()
	s := Summary{Method: "cg", Status: "breakdown", RelativeResidual: Num(math.NaN()), TrueResidualNorm: Num(math.Inf(1)),
		RHSNorm: Num(math.Inf(-1)), CondEstimate: 0.1, RelTol: NumPtr(1e-8)}
	b, err := json.Marshal(s)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"relative_residual":"NaN"`, `"true_residual_norm":"+Inf"`, `"rhs_norm":"-Inf"`, `"rtol":1e-08`} {
		if !strings.Contains(string(b), want) {
			t.Errorf("JSON %s lacks %s", b, want)
		}
	}
	var back Summary
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if !math.IsNaN(float64(back.RelativeResidual)) || !math.IsInf(float64(back.TrueResidualNorm), 1) || *back.RelTol != 1e-8 {
		t.Errorf("read back %+v", back)
	}
}

func TestJobOutcome(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		results []Outcome
		stopped Outcome
		want    Outcome
	}{
		{[]Outcome{Converged, Converged}, "", Converged},
		{[]Outcome{Converged, IterationLimit, Stagnated}, "", IterationLimit},
		{[]Outcome{Converged}, Cancelled, Cancelled},
		{nil, SetupFailed, SetupFailed},
		{nil, "", Failed},
	} {
		if got := JobOutcome(c.results, c.stopped); got != c.want {
			t.Errorf("JobOutcome(%v, %q) = %q, want %q", c.results, c.stopped, got, c.want)
		}
	}
}

func ones(n int) []float64 {
	v := make([]float64, n)
	for i := range v {
		v[i] = 1
	}
	return v
}

func relResidual(a *sparse.CSR, b, x []float64) float64 {
	r := make([]float64, len(b))
	a.MulVec(r, x)
	var rr, bb float64
	for i := range r {
		d := b[i] - r[i]
		rr += d * d
		bb += b[i] * b[i]
	}
	return math.Sqrt(rr / bb)
}

// TestAMGSetup: the amg preconditioner through Prepare, with its report in
// the summary, a near-null space of the wrong length refused, and
// iterations far below Jacobi's on Poisson 3D (the point of multigrid:
// Vaněk, Mandel and Brezina 1996).
func TestAMGSetup(t *testing.T) {
	t.Parallel()
	a := stencil.Poisson3D(24)
	m := Matrix{A: a, Name: "poisson3d-24", Symmetric: true}
	b := make([]float64, a.Rows)
	a.MulVec(b, stencil.Ones(a))
	iters := map[string]int{}
	for _, p := range []string{"amg", "jacobi"} {
		s, err := Prepare(m, Request{Preconditioner: p})
		if err != nil {
			t.Fatal(err)
		}
		x := make([]float64, a.Rows)
		sum, err := s.Solve(context.Background(), b, nil, x, nil)
		if err != nil {
			t.Fatal(err)
		}
		if (sum.Multigrid != nil) != (p == "amg") {
			t.Errorf("%s: multigrid report %v", p, sum.Multigrid)
		}
		iters[p] = sum.Iterations
	}
	if iters["amg"]*4 > iters["jacobi"] {
		t.Errorf("amg %d iterations against jacobi's %d", iters["amg"], iters["jacobi"])
	}
	_, err := Prepare(m, Request{Preconditioner: "amg", AMG: AMGOptions{NearNull: &NearNull{K: 1, Values: make([]float64, 7)}}})
	var fe *FieldError
	if !errors.As(err, &fe) || fe.Field != "near_null" {
		t.Errorf("near-null of 7 rows: %v", err)
	}
}
