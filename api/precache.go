package api

import (
	"context"

	"github.com/residua/residua/sparse"

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
	sub := r.SetupKey()
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
	if p.weights != nil {
		// A normal-equations set-up depends on this request's weights: made
		// now, never cached; what does not depend on them (B's transpose,
		// the pattern of B·Bᵀ) is kept with the matrix. The job's memory
		// reservation covers IC(0)'s assembly (normalAssemblyBytes).
		cache := p.m.normalCache()
		setup, err := solve.PrepareNormal(p.m.solveMatrix(), p.req, solve.Weights{D: p.weights, Delta: p.reg}, cache)
		if n := cache.PatternBytes(); err == nil && n > 0 {
			// The kept pattern outlives the job: account for it in the
			// store, evictable (it is rebuilt when needed again), removed
			// with the matrix.
			k := key{kind: kindSetup, id: p.matrixID, sub: "normal-equations pattern"}
			if _, pn, found := s.store.acquire(k); found {
				pn.Release()
			} else if s.store.reserve(n, "the pattern of B·Bᵀ") == nil {
				s.store.insert(k, n, false, nil, p.m.dropNormal)
			}
		}
		return setup, nil, false, err
	}
	k := setupKey(p.matrixID, p.req)
	for {
		if it, pn, ok := s.store.acquire(k); ok {
			// The cached set-up was made for another job's request: this
			// job solves with its own tolerances and limits.
			return it.value.(*setupEntry).setup.For(p.req), pn, true, nil
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

// normalAssemblyBytes bounds the memory IC(0) of B·D·Bᵀ + δI takes: its
// entries are at most min(Σ_j c_j², m²) for column counts c_j of B (each
// pair of entries in a column makes one product), and each costs its
// pattern (4 + 8 for the row pointers' share), its value (8), and the
// factor and its transpose (IC(0) keeps the lower triangle twice: about
// 12 more), 40 bytes in all, with three vectors of m.
func normalAssemblyBytes(b *sparse.CSR) int64 {
	counts := make([]int64, b.Cols)
	for _, j := range b.ColIdx[:b.NNZ()] {
		counts[j]++
	}
	var entries int64
	for _, c := range counts {
		entries += c * c
	}
	m := int64(b.Rows)
	entries = min(entries+m, m*m)
	return 40*entries + 24*m
}
