package api

// The abuse suite of issue 15: each test plays a hostile or careless
// client against an in-process server (bufconn) and checks that the
// service holds the line. Each failed before the change it tests. The
// resident-memory checks against the real binary are in cmd/residua
// (abuse_e2e_test.go).

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/binary"
	"fmt"
	"math"
	"runtime"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/mem"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/client"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

// tridiag5 is the 5×5 matrix tridiag(−1, 2, −1), symmetric positive
// definite (its eigenvalues are 2 − 2cos(kπ/6) > 0: Golub & Van Loan,
// Matrix Computations 4th ed., §4.8.3).
func tridiag5() *sparse.CSR {
	return &sparse.CSR{Rows: 5, Cols: 5,
		RowPtr: []int{0, 2, 5, 8, 11, 13},
		ColIdx: []int32{0, 1, 0, 1, 2, 1, 2, 3, 2, 3, 4, 3, 4},
		Val:    []float64{2, -1, -1, 2, -1, -1, 2, -1, -1, 2, -1, -1, 2}}
}

// TestAbuseJobCeilings (finding 1): a request for rtol 1e-300 and 2^62
// iterations on a 5×5 system used to iterate forever; the server's
// ceilings now end it, the accepted event echoes them, and a request can
// lower them but not raise them.
func TestAbuseJobCeilings(t *testing.T) {
	a := tridiag5()
	// A right-hand side whose residual does not fall to exactly zero in
	// floating point (b = A·1 can, in the five steps that solve a 5×5
	// system exactly).
	b := []float64{math.Sin(1), math.Sin(2), math.Sin(3), math.Sin(4), math.Sin(5)}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()

	t.Run("iterations", func(t *testing.T) {
		h := startServer(t, Config{MaxJobIterations: 2000})
		c := h.dial(t)
		m, err := c.UploadCSR(ctx, a, "tridiag5")
		if err != nil {
			t.Fatal(err)
		}
		for _, tc := range []struct {
			ask, want int
		}{{1 << 62, 2000}, {0, 0}, {7, 7}} {
			out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b},
				Request: solve.Request{Preconditioner: "none", RelTol: 1e-300, MaxIter: tc.ask}}, nil)
			if err != nil {
				t.Fatal(err)
			}
			if got := out.Accepted.GetMaxIterCeiling(); got != 2000 {
				t.Errorf("max_iter %d: accepted event's ceiling %d, want 2000", tc.ask, got)
			}
			r := out.Results[0]
			// max_iter 0 means krylov's default, 10·n = 50, under the ceiling.
			want := tc.want
			if want == 0 {
				want = 50
			}
			if r.MaxIter != want || r.Iterations > want {
				t.Errorf("max_iter %d: ran %d iterations under a cap of %d, want the cap %d", tc.ask, r.Iterations, r.MaxIter, want)
			}
			// With rtol 1e-300 the solve can only stop at the cap or by
			// stagnation (whichever rule ends it first).
			if o := solve.Outcome(r.Status); o == solve.Converged {
				t.Errorf("max_iter %d: outcome %s", tc.ask, o)
			}
		}
	})

	t.Run("time", func(t *testing.T) {
		// A nanosecond of job time: the first check of the clock, after
		// the first iteration, ends each right-hand side (krylov checks
		// the time limit once per iteration).
		h := startServer(t, Config{MaxJobTime: time.Nanosecond})
		c := h.dial(t)
		m, err := c.UploadCSR(ctx, a, "tridiag5")
		if err != nil {
			t.Fatal(err)
		}
		out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{b, b},
			Request: solve.Request{Preconditioner: "none", RelTol: 1e-300, MaxIter: 1 << 62, TimeLimit: time.Hour}}, nil)
		if err != nil {
			t.Fatal(err)
		}
		if got := out.Accepted.GetTimeCeilingSeconds(); got != 1e-9 {
			t.Errorf("accepted event's time ceiling %g s, want 1e-9", got)
		}
		for i, r := range out.Results {
			if solve.Outcome(r.Status) != solve.TimeLimit || float64(r.TimeLimitSeconds) > 1e-9 {
				t.Errorf("rhs %d: outcome %s under a time limit of %g s; want time-limit under the 1 ns ceiling", i, r.Status, float64(r.TimeLimitSeconds))
			}
		}
	})
}

// matrixMarket is a coordinate general file with one entry at (1, 1).
func matrixMarket(n int, v float64) string {
	return fmt.Sprintf("%%%%MatrixMarket matrix coordinate real general\n%d %d 1\n1 1 %g\n", n, n, v)
}

// allocatedDuring returns the bytes the process allocated while f ran
// (runtime.MemStats.TotalAlloc only grows, so the difference bounds what f
// and everything running beside it allocated).
func allocatedDuring(f func()) uint64 {
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	f()
	runtime.ReadMemStats(&after)
	return after.TotalAlloc - before.TotalAlloc
}

// TestAbuseMostlyEmpty (finding 2): a 72-byte upload declaring 50,000,000
// rows and one entry used to be stored at 400 MB of row pointers. It is
// refused at the size line (or CSR_RAW metadata) now, before anything is
// allocated; a server that allows such matrices charges the row pointers
// against the budget before allocating them.
func TestAbuseMostlyEmpty(t *testing.T) {
	ctx := context.Background()
	t.Run("refused", func(t *testing.T) {
		h := startServer(t, Config{})
		c := h.dial(t)
		text := matrixMarket(50_000_000, 1)
		var err error
		alloc := allocatedDuring(func() { _, err = c.UploadReader(ctx, strings.NewReader(text), "hollow", nil) })
		if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), "empty rows are legal") ||
			!strings.Contains(err.Error(), "--allow-mostly-empty") {
			t.Errorf("Matrix Market upload of %d bytes: %v, want INVALID_ARGUMENT naming the flag", len(text), err)
		}
		// 50,000,001 row pointers are 400 MB; the refusal allocates
		// nothing of that order (our bound: 32 MiB, for the server's and
		// the test's own buffers).
		if alloc > 32<<20 {
			t.Errorf("the refused upload allocated %d bytes", alloc)
		}
		stream, err := c.RPC().UploadMatrix(ctx)
		if err != nil {
			t.Fatal(err)
		}
		stream.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Metadata{Metadata: &pb.UploadMetadata{
			Name: "hollow-raw", Encoding: pb.MatrixEncoding_CSR_RAW, Rows: 50_000_000, Cols: 50_000_000, Nonzeros: 1}}})
		if _, err := stream.CloseAndRecv(); status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), "allow-mostly-empty") {
			t.Errorf("CSR_RAW metadata of 50,000,000 rows and 1 entry: %v, want INVALID_ARGUMENT", err)
		}
		if used, _ := h.srv.store.usage(); used != 0 {
			t.Errorf("%d bytes in use after the refusals", used)
		}
	})
	t.Run("charged", func(t *testing.T) {
		h := startServer(t, Config{AllowMostlyEmpty: true, MemoryBudget: 64 << 20})
		c := h.dial(t)
		var err error
		alloc := allocatedDuring(func() {
			_, err = c.UploadReader(ctx, strings.NewReader(matrixMarket(50_000_000, 1)), "hollow", nil)
		})
		if status.Code(err) != codes.ResourceExhausted || !strings.Contains(err.Error(), "needs 381.5 MiB") {
			t.Errorf("upload of a 50,000,000-row matrix into a 64 MiB budget: %v, want RESOURCE_EXHAUSTED for 381.5 MiB", err)
		}
		if alloc > 32<<20 {
			t.Errorf("the refused upload allocated %d bytes: the cost was not charged before allocating", alloc)
		}
		// A mostly empty matrix that fits is stored: empty rows are legal.
		if _, err := c.UploadReader(ctx, strings.NewReader(matrixMarket(1000, 1)), "small-hollow", nil); err != nil {
			t.Errorf("allowed mostly empty 1000×1000: %v", err)
		}
	})
}

// TestAbuseEvictionFairness (finding 2): one client's uploads used to
// evict another client's matrix, whose next solve got NOT_FOUND. Now a
// matrix used within the protection window stays and the upload that
// needs its room is refused with RESOURCE_EXHAUSTED, saying why.
func TestAbuseEvictionFairness(t *testing.T) {
	a := stencil.Poisson2D(40)
	size := wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))
	// Room for two matrices and a job's vectors (0.84 of a matrix here),
	// not three matrices.
	h := startServer(t, Config{MemoryBudget: 2*size + size*9/10})
	alice, mallory := h.dial(t), h.dial(t)
	ctx := context.Background()
	mine, err := alice.UploadCSR(ctx, a, "alice's")
	if err != nil {
		t.Fatal(err)
	}
	other := stencil.Poisson2D(40)
	other.Val[0] = 5
	if _, err := mallory.UploadCSR(ctx, other, "mallory's first"); err != nil {
		t.Fatal(err)
	}
	third := stencil.Poisson2D(40)
	third.Val[0] = 6
	_, err = mallory.UploadCSR(ctx, third, "mallory's second")
	if status.Code(err) != codes.ResourceExhausted || !strings.Contains(err.Error(), "used within the last 10m0s") {
		t.Errorf("upload that needs a recently used matrix's room: %v, want RESOURCE_EXHAUSTED naming the window", err)
	}
	// A Jacobi preconditioner (12.5 KiB) does not fit beside the job's
	// vectors: the solve says so, RESOURCE_EXHAUSTED (it used to end in
	// NOT_FOUND, for the solution that the failed set-up never made).
	_, err = alice.Solve(ctx, client.SolveRequest{MatrixID: mine.GetId(), B: [][]float64{onesRHS(a)}, Request: solve.Request{Preconditioner: "jacobi"}}, nil)
	if status.Code(err) != codes.ResourceExhausted {
		t.Errorf("solve whose preconditioner does not fit: %v, want RESOURCE_EXHAUSTED", err)
	}
	out, err := alice.Solve(ctx, client.SolveRequest{MatrixID: mine.GetId(), B: [][]float64{onesRHS(a)}, Request: solve.Request{Preconditioner: "none"}}, nil)
	if err != nil || out.Outcome != solve.Converged {
		t.Errorf("alice's solve after mallory's uploads: %v, outcome %q", err, out.Outcome)
	}
}

// csrRawStream opens a CSR_RAW upload with the given sizes.
func csrRawStream(t *testing.T, ctx context.Context, c *client.Client, name string, rows, nnz int64) pb.Solver_UploadMatrixClient {
	t.Helper()
	s, err := c.RPC().UploadMatrix(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Metadata{Metadata: &pb.UploadMetadata{
		Name: name, Encoding: pb.MatrixEncoding_CSR_RAW, Rows: rows, Cols: rows, Nonzeros: nnz}}}); err != nil {
		t.Fatal(err)
	}
	return s
}

// TestAbuseStalledUpload (finding 3): CSR_RAW metadata declaring most of
// the budget, then silence with the stream open, used to hold the budget
// forever and the refusal of the next upload blamed queued or running
// jobs. Now an upload holds memory only as its bytes arrive (at most
// wire.GrowAmplification times what it sent), one that stops sending is
// dropped after the idle timeout, and a refusal names the upload.
func TestAbuseStalledUpload(t *testing.T) {
	// 4,000 rows of 75 entries (columns 0..74): 3.6 MB of CSR arrays.
	const rows, per = 4000, 75
	const nnz = rows * per
	total := wire.CSRBytes(rows, nnz)
	// The budget holds the small matrix (3,976 bytes) and the stalled
	// upload, but not the second matrix (5,084 bytes) beside them.
	h := startServer(t, Config{MemoryBudget: total + 8192, UploadIdleTimeout: time.Second})
	c := h.dial(t)
	ctx := context.Background()
	small := stencil.Poisson2D(8)
	used := func() int64 { u, _ := h.srv.store.usage(); return u }

	// Metadata and a byte: nothing is held, another upload goes through.
	silent := csrRawStream(t, ctx, c, "silent", rows, nnz)
	if err := silent.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Chunk{Chunk: []byte{0}}}); err != nil {
		t.Fatal(err)
	}
	time.Sleep(50 * time.Millisecond)
	if u := used(); u != 0 {
		t.Errorf("metadata and one byte hold %d bytes", u)
	}
	m, err := c.UploadCSR(ctx, small, "small")
	if err != nil {
		t.Fatalf("upload beside a silent one: %v", err)
	}
	// Wait for the answer without closing the sending side (which would
	// end the data).
	if err := silent.RecvMsg(new(pb.Matrix)); status.Code(err) != codes.DeadlineExceeded || !strings.Contains(err.Error(), "idle timeout") {
		t.Errorf("silent upload: %v, want DEADLINE_EXCEEDED after the idle timeout", err)
	}

	// The row pointers, the column indices and 1.5 MiB of the 2.4 MB of
	// values (the layout of the .proto), then silence: what the upload
	// holds stays within wire.GrowAmplification times what it sent, the
	// refusal of the next upload names the upload in progress, and the
	// timeout releases it.
	var data []byte
	for i := 0; i <= rows; i++ {
		data = binary.LittleEndian.AppendUint64(data, uint64(per*i))
	}
	for range rows {
		for j := range per {
			data = binary.LittleEndian.AppendUint32(data, uint32(j))
		}
	}
	data = append(data, make([]byte, 3<<19)...)
	stalled := csrRawStream(t, ctx, c, "stalled", rows, nnz)
	for b := data; len(b) > 0; b = b[min(len(b), 1<<20):] {
		if err := stalled.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Chunk{Chunk: b[:min(len(b), 1<<20)]}}); err != nil {
			t.Fatal(err)
		}
	}
	base := m.GetBytes()
	deadline := time.Now().Add(5 * time.Second)
	for used() < base+total && time.Now().Before(deadline) {
		time.Sleep(5 * time.Millisecond)
	}
	if u := used() - base; u > wire.GrowAmplification*int64(len(data)) {
		t.Errorf("the stalled upload holds %d bytes for %d sent", u, len(data))
	}
	second := stencil.Poisson2D(9)
	_, err = c.UploadCSR(ctx, second, "second")
	if status.Code(err) != codes.ResourceExhausted || !strings.Contains(err.Error(), human(total)+" reserved by uploads in progress") {
		t.Errorf("upload beside a stalled one: %v, want RESOURCE_EXHAUSTED naming the upload in progress (%s)", err, human(total))
	}
	if err := stalled.RecvMsg(new(pb.Matrix)); status.Code(err) != codes.DeadlineExceeded {
		t.Errorf("stalled upload: %v, want DEADLINE_EXCEEDED", err)
	}
	if _, err := c.UploadCSR(ctx, second, "second"); err != nil {
		t.Errorf("upload after the stalled one timed out: %v", err)
	}

	// A vector upload that declares a length and sends nothing holds
	// nothing either.
	vs, err := c.RPC().UploadVector(ctx)
	if err != nil {
		t.Fatal(err)
	}
	vs.Send(&pb.UploadVectorRequest{Part: &pb.UploadVectorRequest_Metadata{Metadata: &pb.VectorMetadata{Name: "silent", Length: rows}}})
	vs.Send(&pb.UploadVectorRequest{Part: &pb.UploadVectorRequest_Chunk{Chunk: make([]byte, 8)}})
	time.Sleep(50 * time.Millisecond)
	h.srv.store.mu.Lock()
	held := h.srv.store.uploading
	h.srv.store.mu.Unlock()
	if held > 8*rows {
		t.Errorf("a vector upload of one entry holds %d bytes", held)
	}
	if _, err := vs.CloseAndRecv(); status.Code(err) != codes.InvalidArgument {
		t.Errorf("short vector upload: %v, want INVALID_ARGUMENT", err)
	}
}

// TestAbuseSmall (finding 5): gzip errors, the expected_sha256 format, and
// CSR_RAW errors that give the byte offset and the row.
func TestAbuseSmall(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	ctx := context.Background()

	upload := func(meta *pb.UploadMetadata, chunks ...[]byte) error {
		s, err := c.RPC().UploadMatrix(ctx)
		if err != nil {
			t.Fatal(err)
		}
		s.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Metadata{Metadata: meta}})
		for _, ch := range chunks {
			s.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Chunk{Chunk: ch}})
		}
		_, err = s.CloseAndRecv()
		return err
	}
	// gzip: no data, a truncated member, and garbage after a good member
	// are all the client's to fix (RFC 1952 defines the member format).
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write([]byte(matrixMarket(2, 1)))
	zw.Close()
	good := gz.Bytes()
	for name, chunks := range map[string][][]byte{
		"empty":     nil,
		"truncated": {good[:len(good)-6]},
		"trailing":  {good, []byte("not gzip at all")},
	} {
		err := upload(&pb.UploadMetadata{Name: name, Encoding: pb.MatrixEncoding_MATRIX_MARKET, Gzip: true}, chunks...)
		if status.Code(err) != codes.InvalidArgument {
			t.Errorf("gzip %s: %v, want INVALID_ARGUMENT", name, err)
		}
	}

	// A malformed expected_sha256 is refused at the metadata: the stream
	// is answered before any chunk is sent.
	for _, bad := range []string{"xyz", strings.Repeat("g", 64), strings.Repeat("a", 63)} {
		s, err := c.RPC().UploadMatrix(ctx)
		if err != nil {
			t.Fatal(err)
		}
		s.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Metadata{Metadata: &pb.UploadMetadata{
			Name: "sum", Encoding: pb.MatrixEncoding_MATRIX_MARKET, ExpectedSha256: bad}}})
		var m pb.Matrix
		err = s.RecvMsg(&m) // without closing the sending side
		if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), "expected_sha256") {
			t.Errorf("expected_sha256 %q: %v, want INVALID_ARGUMENT at the metadata", bad, err)
		}
	}

	// CSR_RAW: a NaN value of row 3 (1-based) and data that end inside
	// the column indices of row 2 give the byte offset and the row. The
	// layout is the .proto's: 8·(rows+1) bytes of row pointers, then 4
	// bytes per column index, then 8 per value.
	a := tridiag5()
	var raw []byte
	wire.EncodeCSR(a, 1<<20, func(b []byte) error { raw = append(raw, b...); return nil })
	bad := append([]byte(nil), raw...)
	k := a.RowPtr[2] // the first entry of row 3
	off := 8*6 + 4*13 + 8*k
	binary.LittleEndian.PutUint64(bad[off:], math.Float64bits(math.NaN()))
	meta := &pb.UploadMetadata{Name: "raw", Encoding: pb.MatrixEncoding_CSR_RAW, Rows: 5, Cols: 5, Nonzeros: 13}
	err := upload(meta, bad)
	if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), fmt.Sprintf("byte %d (values entry %d, row 3)", off, k)) {
		t.Errorf("NaN in row 3: %v, want the byte offset %d and row 3", err, off)
	}
	cut := 8*6 + 4*3 // inside row 2's column indices (entries 2..4)
	err = upload(meta, raw[:cut])
	if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), fmt.Sprintf("byte %d (column indices entry 3, row 2)", cut)) {
		t.Errorf("data ending in row 2: %v, want the byte offset %d and row 2", err, cut)
	}
}

// rawCodec sends pre-encoded bytes, so that the test can send a request
// the Go client would first have to build (and pay for) in memory.
type rawCodec struct{}

func (rawCodec) Name() string { return "proto" }
func (rawCodec) Marshal(v any) (mem.BufferSlice, error) {
	return mem.BufferSlice{mem.SliceBuffer(*v.(*[]byte))}, nil
}
func (rawCodec) Unmarshal(data mem.BufferSlice, v any) error {
	return proto.Unmarshal(data.Materialize(), v.(proto.Message))
}

// TestAbuseManyReferences (finding 5): a 2 MB request of a million empty
// right-hand-side references used to be decoded whole (some 70 MB) before
// the count was checked. It is refused now having decoded only
// MaxRHS+1 of them.
func TestAbuseManyReferences(t *testing.T) {
	h := startServer(t, Config{})
	c := h.dial(t)
	ctx := context.Background()
	m, err := c.UploadCSR(ctx, tridiag5(), "tridiag5")
	if err != nil {
		t.Fatal(err)
	}
	// The wire format (protobuf encoding, field 1 matrix_id and field 2
	// rhs, each length-delimited): an empty VectorRef is a tag and a zero
	// length.
	msg := protowire.AppendTag(nil, 1, protowire.BytesType)
	msg = protowire.AppendString(msg, m.GetId())
	const refs = 1_000_000
	for range refs {
		msg = protowire.AppendTag(msg, solveRHSField, protowire.BytesType)
		msg = protowire.AppendVarint(msg, 0)
	}
	var callErr error
	alloc := allocatedDuring(func() {
		s, err := c.Conn().NewStream(ctx, &grpc.StreamDesc{ServerStreams: true}, pb.Solver_Solve_FullMethodName, grpc.ForceCodecV2(rawCodec{}))
		if err != nil {
			t.Fatal(err)
		}
		if err := s.SendMsg(&msg); err != nil {
			t.Fatal(err)
		}
		s.CloseSend()
		callErr = s.RecvMsg(new(pb.JobEvent))
	})
	if status.Code(callErr) != codes.ResourceExhausted || !strings.Contains(callErr.Error(), "limit of 64") {
		t.Errorf("a million right-hand sides: %v, want RESOURCE_EXHAUSTED", callErr)
	}
	// The message is 2 MB; the transport, the codec and the test's own
	// copies take a few times that. Decoding every reference took over
	// 70 MB (our measurement before the change: 72 bytes a reference).
	if alloc > 24<<20 {
		t.Errorf("refusing a %d-byte request allocated %d bytes", len(msg), alloc)
	}
}
