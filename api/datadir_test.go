package api

import (
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/client"
	"github.com/residua/residua/csrfile"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
	"github.com/residua/residua/wire"
)

func solveByID(t *testing.T, c *client.Client, id string, b []float64) []float64 {
	t.Helper()
	out, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: id, B: [][]float64{b},
		Request: solve.Request{Preconditioner: "ic0", RelTol: 1e-10}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if out.Outcome != solve.Converged || len(out.X) != 1 {
		t.Fatalf("outcome %s, %d solutions", out.Outcome, len(out.X))
	}
	return out.X[0]
}

// TestDataDirRestart: a matrix uploaded to a server with a data folder is
// there after a restart (listed at once, loaded on first use) and solves to
// bitwise the same x; the file is the csrfile of the matrix, named by its
// wire.MatrixID.
func TestDataDirRestart(t *testing.T) {
	dir := t.TempDir()
	a := stencil.Poisson3D(9)
	b := onesRHS(a)
	h1 := startServer(t, Config{DataDir: dir})
	c1 := h1.dial(t)
	m, err := c1.UploadCSR(context.Background(), a, "block")
	if err != nil {
		t.Fatal(err)
	}
	if m.GetId() != wire.MatrixID(a) {
		t.Fatalf("id %s, want wire.MatrixID", m.GetId())
	}
	// The reply means the file is complete on disk.
	back, _, err := csrfile.ReadMatrix(filepath.Join(dir, "matrices", m.GetId()+".csr"))
	if err != nil || !slices.Equal(back.Val, a.Val) {
		t.Fatalf("the stored file: %v", err)
	}
	x1 := solveByID(t, c1, m.GetId(), b)
	c1.Close()
	h1.stop()

	h2 := startServer(t, Config{DataDir: dir})
	c2 := h2.dial(t)
	list, err := c2.Matrices(context.Background())
	if err != nil || len(list) != 1 || list[0].GetId() != m.GetId() || list[0].GetName() != "block" || list[0].GetSymmetry() != "symmetric" {
		t.Fatalf("after restart: %v, %v", list, err)
	}
	x2 := solveByID(t, c2, m.GetId(), b)
	if !slices.EqualFunc(x1, x2, func(p, q float64) bool { return math.Float64bits(p) == math.Float64bits(q) }) {
		t.Fatal("the solve after the restart differs from the one before")
	}
	// Independent check of the answer: b = A·1, so x = 1.
	if r := relResidual(a, b, x2); r > 1e-10 {
		t.Errorf("relative residual %g", r)
	}
	if !strings.Contains(h2.logs.String(), "data folder: matrix loaded") {
		t.Errorf("no log line for the lazy load:\n%s", h2.logs.String())
	}
	// Deleting removes the file too.
	if _, err := c2.DeleteMatrix(context.Background(), m.GetId()); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(dir, "matrices", m.GetId()+".csr")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("file left after DeleteMatrix: %v", err)
	}
}

// TestDataDirDamaged: start-up quarantines, with a log line naming each,
// a truncated file, a file with a torn header, a file under a name that is
// not its id, and removes a temporary file left by a killed writer; a file
// whose header is intact but whose values were altered is caught by its
// checksum on first use and quarantined then; the intact matrix is served
// throughout.
func TestDataDirDamaged(t *testing.T) {
	dir := t.TempDir()
	md := filepath.Join(dir, "matrices")
	os.MkdirAll(md, 0o755)
	write := func(a *sparse.CSR, name string) string {
		t.Helper()
		id := wire.MatrixID(a)
		meta, err := proto.Marshal(newMatrixEntry(a, name, id, wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))).info)
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(md, id+".csr")
		if _, err := csrfile.WriteMatrix(p, a, id, meta); err != nil {
			t.Fatal(err)
		}
		return p
	}
	good := stencil.Poisson2D(6)
	write(good, "good")
	truncated := write(stencil.Poisson2D(7), "truncated")
	raw, _ := os.ReadFile(truncated)
	os.WriteFile(truncated, raw[:len(raw)-9], 0o644)
	tornHead := write(stencil.Poisson2D(8), "torn")
	raw, _ = os.ReadFile(tornHead)
	raw[30] ^= 0xff
	os.WriteFile(tornHead, raw, 0o644)
	misnamed := write(stencil.Poisson2D(9), "misnamed")
	wrong := filepath.Join(md, strings.Repeat("ab", 32)+".csr")
	os.Rename(misnamed, wrong)
	altered := write(stencil.Poisson2D(10), "altered")
	raw, _ = os.ReadFile(altered)
	raw[len(raw)-20] ^= 0x01 // inside the values, checked on first use
	os.WriteFile(altered, raw, 0o644)
	os.WriteFile(filepath.Join(md, ".x.csr.tmp-123"), []byte("partial"), 0o644)

	h := startServer(t, Config{DataDir: dir})
	logs := h.logs.String()
	for _, f := range []string{truncated, tornHead, wrong} {
		if !strings.Contains(logs, "quarantined a damaged file") || !strings.Contains(logs, f) {
			t.Errorf("no quarantine line for %s:\n%s", f, logs)
		}
	}
	if !strings.Contains(logs, "removed a partial write") {
		t.Errorf("no line for the temporary file:\n%s", logs)
	}
	c := h.dial(t)
	list, _ := c.Matrices(context.Background())
	var names []string
	for _, m := range list {
		names = append(names, m.GetName())
	}
	slices.Sort(names)
	if !slices.Equal(names, []string{"altered", "good"}) {
		t.Fatalf("listed %v, want the two with intact headers", names)
	}
	alteredID := strings.TrimSuffix(filepath.Base(altered), ".csr")
	_, err := c.Solve(context.Background(), client.SolveRequest{MatrixID: alteredID, B: [][]float64{make([]float64, 100)}}, nil)
	if status.Code(err) != codes.NotFound || !strings.Contains(err.Error(), "quarantined") {
		t.Errorf("solve on the altered matrix: %v, want NotFound saying it was quarantined", err)
	}
	x := solveByID(t, c, wire.MatrixID(good), onesRHS(good))
	if r := relResidual(good, onesRHS(good), x); r > 1e-10 {
		t.Errorf("the intact matrix: relative residual %g", r)
	}
	q, _ := os.ReadDir(filepath.Join(dir, "quarantine"))
	if len(q) != 4 {
		t.Errorf("%d files in quarantine, want 4", len(q))
	}
	left, _ := os.ReadDir(md)
	if len(left) != 1 {
		t.Errorf("matrices left: %v, want only the intact one", left)
	}
}

// TestDataDirBudget: the disk budget evicts the least recently used idle
// matrix to make room, and refuses with RESOURCE_EXHAUSTED and the figures
// a matrix larger than the budget.
func TestDataDirBudget(t *testing.T) {
	dir := t.TempDir()
	small := stencil.Poisson2D(20) // about 27 KB as a csrfile
	other := stencil.Poisson2D(21)
	budget := int64(1.5 * float64(csrfile.Bytes(csrfile.Matrix, other.Rows, other.NNZ(), wire.MatrixID(other), nil)))
	h := startServer(t, Config{DataDir: dir, DiskBudget: budget})
	c := h.dial(t)
	ctx := context.Background()
	if _, err := c.UploadCSR(ctx, small, "first"); err != nil {
		t.Fatal(err)
	}
	if _, err := c.UploadCSR(ctx, other, "second"); err != nil {
		t.Fatal(err)
	}
	files, _ := os.ReadDir(filepath.Join(dir, "matrices"))
	if len(files) != 1 || files[0].Name() != wire.MatrixID(other)+".csr" {
		t.Errorf("files %v, want only the second (the first evicted)", files)
	}
	if !strings.Contains(h.logs.String(), "data folder: matrix evicted") {
		t.Error("no log line for the eviction")
	}
	_, err := c.UploadCSR(ctx, stencil.Poisson3D(12), "large")
	if status.Code(err) != codes.ResourceExhausted || !strings.Contains(err.Error(), "disk budget") {
		t.Errorf("a matrix over the budget: %v", err)
	}
}
