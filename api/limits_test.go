package api

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

// countingReader yields n bytes of Matrix Market comment lines and counts
// how many were read.
type countingReader struct {
	left int64
	read atomic.Int64
}

func (r *countingReader) Read(p []byte) (int, error) {
	if r.left <= 0 {
		return 0, io.EOF
	}
	n := min(int64(len(p)), r.left)
	for i := range p[:n] {
		if i%64 == 0 {
			p[i] = '%'
		} else if i%64 == 63 {
			p[i] = '\n'
		} else {
			p[i] = 'x'
		}
	}
	r.left -= n
	r.read.Add(n)
	return int(n), nil
}

func TestUploadLimits(t *testing.T) {
	const limit = 256 << 10
	h := startServer(t, Config{MaxUploadBytes: limit, MaxRows: 1000, MaxNonzeros: 100_000})
	c := h.dial(t, client.WithChunkSize(16<<10))
	ctx := context.Background()

	t.Run("byte limit refuses without reading it all", func(t *testing.T) {
		const total = 64 << 20
		r := &countingReader{left: total}
		banner := strings.NewReader("%%MatrixMarket matrix coordinate real general\n")
		_, err := c.UploadReader(ctx, io.MultiReader(banner, r), "huge.mtx", nil)
		if status.Code(err) != codes.ResourceExhausted {
			t.Fatalf("over-limit upload: %v, want RESOURCE_EXHAUSTED", err)
		}
		// The server stops at the limit; the client stops sending when the
		// stream closes. What it read past that is what flow control let
		// through, far less than the whole.
		if got := r.read.Load(); got >= total/2 {
			t.Errorf("the client read %d of %d bytes: the refusal came too late", got, total)
		}
		if !strings.Contains(h.logs.String(), "passed the server's limit") {
			t.Errorf("no refusal in the logs")
		}
	})
	t.Run("declared size over limit refused at once", func(t *testing.T) {
		_, err := c.UploadReader(ctx, strings.NewReader("%%MatrixMarket matrix coordinate real general\n"), "x.mtx",
			&client.UploadOptions{TotalBytes: limit + 1})
		if status.Code(err) != codes.ResourceExhausted {
			t.Fatalf("%v, want RESOURCE_EXHAUSTED", err)
		}
	})
	t.Run("size line of 1e12 entries refused before allocation", func(t *testing.T) {
		// A size line is "rows cols entries" (Boisvert, Pozo and Remington,
		// The Matrix Market Exchange Formats, NIST 1996, §3.1).
		text := "%%MatrixMarket matrix coordinate real general\n1000 1000 1000000000000\n1 1 1.0\n"
		_, err := c.UploadReader(ctx, strings.NewReader(text), "claims.mtx", nil)
		if status.Code(err) != codes.ResourceExhausted {
			t.Fatalf("%v, want RESOURCE_EXHAUSTED", err)
		}
	})
	t.Run("rows over limit refused", func(t *testing.T) {
		text := "%%MatrixMarket matrix coordinate real general\n5000 5000 1\n1 1 1.0\n"
		_, err := c.UploadReader(ctx, strings.NewReader(text), "wide.mtx", nil)
		if status.Code(err) != codes.ResourceExhausted {
			t.Fatalf("%v, want RESOURCE_EXHAUSTED", err)
		}
	})
	t.Run("malformed entry names its line", func(t *testing.T) {
		text := "%%MatrixMarket matrix coordinate real symmetric\n% a comment\n3 3 3\n1 1 2.0\n2 2 zwei\n3 3 2.0\n"
		_, err := c.UploadReader(ctx, strings.NewReader(text), "bad.mtx", nil)
		if status.Code(err) != codes.InvalidArgument || !strings.Contains(status.Convert(err).Message(), "bad.mtx:5") {
			t.Fatalf("%v, want INVALID_ARGUMENT naming bad.mtx:5", err)
		}
	})
	t.Run("truncated CSR_RAW", func(t *testing.T) {
		stream, err := c.RPC().UploadMatrix(ctx)
		if err != nil {
			t.Fatal(err)
		}
		stream.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Metadata{Metadata: &pb.UploadMetadata{
			Name: "short", Encoding: pb.MatrixEncoding_CSR_RAW, Rows: 2, Cols: 2, Nonzeros: 2}}})
		stream.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Chunk{Chunk: make([]byte, 20)}})
		_, err = stream.CloseAndRecv()
		if status.Code(err) != codes.InvalidArgument || !strings.Contains(status.Convert(err).Message(), "byte 20") {
			t.Fatalf("%v, want INVALID_ARGUMENT naming byte 20", err)
		}
	})
	// The chunking contract in the .proto puts the metadata first: a stream
	// that ends before it, for a matrix or a vector, is refused as such.
	t.Run("stream ends before the metadata", func(t *testing.T) {
		ms, err := c.RPC().UploadMatrix(ctx)
		if err != nil {
			t.Fatal(err)
		}
		_, err = ms.CloseAndRecv()
		if status.Code(err) != codes.InvalidArgument || !strings.Contains(status.Convert(err).Message(), "before its metadata") {
			t.Fatalf("matrix: %v, want INVALID_ARGUMENT saying the metadata is missing", err)
		}
		vs, err := c.RPC().UploadVector(ctx)
		if err != nil {
			t.Fatal(err)
		}
		_, err = vs.CloseAndRecv()
		if status.Code(err) != codes.InvalidArgument || !strings.Contains(status.Convert(err).Message(), "before its metadata") {
			t.Fatalf("vector: %v, want INVALID_ARGUMENT saying the metadata is missing", err)
		}
	})
	t.Run("checksum mismatch", func(t *testing.T) {
		text := "%%MatrixMarket matrix coordinate real general\n1 1 1\n1 1 1.0\n"
		_, err := c.UploadReader(ctx, strings.NewReader(text), "sum.mtx", &client.UploadOptions{ExpectedSHA256: strings.Repeat("0", 64)})
		if status.Code(err) != codes.InvalidArgument {
			t.Fatalf("%v, want INVALID_ARGUMENT", err)
		}
	})
	t.Run("too many right-hand sides", func(t *testing.T) {
		a := stencil.Poisson2D(4)
		m, err := c.UploadCSR(ctx, a, "p")
		if err != nil {
			t.Fatal(err)
		}
		bs := make([][]float64, DefaultMaxRHS+1)
		for i := range bs {
			bs[i] = onesRHS(a)
		}
		_, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: bs}, nil)
		if status.Code(err) != codes.ResourceExhausted {
			t.Fatalf("%v, want RESOURCE_EXHAUSTED", err)
		}
		_, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{{1, 2}}}, nil)
		if status.Code(err) != codes.InvalidArgument {
			t.Fatalf("short rhs: %v, want INVALID_ARGUMENT", err)
		}
		_, err = c.Solve(ctx, client.SolveRequest{MatrixID: "nope", B: [][]float64{{1}}}, nil)
		if status.Code(err) != codes.NotFound {
			t.Fatalf("unknown matrix: %v, want NOT_FOUND", err)
		}
		_, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{onesRHS(a)}, Request: solve.Request{RelTol: -1}}, nil)
		if status.Code(err) != codes.InvalidArgument {
			t.Fatalf("negative rtol: %v, want INVALID_ARGUMENT", err)
		}
		_, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{onesRHS(a)}, Request: solve.Request{Preconditioner: "multigrid"}}, nil)
		if status.Code(err) != codes.InvalidArgument {
			t.Fatalf("unknown preconditioner: %v, want INVALID_ARGUMENT", err)
		}
	})
}

// TestNotSPD: a symmetric matrix that is not positive definite fails
// with FAILED_PRECONDITION when CG is asked for, and is solved by MINRES
// under the automatic method; a nonsymmetric one is refused for CG.
func TestNotSPD(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	ctx := context.Background()
	// diag(1, −1): symmetric, indefinite. CG's first step on b = (1, 1)
	// meets pᵀA·p = 0 (Saad, 2nd ed., §6.7: CG needs A positive definite).
	indef := "%%MatrixMarket matrix coordinate real symmetric\n2 2 2\n1 1 1.0\n2 2 -1.0\n"
	m, err := c.UploadReader(ctx, strings.NewReader(indef), "indef.mtx", nil)
	if err != nil {
		t.Fatal(err)
	}
	out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{{1, 1}}, Request: solve.Request{Method: solve.CG, Preconditioner: "none"}}, nil)
	if status.Code(err) != codes.FailedPrecondition {
		t.Fatalf("%v, want FAILED_PRECONDITION", err)
	}
	if out.Outcome != solve.Breakdown || len(out.Results) != 1 || out.Results[0].Status != "breakdown" {
		t.Errorf("outcome %+v", out)
	}
	// Jacobi needs a positive diagonal (the diagonal of an SPD matrix is
	// positive: Golub and Van Loan, 4th ed., §4.2.1): the set-up fails, the
	// job goes from queued to its one result (saying what failed) and
	// finished, without an accepted event.
	var kinds []string
	// The automatic method sees the negative diagonal entry and runs MINRES
	// (with Jacobi on |diag(A)|), whose answer (1, −1) is exact here.
	out, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{{1, 1}}}, nil)
	if err != nil || out.Results[0].Method != "minres" || !out.Results[0].Converged || out.Results[0].MethodReason == "" {
		t.Errorf("auto on an indefinite matrix: %v, %+v", err, out.Results)
	}
	out, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{{1, 1}}, Request: solve.Request{Method: solve.CG, Preconditioner: "jacobi"}},
		func(e client.Event) {
			switch {
			case e.Queued != nil:
				kinds = append(kinds, "queued")
			case e.Accepted != nil:
				kinds = append(kinds, "accepted")
			case e.Result != nil:
				kinds = append(kinds, "result")
			case e.Finished != nil:
				kinds = append(kinds, "finished")
			}
		})
	if status.Code(err) != codes.FailedPrecondition || strings.Join(kinds, ",") != "queued,result,finished" ||
		out.Outcome != solve.SetupFailed || out.Results[0].Status != "setup-failed" || out.Results[0].Preconditioner != "jacobi" {
		t.Errorf("jacobi on a negative diagonal: %v, events %v, outcome %s", err, kinds, out.Outcome)
	}
	nonsym := "%%MatrixMarket matrix coordinate real general\n2 2 3\n1 1 2.0\n1 2 1.0\n2 2 2.0\n"
	m, err = c.UploadReader(ctx, strings.NewReader(nonsym), "nonsym.mtx", nil)
	if err != nil {
		t.Fatal(err)
	}
	if m.GetSymmetry() != "general" {
		t.Errorf("symmetry %q, want general", m.GetSymmetry())
	}
	_, err = c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{{1, 1}}}, nil)
	if status.Code(err) != codes.FailedPrecondition || !strings.Contains(err.Error(), "not symmetric") {
		t.Fatalf("%v, want FAILED_PRECONDITION saying not symmetric", err)
	}
}

// TestMemoryBudget: idle matrices are evicted least recently used first;
// a matrix in use is never evicted. The fairness window is a nanosecond
// here, so that every idle matrix may go (TestAbuseEvictionFairness tests
// the window itself).
func TestMemoryBudget(t *testing.T) {
	a := stencil.Poisson2D(40) // 1600 rows, 7840 entries: 12·7840 + 8·1601 = 106,888 bytes
	size := wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))
	h := startServer(t, Config{MemoryBudget: 2*size + size/2, ProtectRecent: time.Nanosecond})
	c := h.dial(t)
	ctx := context.Background()
	m1, err := c.UploadCSR(ctx, a, "first")
	if err != nil {
		t.Fatal(err)
	}
	b := stencil.Poisson2D(40)
	b.Val[0] = 5 // a different matrix of the same size
	m2, err := c.UploadCSR(ctx, b, "second")
	if err != nil {
		t.Fatal(err)
	}
	c3 := stencil.Poisson2D(40)
	c3.Val[0] = 6
	if _, err := c.UploadCSR(ctx, c3, "third"); err != nil {
		t.Fatal(err)
	}
	ms, _ := c.Matrices(ctx)
	var ids []string
	for _, m := range ms {
		ids = append(ids, m.GetName())
	}
	if strings.Join(ids, ",") != "third,second" {
		t.Fatalf("stored %v; want the least recently used (first) evicted", ids)
	}
	// Pin "second" with a running job; a new upload must then fail
	// rather than evict it (the job's vectors take the rest).
	gate := make(chan struct{})
	h.srv.testHookIteration = func(jctx context.Context, _ string, _, it int) {
		if it == 1 {
			select {
			case <-gate:
			case <-jctx.Done():
			}
		}
	}
	job, err := c.Solve(ctx, client.SolveRequest{MatrixID: m2.GetId(), B: [][]float64{onesRHS(b)}, Detach: true, Request: solve.Request{Preconditioner: "none"}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	big := stencil.Poisson2D(48)
	_, err = c.UploadCSR(ctx, big, "big")
	if status.Code(err) != codes.ResourceExhausted {
		t.Errorf("upload needing the pinned matrix's room: %v, want RESOURCE_EXHAUSTED", err)
	}
	if _, err := c.DeleteMatrix(ctx, m2.GetId()); status.Code(err) != codes.FailedPrecondition {
		t.Errorf("delete of a matrix in use: %v, want FAILED_PRECONDITION", err)
	}
	close(gate)
	if _, err := c.Watch(ctx, job.JobID, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := c.DeleteMatrix(ctx, m1.GetId()); status.Code(err) != codes.NotFound {
		t.Errorf("delete of an evicted matrix: %v, want NOT_FOUND", err)
	}
	if _, err := c.DeleteMatrix(ctx, m2.GetId()); err != nil {
		t.Errorf("delete after the job: %v", err)
	}
}

func TestAuth(t *testing.T) {
	dir := t.TempDir()
	const secret = "s3cret-token-value"
	tokenFile := filepath.Join(dir, "token")
	if err := os.WriteFile(tokenFile, []byte(secret+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	h := startServer(t, Config{TokenFile: tokenFile})
	ctx := context.Background()
	for _, tc := range []struct {
		name string
		opts []client.Option
		code codes.Code
	}{
		{"no token", nil, codes.Unauthenticated},
		{"wrong token", []client.Option{client.WithToken("guess")}, codes.Unauthenticated},
		{"token file", []client.Option{client.WithTokenFile(tokenFile)}, codes.OK},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := h.dial(t, tc.opts...)
			if _, err := c.Jobs(ctx); status.Code(err) != tc.code {
				t.Errorf("Jobs: %v, want %v", err, tc.code)
			}
			// Health checks need no token (orchestrator probes).
			if st, err := c.Health(ctx); err != nil || st.String() != "SERVING" {
				t.Errorf("health: %v %v", st, err)
			}
		})
	}
	if strings.Contains(h.logs.String(), secret) || strings.Contains(h.logs.String(), "guess") {
		t.Errorf("the logs show a token")
	}
}

func TestStatusMapping(t *testing.T) {
	for _, tc := range []struct {
		err  error
		code codes.Code
	}{
		{context.Canceled, codes.Canceled},
		{fmt.Errorf("stream ended: %w", context.DeadlineExceeded), codes.DeadlineExceeded},
		{invalidf("bad"), codes.InvalidArgument},
		{notFoundf("x"), codes.NotFound},
		{limitf("big"), codes.ResourceExhausted},
		{ErrUnauthenticated, codes.Unauthenticated},
		{ErrShuttingDown, codes.Unavailable},
		{fmt.Errorf("%w: x", ErrInUse), codes.FailedPrecondition},
		{fmt.Errorf("%w: y", solve.ErrNotSymmetric), codes.FailedPrecondition},
		{fmt.Errorf("%w: y", solve.ErrNotSquare), codes.FailedPrecondition},
		{&solve.SetupError{Preconditioner: "ic0", Err: errors.New("no pivot")}, codes.FailedPrecondition},
		{&solve.FieldError{Field: "rtol", Err: solve.ErrInvalid}, codes.InvalidArgument},
		{&wire.RawError{Err: wire.ErrColumn}, codes.InvalidArgument},
		{io.ErrUnexpectedEOF, codes.InvalidArgument},
		{status.Error(codes.Aborted, "from grpc"), codes.Aborted},
		{errors.New("something else"), codes.Internal},
		{ErrPanic, codes.Internal},
		{&matrixio.ParseError{Line: 3, Err: matrixio.ErrValue}, codes.InvalidArgument},
		{&matrixio.ParseError{Line: 2, Err: matrixio.ErrLimit}, codes.ResourceExhausted},
		{&krylov.BreakdownError{Err: krylov.ErrNotPositiveDefinite}, codes.FailedPrecondition},
		{&precond.BreakdownError{}, codes.FailedPrecondition},
		{&precond.DiagonalError{Err: precond.ErrNegativeDiagonal}, codes.FailedPrecondition},
	} {
		if got := status.Code(Status(tc.err)); got != tc.code {
			t.Errorf("Status(%v) = %v, want %v", tc.err, got, tc.code)
		}
	}
	if Status(nil) != nil {
		t.Errorf("Status(nil) != nil")
	}
}

// TestUploadForms: a gzip-compressed Matrix Market file, a correct
// expected SHA-256, and vector uploads of the wrong size.
func TestUploadForms(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t, client.WithChunkSize(1000))
	ctx := context.Background()
	_, gz := sharedMatrix(t, "bcsstk13.mtx.gz")
	m, err := c.UploadFile(ctx, gz, "")
	if err != nil {
		t.Fatal(err)
	}
	// The collection's index (MANIFEST.tsv): bcsstk13 is 2003×2003 with
	// 83883 entries in full storage.
	if m.GetRows() != 2003 || m.GetNonzeros() != 83883 || m.GetName() != "bcsstk13.mtx.gz" {
		t.Errorf("gzip upload: %v×%v, %v entries, name %q", m.GetRows(), m.GetCols(), m.GetNonzeros(), m.GetName())
	}
	text := "%%MatrixMarket matrix coordinate real general\n1 1 1\n1 1 4.0\n"
	h256 := sha256.Sum256([]byte(text))
	if _, err := c.UploadReader(ctx, strings.NewReader(text), "one.mtx", &client.UploadOptions{ExpectedSHA256: hex.EncodeToString(h256[:])}); err != nil {
		t.Errorf("upload with the right checksum: %v", err)
	}
	for _, tc := range []struct {
		name  string
		meta  *pb.VectorMetadata
		bytes int
		code  codes.Code
	}{
		{"short", &pb.VectorMetadata{Length: 4}, 31, codes.InvalidArgument},
		{"long", &pb.VectorMetadata{Length: 4}, 33, codes.InvalidArgument},
		{"over the row limit", &pb.VectorMetadata{Length: DefaultMaxRows + 1}, 8, codes.ResourceExhausted},
		{"exact", &pb.VectorMetadata{Length: 4}, 32, codes.OK},
	} {
		t.Run(tc.name, func(t *testing.T) {
			stream, err := c.RPC().UploadVector(ctx)
			if err != nil {
				t.Fatal(err)
			}
			stream.Send(&pb.UploadVectorRequest{Part: &pb.UploadVectorRequest_Metadata{Metadata: tc.meta}})
			stream.Send(&pb.UploadVectorRequest{Part: &pb.UploadVectorRequest_Chunk{Chunk: make([]byte, tc.bytes)}})
			_, err = stream.CloseAndRecv()
			if status.Code(err) != tc.code {
				t.Errorf("%v, want %v", err, tc.code)
			}
		})
	}
}
