package checkpoint

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"testing"
	"time"

	"github.com/residua/residua/internal/binio"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/solve"
)

func sample(t *testing.T) *File {
	t.Helper()
	req, err := solve.Request{RelTol: 1e-10, Preconditioner: "ic0"}.Validate()
	if err != nil {
		t.Fatal(err)
	}
	return &File{
		MatrixID: "aa11", RHSID: "bb22", Request: req, Written: time.Unix(0, 1234567),
		History: []krylov.Progress{{Iteration: 0, ResidualNorm: 2, RelResidual: 1}, {Iteration: 1, Elapsed: 5, ResidualNorm: 1, RelResidual: 0.5}},
		State: &krylov.State{Method: "cg", Rows: 3, Cols: 3, Iteration: 1, Products: 1, Elapsed: 5,
			Scalars: []float64{1, 2}, Ints: []int{3}, Vectors: [][]float64{{1, 2, 3}, {4, 5, 6}}},
	}
}

func TestRoundTrip(t *testing.T) {
	f := sample(t)
	path := filepath.Join(t.TempDir(), "c")
	if err := Write(path, f); err != nil {
		t.Fatal(err)
	}
	g, err := Read(path)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(f.State, g.State) || !reflect.DeepEqual(f.History, g.History) || !g.Written.Equal(f.Written) ||
		g.MatrixID != f.MatrixID || g.RHSID != f.RHSID || !sameJSON(t, g.Request, f.Request) {
		t.Fatalf("round trip changed the checkpoint:\n%+v\n%+v", f, g)
	}
	if err := g.Matches("aa11", "bb22", f.Request); err != nil {
		t.Errorf("Matches its own solve: %v", err)
	}
}

func TestMatches(t *testing.T) {
	f := sample(t)
	other := f.Request
	other.MaxIter = 99
	for _, c := range []struct {
		name, matrix, rhs string
		req               solve.Request
		what              string
	}{
		{"matrix", "cc33", "bb22", f.Request, "matrix (id)"},
		{"rhs", "aa11", "dd44", f.Request, "right-hand side (SHA-256)"},
		{"setting", "aa11", "bb22", other, "setting MaxIter"},
	} {
		err := f.Matches(c.matrix, c.rhs, c.req)
		var me *MismatchError
		if !errors.As(err, &me) || me.What != c.what || !errors.Is(err, ErrMismatch) {
			t.Errorf("%s: %v, want a mismatch of %s", c.name, err, c.what)
		}
	}
}

// TestDamaged: every truncation and every flipped byte is an error.
func TestDamaged(t *testing.T) {
	var buf bytes.Buffer
	if err := Encode(&buf, sample(t)); err != nil {
		t.Fatal(err)
	}
	enc := buf.Bytes()
	for cut := range len(enc) {
		if _, err := Decode(bytes.NewReader(enc[:cut]), int64(cut)); err == nil {
			t.Fatalf("cut at %d of %d: no error", cut, len(enc))
		}
	}
	for i := range enc {
		bad := bytes.Clone(enc)
		bad[i] ^= 0x04
		_, err := Decode(bytes.NewReader(bad), int64(len(bad)))
		var be *binio.Error
		if err == nil || !errors.As(err, &be) && !errors.Is(err, ErrFormat) && !errors.Is(err, krylov.ErrResume) {
			t.Fatalf("byte %d flipped: %v", i, err)
		}
	}
	if _, err := Read(filepath.Join(t.TempDir(), "none")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}

// sameJSON compares two requests by their JSON, which is what a checkpoint
// keeps of them (the exported settings).
func sameJSON(t *testing.T, a, b solve.Request) bool {
	t.Helper()
	ja, err := json.Marshal(a)
	if err != nil {
		t.Fatal(err)
	}
	jb, err := json.Marshal(b)
	if err != nil {
		t.Fatal(err)
	}
	return string(ja) == string(jb)
}
