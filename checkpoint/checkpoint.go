// Package checkpoint is the file in which a running solve's progress
// survives the process: `residua solve --checkpoint FILE` writes it every
// few seconds and when it is interrupted, `--resume FILE` continues from
// it, and the server keeps one per running job in its data folder.
//
// # What a checkpoint holds
//
// A File names what it belongs to (the matrix's id, wire.MatrixID; the
// right-hand side's, wire.VectorSum; the validated solve.Request, as JSON so
// that a setting added to Request later is compared too), carries the
// progress rows recorded so far (so the resumed solve's history is the
// whole history) and the method's krylov.State. Matches refuses, naming
// the difference, a checkpoint that belongs to another matrix, right-hand
// side or request: resuming it would continue someone else's recurrence.
//
// # Layout (format version 1)
//
// Sections of package internal/binio, each closed by its CRC-32C:
//
//	header:   magic "residua-checkpoint\n", version (uint32), matrix id,
//	          right-hand side id, request JSON (strings), time written
//	          (Unix nanoseconds)
//	history:  the number of rows, then per row the iteration, the elapsed
//	          nanoseconds (int64), ‖r‖, ‖r‖/‖b‖ and ‖Aᵀr‖ (float64)
//	state:    krylov.State's own sections (State.Encode)
//
// Write goes through internal/atomicfile (temporary file, fsync, rename,
// folder fsync): a crash during a write leaves the previous checkpoint.
package checkpoint

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"reflect"
	"sort"
	"time"

	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/internal/binio"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/solve"
)

const (
	magic   = "residua-checkpoint\n"
	version = 1
)

// File is one checkpoint.
type File struct {
	MatrixID, RHSID string
	// Request is the validated request of the solve.
	Request solve.Request
	// Written is when the checkpoint was taken.
	Written time.Time
	// History holds the progress rows recorded up to State.Iteration.
	History []krylov.Progress
	// State is the method's recurrence state.
	State *krylov.State
}

// ErrFormat: not a checkpoint, or another format version.
var ErrFormat = errors.New("not a readable residua checkpoint")

// ErrMismatch is wrapped by a *MismatchError.
var ErrMismatch = errors.New("the checkpoint belongs to another solve")

// MismatchError says what differs between a checkpoint and the solve that
// wants to resume from it.
type MismatchError struct {
	What       string // "matrix", "right-hand side", or a request setting's name
	Checkpoint string // the checkpoint's value
	Now        string // the solve's value
}

func (e *MismatchError) Error() string {
	return fmt.Sprintf("%v: its %s is %s, this solve's is %s", ErrMismatch, e.What, e.Checkpoint, e.Now)
}

func (e *MismatchError) Unwrap() error { return ErrMismatch }

// Matches reports, as a *MismatchError, the first difference between the
// checkpoint and a solve of the matrix and right-hand side with these ids
// and the validated request req; nil when the checkpoint is this solve's.
func (f *File) Matches(matrixID, rhsID string, req solve.Request) error {
	if f.MatrixID != matrixID {
		return &MismatchError{What: "matrix (id)", Checkpoint: short(f.MatrixID), Now: short(matrixID)}
	}
	if f.RHSID != rhsID {
		return &MismatchError{What: "right-hand side (SHA-256)", Checkpoint: short(f.RHSID), Now: short(rhsID)}
	}
	have, now := settings(f.Request), settings(req)
	keys := make([]string, 0, len(have)+len(now))
	for k := range have {
		keys = append(keys, k)
	}
	for k := range now {
		if _, ok := have[k]; !ok {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	for _, k := range keys {
		if !reflect.DeepEqual(have[k], now[k]) {
			return &MismatchError{What: "setting " + k, Checkpoint: show(have[k]), Now: show(now[k])}
		}
	}
	return nil
}

func short(id string) string {
	if len(id) > 16 {
		return id[:16] + "…"
	}
	return id
}

// settings returns the request as a map from field name to JSON value.
func settings(r solve.Request) map[string]any {
	b, _ := json.Marshal(r)
	var m map[string]any
	_ = json.Unmarshal(b, &m)
	return m
}

func show(v any) string {
	if v == nil {
		return "unset"
	}
	b, _ := json.Marshal(v)
	return string(b)
}

// Write writes f to path atomically and durably.
func Write(path string, f *File) error {
	req, err := json.Marshal(f.Request)
	if err != nil {
		return err
	}
	return atomicfile.WriteDurable(path, func(out io.Writer) error {
		return encode(out, f, req)
	})
}

// Encode writes f to w (Write's bytes, without the file handling).
func Encode(w io.Writer, f *File) error {
	req, err := json.Marshal(f.Request)
	if err != nil {
		return err
	}
	return encode(w, f, req)
}

func encode(out io.Writer, f *File, req []byte) error {
	w := binio.NewWriter(out)
	w.Raw([]byte(magic))
	w.Uint32(version)
	w.String(f.MatrixID)
	w.String(f.RHSID)
	w.Bytes(req)
	w.Int64(f.Written.UnixNano())
	w.EndSection()
	w.Uint64(uint64(len(f.History)))
	for _, p := range f.History {
		w.Int64(int64(p.Iteration))
		w.Int64(int64(p.Elapsed))
		w.Float64(p.ResidualNorm)
		w.Float64(p.RelResidual)
		w.Float64(p.NormalResidualNorm)
	}
	w.EndSection()
	f.State.EncodeTo(w)
	return w.Flush()
}

// Read reads the checkpoint at path, checking every section. A damaged
// file is an error naming the file and the section (a *binio.Error inside
// wrapping io.ErrUnexpectedEOF or binio.ErrChecksum), or ErrFormat.
func Read(path string) (*File, error) {
	fh, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer fh.Close()
	st, err := fh.Stat()
	if err != nil {
		return nil, err
	}
	f, err := Decode(fh, st.Size())
	if err != nil {
		return nil, fmt.Errorf("checkpoint %s: %w", path, err)
	}
	return f, nil
}

// rowBytes is the size of one history row.
const rowBytes = 5 * 8

// Decode reads a checkpoint from r, which holds size bytes.
func Decode(r io.Reader, size int64) (*File, error) {
	br := binio.NewReader(r, size)
	br.Section("checkpoint header")
	m := make([]byte, len(magic))
	if br.Raw(m) && string(m) != magic {
		return nil, fmt.Errorf("%w: no checkpoint magic at the start", ErrFormat)
	}
	if v := br.Uint32(); br.Err() == nil && v != version {
		return nil, fmt.Errorf("%w: format version %d, this build reads %d", ErrFormat, v, version)
	}
	f := &File{MatrixID: br.String(), RHSID: br.String()}
	req := br.Bytes()
	f.Written = time.Unix(0, br.Int64())
	if err := br.EndSection(); err != nil {
		return nil, err
	}
	if err := json.Unmarshal(req, &f.Request); err != nil {
		return nil, fmt.Errorf("%w: the request: %v", ErrFormat, err)
	}
	br.Section("history")
	n := br.Uint64()
	if rest := size - br.Offset(); br.Err() == nil && (rest < 0 || n > uint64(rest/rowBytes)) {
		br.Fail(fmt.Errorf("%w: %d history rows, %d bytes left", binio.ErrLength, n, rest))
	}
	if br.Err() == nil {
		f.History = make([]krylov.Progress, n)
	}
	for i := range f.History {
		p := &f.History[i]
		p.Iteration, p.Elapsed = int(br.Int64()), time.Duration(br.Int64())
		p.ResidualNorm, p.RelResidual, p.NormalResidualNorm = br.Float64(), br.Float64(), br.Float64()
	}
	if err := br.EndSection(); err != nil {
		return nil, err
	}
	s, err := krylov.DecodeStateFrom(br)
	if err != nil {
		return nil, err
	}
	f.State = s
	if err := br.End(); err != nil {
		return nil, err
	}
	if len(f.History) > 0 && f.History[len(f.History)-1].Iteration != s.Iteration {
		return nil, fmt.Errorf("%w: the history ends at iteration %d, the state is at %d", ErrFormat, f.History[len(f.History)-1].Iteration, s.Iteration)
	}
	return f, nil
}

// Rows is a krylov.Recorder that keeps every progress row, for a
// checkpoint's history. It is meant for the goroutine that runs the solve,
// which also calls a Checkpoint's Save, so it has no lock. Appending costs
// an amortised allocation every time the rows double, 40 bytes a row.
type Rows struct {
	Rows []krylov.Progress
}

// Record keeps p.
func (r *Rows) Record(p krylov.Progress) error {
	r.Rows = append(r.Rows, p)
	return nil
}

// Finish does nothing.
func (r *Rows) Finish(*krylov.Result) {}

// UpTo returns the rows up to and including iteration it.
func (r *Rows) UpTo(it int) []krylov.Progress {
	k := len(r.Rows)
	for k > 0 && r.Rows[k-1].Iteration > it {
		k--
	}
	return r.Rows[:k]
}
