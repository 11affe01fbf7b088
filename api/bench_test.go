package api

import (
	"bytes"
	"context"
	"io"
	"log/slog"
	"net"
	"testing"
	"time"

	"github.com/residua/residua/client"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

// benchServer starts a server on a TCP loopback port (real sockets, as a
// client on the same machine would use) and returns a client for it.
func benchServer(b *testing.B, cfg Config) *client.Client {
	b.Helper()
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		b.Fatal(err)
	}
	cfg.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	srv, err := NewServer(cfg)
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ctx, lis) }()
	c, err := client.Dial(context.Background(), lis.Addr().String())
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() {
		c.Close()
		cancel()
		<-done
	})
	return c
}

// BenchmarkUpload measures upload throughput over loopback TCP, in bytes
// sent per second, for Matrix Market text and raw CSR arrays of the same
// matrix (a 3D Poisson problem, 50³ unknowns, 8.6·10⁵ entries). Each
// upload is parsed in full and hashed even though the matrix is already
// stored after the first.
func BenchmarkUpload(b *testing.B) {
	a := stencil.Poisson3D(50)
	var text bytes.Buffer
	if err := matrixio.WriteMatrix(&text, a, sparse.General); err != nil {
		b.Fatal(err)
	}
	c := benchServer(b, Config{})
	ctx := context.Background()
	b.Run("matrix-market", func(b *testing.B) {
		b.SetBytes(int64(text.Len()))
		for b.Loop() {
			if _, err := c.UploadReader(ctx, bytes.NewReader(text.Bytes()), "p50.mtx", nil); err != nil {
				b.Fatal(err)
			}
		}
	})
	// The same text parsed in process by matrixio, without the service:
	// the baseline the matrix-market figure is to be read against.
	b.Run("matrix-market-local-parse", func(b *testing.B) {
		b.SetBytes(int64(text.Len()))
		for b.Loop() {
			if _, _, err := matrixio.ReadMatrix(bytes.NewReader(text.Bytes()), nil); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("csr-raw", func(b *testing.B) {
		b.SetBytes(wire.CSRBytes(int64(a.Rows), int64(a.NNZ())))
		for b.Loop() {
			if _, err := c.UploadCSR(ctx, a, "p50"); err != nil {
				b.Fatal(err)
			}
		}
	})
}

// BenchmarkRemoteSolve compares, in one run, an end-to-end remote solve
// (upload as raw CSR, upload the right-hand side, solve, stream the
// solution back) with the same solve embedded in the process (the
// preconditioner set-up and CG on the matrix in memory), on a 3D Poisson
// problem of 120³ unknowns (1.2·10⁷ entries). It reports remote/embedded,
// the service's overhead on a large solve (the target is ≤ 1.10), and the
// remote time's parts: the matrix upload, and the server's set-up and
// iterations. Rounds alternate which of the two runs first, so a drift in
// the machine's load falls on both alike. The two x are checked bitwise
// equal.
func BenchmarkRemoteSolve(b *testing.B) {
	a := stencil.Poisson3D(120)
	rhs := onesRHS(a)
	c := benchServer(b, Config{})
	ctx := context.Background()
	const kind = precond.KindJacobi
	var embedded, remote, upload, serverSolve time.Duration
	var iters int
	var xe []float64
	runEmbedded := func() {
		start := time.Now()
		choice, err := precond.New(a, kind)
		if err != nil {
			b.Fatal(err)
		}
		x := make([]float64, len(rhs))
		res, err := krylov.CG(ctx, a, rhs, x, choice.M, krylov.Settings{})
		if err != nil || res.Status != krylov.Converged {
			b.Fatalf("embedded solve: %v %v", res.Status, err)
		}
		embedded += time.Since(start)
		iters, xe = res.Iterations, x
	}
	var xr []float64
	runRemote := func() {
		start := time.Now()
		m, err := c.UploadCSR(ctx, a, "poisson3d-120")
		if err != nil {
			b.Fatal(err)
		}
		upload += time.Since(start)
		out, err := c.Solve(ctx, client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{rhs}, Request: solve.Request{Preconditioner: string(kind)}}, nil)
		if err != nil {
			b.Fatal(err)
		}
		remote += time.Since(start)
		r := out.Results[0]
		serverSolve += time.Duration((r.SetupSeconds + r.SolveSeconds) * 1e9)
		xr = out.X[0]
		// Delete the matrix and its preconditioner, so the next round
		// uploads and sets up again.
		if _, err := c.DeleteMatrix(ctx, m.GetId()); err != nil {
			b.Fatal(err)
		}
	}
	round := 0
	for b.Loop() {
		if round%2 == 0 {
			runEmbedded()
			runRemote()
		} else {
			runRemote()
			runEmbedded()
		}
		round++
		for i := range xe {
			if xe[i] != xr[i] {
				b.Fatalf("remote x differs from embedded x at %d", i)
			}
		}
	}
	n := float64(b.N)
	b.ReportMetric(float64(remote)/float64(embedded), "remote/embedded")
	b.ReportMetric(embedded.Seconds()/n, "embedded-s/op")
	b.ReportMetric(upload.Seconds()/n, "upload-s/op")
	b.ReportMetric(serverSolve.Seconds()/n, "server-solve-s/op")
	b.ReportMetric(float64(iters), "iterations")
}
