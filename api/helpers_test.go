package api

import (
	"bytes"
	"context"
	"log/slog"
	"math"
	"net"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"go.uber.org/goleak"
	"google.golang.org/grpc"
	"google.golang.org/grpc/test/bufconn"

	"github.com/residua/residua/client"
	"github.com/residua/residua/internal/shared"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
)

// syncBuffer is a bytes.Buffer safe for the logger's concurrent writes.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// harness is a server on an in-process bufconn listener.
type harness struct {
	srv  *Server
	lis  *bufconn.Listener
	logs *syncBuffer
	stop func() // shuts the server down and waits for Serve to return
}

// startServer starts a server with cfg and registers its shutdown and a
// goroutine-leak check for the end of the test. The sparse worker pool,
// which lives as long as the process by design, is started first so the
// leak check's snapshot includes it.
func startServer(t *testing.T, cfg Config) *harness {
	t.Helper()
	lis := bufconn.Listen(1 << 20)
	h := startServerOn(t, cfg, lis)
	h.lis = lis
	return h
}

// startServerOn is startServer on a given listener.
func startServerOn(t *testing.T, cfg Config, lis net.Listener) *harness {
	t.Helper()
	sparse.Workers()
	ignore := goleak.IgnoreCurrent()
	h := &harness{logs: &syncBuffer{}}
	cfg.Logger = slog.New(slog.NewTextHandler(h.logs, nil))
	srv, err := NewServer(cfg)
	if err != nil {
		t.Fatal(err)
	}
	h.srv = srv
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ctx, lis) }()
	var once sync.Once
	h.stop = func() {
		once.Do(func() {
			cancel()
			if err := <-done; err != nil {
				t.Errorf("Serve: %v", err)
			}
		})
	}
	t.Cleanup(func() {
		h.stop()
		goleak.VerifyNone(t, ignore)
	})
	return h
}

// dial connects a client to the harness's server; the client is closed
// at the end of the test (before the server stops).
func (h *harness) dial(t *testing.T, opts ...client.Option) *client.Client {
	t.Helper()
	opts = append(opts, client.WithDialOptions(grpc.WithContextDialer(func(ctx context.Context, _ string) (net.Conn, error) {
		return h.lis.DialContext(ctx)
	})))
	c, err := client.Dial(context.Background(), "passthrough:///bufconn", opts...)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

// sharedMatrix reads a matrix of the shared SuiteSparse folder (skipping
// the test when the folder is absent) and returns it with its path.
func sharedMatrix(t testing.TB, file string) (*sparse.CSR, string) {
	t.Helper()
	path := filepath.Join(shared.Matrices(t), file)
	a, _, err := matrixio.ReadMatrixFile(path, nil)
	if err != nil {
		t.Fatal(err)
	}
	return a, path
}

// onesRHS returns b = A·1, so the exact solution is the vector of ones.
func onesRHS(a *sparse.CSR) []float64 {
	ones := make([]float64, a.Cols)
	for i := range ones {
		ones[i] = 1
	}
	b := make([]float64, a.Rows)
	a.MulVec(b, ones)
	return b
}

// relResidual returns ‖b − A·x‖₂/‖b‖₂ computed here, independently of the
// server.
func relResidual(a *sparse.CSR, b, x []float64) float64 {
	ax := make([]float64, a.Rows)
	a.MulVec(ax, x)
	var r, nb float64
	for i := range b {
		d := b[i] - ax[i]
		r += d * d
		nb += b[i] * b[i]
	}
	return math.Sqrt(r) / math.Sqrt(nb)
}

// localSolve runs the same solve in process: the embedded path the
// service must match bit for bit.
func localSolve(t testing.TB, a *sparse.CSR, b []float64, kind precond.Kind, s krylov.Settings) ([]float64, krylov.Result) {
	t.Helper()
	choice, err := precond.New(a, kind)
	if err != nil {
		t.Fatal(err)
	}
	var m krylov.Preconditioner
	if choice.M != nil {
		m = choice.M
	}
	x := make([]float64, len(b))
	res, err := krylov.CG(context.Background(), a, b, x, m, s)
	if err != nil {
		t.Fatal(err)
	}
	return x, res
}

// waitFor polls cond until it holds or the time runs out.
func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(20 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(5 * time.Millisecond)
	}
}
