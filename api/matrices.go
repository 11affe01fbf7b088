package api

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"io"
	"math"
	"strings"
	"time"

	"google.golang.org/protobuf/proto"

	pb "github.com/residua/residua/proto/residua/v1"
)

func cloneMatrix(m *pb.Matrix) *pb.Matrix { return proto.Clone(m).(*pb.Matrix) }

// matrixEvicted runs when a stored matrix leaves the store (evicted to make
// room, or deleted): its cached preconditioners go with it.
func (s *Server) matrixEvicted(id string) {
	freed := s.store.removeWhere(func(k string) bool { return strings.HasPrefix(k, precondKeyPrefix(id)) })
	s.log.Info("matrix removed", "matrix", id, "preconditioner_bytes_freed", freed)
}

// ListMatrices implements the ListMatrices RPC.
func (s *Server) ListMatrices(ctx context.Context, _ *pb.ListMatricesRequest) (*pb.ListMatricesResponse, error) {
	items, pins := s.store.snapshot(func(k string) bool { return strings.HasPrefix(k, "m:") })
	out := &pb.ListMatricesResponse{}
	for i, it := range items {
		m := cloneMatrix(it.value.(*matrixEntry).info)
		m.JobsUsing = int32(pins[i])
		out.Matrices = append(out.Matrices, m)
	}
	return out, nil
}

// DeleteMatrix implements the DeleteMatrix RPC.
func (s *Server) DeleteMatrix(ctx context.Context, req *pb.DeleteMatrixRequest) (*pb.DeleteMatrixResponse, error) {
	// The cached preconditioners go with the matrix (matrixEvicted); count
	// their bytes first, while they are still there.
	pfx := precondKeyPrefix(req.GetId())
	items, _ := s.store.snapshot(func(k string) bool { return strings.HasPrefix(k, pfx) })
	freedP := int64(0)
	for _, it := range items {
		freedP += s.store.size(it)
	}
	freed, ok, err := s.store.remove(matrixKey(req.GetId()))
	if err != nil {
		return nil, err
	}
	if !ok {
		return nil, notFoundf("no matrix %q", req.GetId())
	}
	s.log.Info("matrix deleted", "matrix", req.GetId(), "bytes_freed", freed+freedP)
	return &pb.DeleteMatrixResponse{FreedBytes: freed + freedP}, nil
}

// vectorEntry is a stored vector.
type vectorEntry struct {
	x    []float64
	info *pb.VectorInfo
}

// UploadVector implements the UploadVector RPC (see the .proto).
func (s *Server) UploadVector(stream pb.Solver_UploadVectorServer) error {
	start := time.Now()
	if err := s.refuseIfClosing(); err != nil {
		return err
	}
	first, err := recvFirst(stream.Recv)
	if err != nil {
		return err
	}
	meta := first.GetMetadata()
	if meta == nil {
		return invalidf("the first message of a vector upload must carry the metadata")
	}
	n := meta.GetLength()
	if n < 0 {
		return invalidf("vector length %d is negative", n)
	}
	if n > int64(s.cfg.MaxRows) {
		return limitf("vector of %d entries exceeds the server's limit of %d", n, s.cfg.MaxRows)
	}
	if 8*n > s.cfg.MaxUploadBytes {
		return limitf("vector of %d bytes exceeds the server's upload limit of %d bytes", 8*n, s.cfg.MaxUploadBytes)
	}
	if err := s.store.reserve(8*n, "vector "+meta.GetName()); err != nil {
		return err
	}
	x := make([]float64, n)
	h := sha256.New()
	var got int64 // bytes received
	var partial [8]byte
	np := 0 // bytes of a split entry held in partial
	fail := func(err error) error {
		s.store.release(8 * n)
		s.log.Info("vector upload", "name", meta.GetName(), "outcome", "refused", "error", err.Error(), "bytes_received", got)
		return err
	}
	for {
		req, err := stream.Recv()
		if err == io.EOF {
			break
		}
		if err != nil {
			return fail(err)
		}
		b := req.GetChunk()
		s.uploaded.Add(int64(len(b)))
		if req.GetMetadata() != nil {
			return fail(invalidf("metadata sent twice in one vector upload"))
		}
		if got+int64(len(b)) > 8*n {
			return fail(invalidf("vector upload carries more than the 8·%d bytes its length declares", n))
		}
		h.Write(b)
		for len(b) > 0 {
			if np > 0 || len(b) < 8 {
				c := copy(partial[np:], b)
				np += c
				b = b[c:]
				got += int64(c)
				if np == 8 {
					x[(got-8)/8] = math.Float64frombits(binary.LittleEndian.Uint64(partial[:]))
					np = 0
				}
				continue
			}
			k := len(b) / 8
			i0 := got / 8
			for j := 0; j < k; j++ {
				x[i0+int64(j)] = math.Float64frombits(binary.LittleEndian.Uint64(b[8*j:]))
			}
			b = b[8*k:]
			got += int64(8 * k)
		}
	}
	if got != 8*n {
		return fail(invalidf("vector upload ended after %d of the %d bytes its length declares", got, 8*n))
	}
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fail(invalidf("vector entry %d is not finite (%g)", i, v))
		}
	}
	id := hex.EncodeToString(h.Sum(nil))
	info := &pb.VectorInfo{Id: id, Length: n, Name: meta.GetName()}
	it, existed := s.store.insert(vectorKey(id), 8*n, 0, &vectorEntry{x: x, info: info}, nil)
	s.log.Info("vector upload", "vector", id, "name", meta.GetName(), "outcome", "stored", "already_stored", existed,
		"length", n, "duration", time.Since(start).String())
	return stream.SendAndClose(proto.Clone(it.value.(*vectorEntry).info).(*pb.VectorInfo))
}

// unpack decodes packed little-endian float64 bytes.
func unpack(b []byte) ([]float64, error) {
	if len(b)%8 != 0 {
		return nil, invalidf("inline vector has %d bytes, not a multiple of 8", len(b))
	}
	x := make([]float64, len(b)/8)
	for i := range x {
		x[i] = math.Float64frombits(binary.LittleEndian.Uint64(b[8*i:]))
		if math.IsNaN(x[i]) || math.IsInf(x[i], 0) {
			return nil, invalidf("inline vector entry %d is not finite (%g)", i, x[i])
		}
	}
	return x, nil
}

// pack encodes x as packed little-endian float64 bytes into dst.
func pack(dst []byte, x []float64) []byte {
	for _, v := range x {
		dst = binary.LittleEndian.AppendUint64(dst, math.Float64bits(v))
	}
	return dst
}
