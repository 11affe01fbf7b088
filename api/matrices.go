package api

import (
	"context"
	"fmt"
	"sync"

	"google.golang.org/protobuf/proto"

	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

func cloneMatrix(m *pb.Matrix) *pb.Matrix { return proto.Clone(m).(*pb.Matrix) }

// matrixEntry is a stored matrix. Its fields never change after the entry
// is stored, so jobs read them without locks.
type matrixEntry struct {
	a    *sparse.CSR
	info *pb.Matrix // static description (id, name, sizes, report)
	// symmetric: A equals Aᵀ within sparse.SymmetryTolerance; otherwise
	// asymmetry says why not, in words.
	symmetric bool
	asymmetry string
	// exactSym: A equals Aᵀ bit for bit, so products by Aᵀ need no
	// transpose (sparse uses A itself).
	exactSym bool

	// normal is what normal-equations solves with this matrix as B share
	// across requests (the pattern of B·Bᵀ), made on first use and dropped
	// when the store evicts its accounting item; normalMu guards it.
	normalMu sync.Mutex
	normal   *solve.NormalCache
}

// normalCache returns the entry's normal-equations cache, made on first use.
func (e *matrixEntry) normalCache() *solve.NormalCache {
	e.normalMu.Lock()
	defer e.normalMu.Unlock()
	if e.normal == nil {
		e.normal = solve.NewNormalCache(e.a)
	}
	return e.normal
}

// dropNormal forgets the normal-equations cache (the store evicted it).
func (e *matrixEntry) dropNormal() {
	e.normalMu.Lock()
	e.normal = nil
	e.normalMu.Unlock()
}

// solveMatrix is the entry as the solve layer checks it.
func (e *matrixEntry) solveMatrix() solve.Matrix {
	return solve.Matrix{A: e.a, Name: e.info.GetName(), Symmetric: e.symmetric, Asymmetry: e.asymmetry}
}

// vectorEntry is a stored vector.
type vectorEntry struct {
	x    []float64
	info *pb.VectorInfo
}

// ListMatrices implements the ListMatrices RPC.
func (s *Server) ListMatrices(ctx context.Context, _ *pb.ListMatricesRequest) (*pb.ListMatricesResponse, error) {
	out := &pb.ListMatricesResponse{}
	inMemory := map[string]bool{}
	for _, e := range s.store.snapshot(func(k key) bool { return k.kind == kindMatrix }) {
		m := cloneMatrix(e.value.(*matrixEntry).info)
		m.JobsUsing = int32(e.pins)
		out.Matrices = append(out.Matrices, m)
		inMemory[m.Id] = true
	}
	if s.data != nil {
		// Those only on disk: loaded on first use.
		for _, m := range s.data.list() {
			if !inMemory[m.Id] {
				out.Matrices = append(out.Matrices, m)
			}
		}
	}
	return out, nil
}

// GetMatrix implements the GetMatrix RPC. Asking counts as a use of the
// matrix for the least-recently-used order: a client asks just before it
// solves with it.
func (s *Server) GetMatrix(ctx context.Context, req *pb.GetMatrixRequest) (*pb.Matrix, error) {
	it, ok := s.store.touch(key{kind: kindMatrix, id: req.GetId()})
	if !ok && s.data != nil && validID(req.GetId()) && s.data.has(req.GetId()) {
		for _, m := range s.data.list() {
			if m.Id == req.GetId() {
				m.AlreadyStored = true
				return m, nil
			}
		}
	}
	if !ok {
		return nil, notFoundf("no matrix %q", req.GetId())
	}
	m := cloneMatrix(it.value.(*matrixEntry).info)
	m.AlreadyStored = true
	for _, e := range s.store.snapshot(func(k key) bool { return k == it.key }) {
		m.JobsUsing = int32(e.pins)
	}
	return m, nil
}

// DeleteMatrix implements the DeleteMatrix RPC.
func (s *Server) DeleteMatrix(ctx context.Context, req *pb.DeleteMatrixRequest) (*pb.DeleteMatrixResponse, error) {
	// The cached set-ups and the transpose go with the matrix
	// (matrixEvicted); count their bytes first, while they are there.
	id := req.GetId()
	freedP := int64(0)
	for _, e := range s.store.snapshot(func(k key) bool { return k.id == id && (k.kind == kindSetup || k.kind == kindTranspose) }) {
		freedP += e.bytes
	}
	freed, ok, err := s.store.remove(key{kind: kindMatrix, id: id})
	if err != nil {
		return nil, fmt.Errorf("matrix %s: %w", id, err)
	}
	if s.data != nil {
		if _, onDisk := s.data.remove(id); onDisk {
			ok = true
		}
	}
	if !ok {
		return nil, notFoundf("no matrix %q", id)
	}
	s.log.Info("matrix deleted", "matrix", id, "bytes_freed", freed+freedP)
	return &pb.DeleteMatrixResponse{FreedBytes: freed + freedP}, nil
}
