package api

import (
	"context"
	"math"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/solve"
)

// TestLeastSquares uploads the rectangular well1033 (1033×320, kind
// least-squares in the collection's index), solves min ‖A·x − b‖₂
// remotely with LSQR, and checks the answer bitwise against a local
// krylov.LSQ and within a condition-based bound against gonum's dense QR
// least-squares solution (mat.QR, SolveTo).
func TestLeastSquares(t *testing.T) {
	a, path := sharedMatrix(t, "well1033.mtx")
	h := startServer(t, Config{})
	c := h.dial(t)
	ctx := context.Background()
	m, err := c.UploadFile(ctx, path, "")
	if err != nil {
		t.Fatal(err)
	}
	if m.GetRows() != 1033 || m.GetCols() != 320 || m.GetSymmetry() != "general" {
		t.Fatalf("upload reply %d×%d %s", m.GetRows(), m.GetCols(), m.GetSymmetry())
	}
	// An inconsistent right-hand side: b = A·1 + a bump in the first rows.
	b := onesRHS(a)
	for i := 0; i < 50; i++ {
		b[i] += 0.01 * float64(i%5)
	}
	if _, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}}, nil); status.Code(err) != codes.FailedPrecondition ||
		!strings.Contains(err.Error(), "lsq") {
		t.Errorf("cg on a rectangular matrix: %v, want FAILED_PRECONDITION suggesting lsq", err)
	}
	if _, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}, Request: solve.Request{LeastSquares: true, RelTol: 1e-6}}, nil); status.Code(err) != codes.InvalidArgument {
		t.Errorf("lsq with rtol: %v, want INVALID_ARGUMENT", err)
	}
	out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b}, ProgressEvery: 5, Request: solve.Request{LeastSquares: true}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	res := out.Results[0]
	if !res.Converged || res.Method != "lsqr" || res.Preconditioner != "colscale" || res.NormalResidualNorm == nil || *res.NormalResidualNorm == 0 {
		t.Fatalf("result %+v", res)
	}
	x := out.X[0]
	if len(x) != 320 {
		t.Fatalf("solution has %d entries, want 320", len(x))
	}
	xl := make([]float64, 320)
	if _, err := krylov.LSQ(ctx, a, b, xl, krylov.LSQSettings{}); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(x, xl) {
		t.Errorf("remote x differs from the local krylov.LSQ x")
	}
	dense := mat.NewDense(a.Rows, a.Cols, nil)
	for i := 0; i < a.Rows; i++ {
		for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
			dense.Set(i, int(a.ColIdx[k]), a.Val[k])
		}
	}
	var qr mat.QR
	qr.Factorize(dense)
	var xq mat.VecDense
	if err := qr.SolveVecTo(&xq, false, mat.NewVecDense(len(b), b)); err != nil {
		t.Fatal(err)
	}
	var diff, nq float64
	for j := range x {
		diff += (x[j] - xq.AtVec(j)) * (x[j] - xq.AtVec(j))
		nq += xq.AtVec(j) * xq.AtVec(j)
	}
	// The forward error of a backward-stable answer is about cond(A) times
	// the backward error (Golub and Van Loan, 4th ed., §5.3.7); with
	// atol = btol = 1e-8 and cond(well1033) estimated by the solver, a
	// bound of cond·1e-7 leaves a factor of ten.
	if rel := math.Sqrt(diff / nq); rel > float64(res.CondEstimate)*1e-7 {
		t.Errorf("‖x − x_QR‖/‖x_QR‖ = %g > cond·1e-7 = %g", rel, float64(res.CondEstimate)*1e-7)
	}
}
