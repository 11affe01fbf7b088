package api

import (
	"context"

	"github.com/residua/residua/solve"
)

// setupEntry is a cached preconditioner set-up, or one being built (ready
// not yet closed) by the first job that asked for it.
type setupEntry struct {
	ready chan struct{}
	setup *solve.Setup
	err   error
}

// setupKey keys a set-up by the matrix and the settings it was built with:
// the preconditioner and, for multigrid, its options (near-null space by
// its hash).
func setupKey(matrixID string, r solve.Request) key {
	sub := r.Preconditioner
	if k := r.AMG.Key(); k != "" {
		sub += " " + k
	}
	return key{kind: kindSetup, id: matrixID, sub: sub}
}

// prepare returns the job's set-up, pinned: for least squares made now
// (choosing the scaling reads nothing); for a system from the cache when a
// solve on the same matrix asked for the same preconditioner before, else
// built now (once, however many jobs ask at the same time) and cached.
// fromCache says whether it came from the cache.
func (s *Server) prepare(ctx context.Context, p *jobParams) (setup *solve.Setup, pn *pin, fromCache bool, err error) {
	if p.req.LeastSquares {
		setup, err := solve.Prepare(p.m.solveMatrix(), p.req)
		return setup, nil, false, err
	}
	k := setupKey(p.matrixID, p.req)
	for {
		if it, pn, ok := s.store.acquire(k); ok {
			return it.value.(*setupEntry).setup, pn, true, nil
		}
		s.mu.Lock()
		if b, ok := s.building[k]; ok {
			s.mu.Unlock()
			select {
			case <-b.ready:
				if b.err != nil {
					return nil, nil, false, b.err
				}
				continue
			case <-ctx.Done():
				return nil, nil, false, context.Cause(ctx)
			}
		}
		b := &setupEntry{ready: make(chan struct{})}
		s.building[k] = b
		s.mu.Unlock()

		err := func() (err error) {
			// Whatever happens, even a panic (recovered by the job), the
			// jobs waiting for this set-up must be released.
			defer func() {
				if p := recover(); p != nil {
					b.err = ErrPanic
					s.mu.Lock()
					delete(s.building, k)
					s.mu.Unlock()
					close(b.ready)
					panic(p)
				}
			}()
			setup, err = solve.Prepare(p.m.solveMatrix(), p.req)
			if err == nil {
				err = s.store.reserve(setup.Bytes(), "preconditioner "+setup.Request.Preconditioner)
			}
			if err == nil {
				b.setup = setup
				_, pn, _ = s.store.insert(k, setup.Bytes(), true, b, nil)
			}
			return err
		}()
		s.mu.Lock()
		delete(s.building, k)
		s.mu.Unlock()
		b.err = err
		close(b.ready)
		return setup, pn, false, err
	}
}

// matrixEvicted runs when a stored matrix leaves the store (evicted to make
// room, or deleted): its cached set-ups and transpose go with it.
func (s *Server) matrixEvicted(id string) {
	freed := s.store.removeWhere(func(k key) bool { return k.id == id && (k.kind == kindSetup || k.kind == kindTranspose) })
	s.log.Info("matrix removed", "matrix", id, "preconditioner_bytes_freed", freed)
}
