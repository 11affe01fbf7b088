package krylov

import (
	"errors"
	"fmt"
	"io"
	"time"

	"github.com/residua/residua/internal/binio"
)

// State is the full recurrence state of a solve at the start of an
// iteration: everything the loop carries from one iteration to the next,
// so that a solve resumed from it (Settings.Resume, LSQSettings.Resume)
// continues the same recurrence and produces bitwise the same iterates,
// progress rows and result figures as the uninterrupted solve, at the same
// worker count (the kernels' sums are fixed by their block order, not by
// scheduling; see kernels.go).
//
// Which vectors and scalars a method keeps, in which order, is the
// method's layout (see the package documentation, "Checkpoints"); the
// fields here are the same for every method.
type State struct {
	// Method is "cg", "lsqr" or "cgls"; Rows and Cols are the operator's
	// dimensions.
	Method     string
	Rows, Cols int
	// Iteration is the number of iterations done; the resumed solve's
	// next progress row is Iteration+1. Products counts the products with
	// A (and Aᵀ) so far. Elapsed is the wall time the solve had run; a
	// resumed solve's clock (its progress rows, Result.Solve, the
	// TimeLimit) continues from it.
	Iteration, Products int
	Elapsed             time.Duration
	// Scalars, Ints and Vectors are the method's layout.
	Scalars []float64
	Ints    []int
	Vectors [][]float64
}

// Checkpoint asks a running solve for its State from time to time: every
// Every of wall time, whenever Now delivers, and once when the context is
// cancelled (so that an interrupted solve loses nothing). The state is taken
// at the start of an iteration, where the recurrence is consistent.
type Checkpoint struct {
	// Every is the wall time between two saves; 0 saves only on demand
	// and on cancellation.
	Every time.Duration
	// Now, when it can be received from (a send, or a closed channel),
	// asks for a save at the next iteration. nil: never.
	Now <-chan struct{}
	// Save receives the state. Its slices are the solve's own vectors,
	// not copies: they are valid only during the call, which the solve
	// waits for, and Save must not modify them. An error from Save stops
	// the solve with status Cancelled and that error returned (wrap Save
	// to carry on instead).
	Save func(*State) error
}

// checkpointer is the per-solve bookkeeping of a Checkpoint: the next
// deadline and the one State value reused by every save, so that a save
// allocates nothing after the first.
type checkpointer struct {
	c     *Checkpoint
	next  time.Time
	state State
}

func newCheckpointer(c *Checkpoint, start time.Time) checkpointer {
	k := checkpointer{c: c}
	if c != nil && c.Every > 0 {
		k.next = start.Add(c.Every)
	}
	return k
}

// due reports whether a save is asked for now. It allocates nothing.
func (k *checkpointer) due() bool {
	if k.c == nil || k.c.Save == nil {
		return false
	}
	if k.c.Now != nil {
		select {
		case <-k.c.Now:
			return true
		default:
		}
	}
	return k.c.Every > 0 && !time.Now().Before(k.next)
}

// save hands k.state, filled by the caller, to Save and sets the next
// deadline.
func (k *checkpointer) save() error {
	if k.c == nil || k.c.Save == nil {
		return nil
	}
	err := k.c.Save(&k.state)
	if k.c.Every > 0 {
		k.next = time.Now().Add(k.c.Every)
	}
	return err
}

// ErrResume is wrapped by every refusal of a Resume state that does not
// belong to the solve (another method, other dimensions, another
// right-hand side, a layout that does not fit).
var ErrResume = errors.New("checkpoint state does not fit this solve")

func resumeErr(format string, args ...any) error {
	return fmt.Errorf("krylov: resume: %w: %s", ErrResume, fmt.Sprintf(format, args...))
}

// check verifies that s has the method, the dimensions and the layout
// (numbers of scalars and ints, and each vector's length, -1 for any) a
// solve expects.
func (s *State) check(method string, rows, cols, scalars, ints int, lens ...int) error {
	switch {
	case s.Method != method:
		return resumeErr("the state is of method %q, the solve is %q", s.Method, method)
	case s.Rows != rows || s.Cols != cols:
		return resumeErr("the state is for a %d×%d operator, the solve's is %d×%d", s.Rows, s.Cols, rows, cols)
	case len(s.Scalars) != scalars || len(s.Ints) != ints || len(s.Vectors) != len(lens):
		return resumeErr("%s state with %d scalars, %d integers and %d vectors, want %d, %d and %d",
			method, len(s.Scalars), len(s.Ints), len(s.Vectors), scalars, ints, len(lens))
	case s.Iteration < 0 || s.Products < 0 || s.Elapsed < 0:
		return resumeErr("negative iteration %d, products %d or elapsed %v", s.Iteration, s.Products, s.Elapsed)
	}
	for i, n := range lens {
		if n >= 0 && len(s.Vectors[i]) != n {
			return resumeErr("%s state vector %d has length %d, want %d", method, i, len(s.Vectors[i]), n)
		}
	}
	return nil
}

// stateMagic and stateVersion open an encoded State.
const (
	stateMagic   = "residua-krylov-state\n"
	stateVersion = 1
)

// Encode writes s in residua's state encoding, format version 1 (package
// binio): a header section (magic, version, method, dimensions, counters,
// lengths) and one section per vector, each closed by its CRC-32C, so a
// torn or corrupted state is detected by DecodeState.
func (s *State) Encode(w io.Writer) error {
	bw := binio.NewWriter(w)
	s.encode(bw)
	return bw.Flush()
}

// EncodeTo writes s into an open binio stream, as a part of a larger file.
func (s *State) EncodeTo(bw *binio.Writer) { s.encode(bw) }

func (s *State) encode(bw *binio.Writer) {
	bw.Raw([]byte(stateMagic))
	bw.Uint32(stateVersion)
	bw.String(s.Method)
	bw.Int64(int64(s.Rows))
	bw.Int64(int64(s.Cols))
	bw.Int64(int64(s.Iteration))
	bw.Int64(int64(s.Products))
	bw.Int64(int64(s.Elapsed))
	bw.Float64s(s.Scalars)
	bw.Int64s(s.Ints)
	bw.Uint64(uint64(len(s.Vectors)))
	bw.EndSection()
	for _, v := range s.Vectors {
		bw.Float64s(v)
		bw.EndSection()
	}
}

// DecodeState reads a State written by Encode from r, which holds size
// bytes in all (every stored length is checked against it before anything
// is allocated). A short read is io.ErrUnexpectedEOF and a damaged section
// binio.ErrChecksum, both inside a *binio.Error naming the section.
func DecodeState(r io.Reader, size int64) (*State, error) {
	br := binio.NewReader(r, size)
	s, err := DecodeStateFrom(br)
	if err != nil {
		return nil, err
	}
	return s, br.End()
}

// DecodeStateFrom reads a State from an open binio stream.
func DecodeStateFrom(br *binio.Reader) (*State, error) {
	br.Section("state header")
	magic := make([]byte, len(stateMagic))
	if br.Raw(magic) && string(magic) != stateMagic {
		br.Fail(errors.New("not a residua solver state"))
	}
	if v := br.Uint32(); br.Err() == nil && v != stateVersion {
		br.Fail(fmt.Errorf("state format version %d, this build reads version %d", v, stateVersion))
	}
	s := &State{Method: br.String()}
	s.Rows, s.Cols = int(br.Int64()), int(br.Int64())
	s.Iteration, s.Products = int(br.Int64()), int(br.Int64())
	s.Elapsed = time.Duration(br.Int64())
	s.Scalars = br.Float64s(nil)
	s.Ints = br.Int64s(nil)
	nv := br.Uint64()
	if br.Err() == nil && nv > 64 {
		br.Fail(fmt.Errorf("%d vectors, more than any method keeps", nv))
	}
	if err := br.EndSection(); err != nil {
		return nil, err
	}
	s.Vectors = make([][]float64, nv)
	for i := range s.Vectors {
		br.Section(fmt.Sprintf("state vector %d", i))
		s.Vectors[i] = br.Float64s(nil)
		if err := br.EndSection(); err != nil {
			return nil, err
		}
	}
	return s, nil
}
