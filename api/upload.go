package api

import (
	"bufio"
	"compress/gzip"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"hash"
	"io"
	"math"
	"strings"
	"sync/atomic"
	"time"

	"google.golang.org/protobuf/proto"

	"github.com/residua/residua/matrixio"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/wire"
)

// chunkReader presents the chunks of an upload stream as an io.Reader, so
// a parser pulls them one at a time as it needs them: only the chunk being
// parsed is held, never the whole upload. It counts the bytes received and
// fails as soon as they pass the limit, before asking for more.
type chunkReader struct {
	recv  func() ([]byte, error) // the next chunk; io.EOF at the end
	limit int64
	hash  hash.Hash // of the bytes as received; nil when no checksum was asked for

	count   *atomic.Int64 // the server's upload counter, if not nil
	buf     []byte
	n       int64 // bytes received
	eof     bool
	recvErr error // the first error of recv other than io.EOF
}

func (c *chunkReader) Read(p []byte) (int, error) {
	for len(c.buf) == 0 {
		if c.eof {
			return 0, io.EOF
		}
		if c.recvErr != nil {
			return 0, c.recvErr
		}
		b, err := c.recv()
		if err == io.EOF {
			c.eof = true
			return 0, io.EOF
		}
		if err != nil {
			c.recvErr = err
			return 0, err
		}
		c.n += int64(len(b))
		if c.count != nil {
			c.count.Add(int64(len(b)))
		}
		if c.n > c.limit {
			c.recvErr = limitf("the upload passed the server's limit of %d bytes (%d received so far)", c.limit, c.n)
			return 0, c.recvErr
		}
		if c.hash != nil {
			c.hash.Write(b)
		}
		c.buf = b
	}
	n := copy(p, c.buf)
	c.buf = c.buf[n:]
	return n, nil
}

// maxTrailing bounds the white space accepted after a matrix, so that a
// compressed stream of blanks cannot keep the server reading.
const maxTrailing = 1 << 20

// drain reads to the end of the stream (for the checksum) and fails when
// more data than a little trailing white space follows the parsed content.
func (c *chunkReader) drain(r io.Reader, what string) error {
	var buf [4096]byte
	for total := 0; ; {
		n, err := r.Read(buf[:])
		total += n
		if strings.TrimSpace(string(buf[:n])) != "" || total > maxTrailing {
			return invalidf("%s: unexpected data after the end of the matrix", what)
		}
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
	}
}

// recvMetadata starts an upload: unless the server is shutting down, it
// receives the first message, which must come before the stream ends and
// carry the metadata (the chunking contract), and returns the metadata.
func recvMetadata[M any, T any](s *Server, recv func() (M, error), meta func(M) *T, what string) (*T, error) {
	if err := s.refuseIfClosing(); err != nil {
		return nil, err
	}
	first, err := recv()
	if err == io.EOF {
		return nil, invalidf("the %s stream ended before its metadata", what)
	}
	if err != nil {
		return nil, err
	}
	m := meta(first)
	if m == nil {
		return nil, invalidf("the first message of a %s must carry the metadata", what)
	}
	return m, nil
}

// UploadMatrix implements the UploadMatrix RPC (see the .proto).
func (s *Server) UploadMatrix(stream pb.Solver_UploadMatrixServer) error {
	start := time.Now()
	meta, err := recvMetadata(s, stream.Recv, (*pb.UploadMatrixRequest).GetMetadata, "matrix upload")
	if err != nil {
		return err
	}
	name := meta.GetName()
	if name == "" {
		name = "upload"
	}
	if meta.GetTotalBytes() > s.cfg.MaxUploadBytes {
		return limitf("%s: upload of %d bytes exceeds the server's limit of %d bytes", name, meta.GetTotalBytes(), s.cfg.MaxUploadBytes)
	}
	cr := &chunkReader{limit: s.cfg.MaxUploadBytes, count: &s.uploaded}
	if meta.GetExpectedSha256() != "" {
		cr.hash = sha256.New()
	}
	cr.recv = func() ([]byte, error) {
		req, err := stream.Recv()
		if err != nil {
			return nil, err
		}
		if req.GetMetadata() != nil {
			return nil, invalidf("%s: metadata sent twice in one upload", name)
		}
		return req.GetChunk(), nil
	}
	var r io.Reader = cr
	if meta.GetGzip() {
		zr, err := gzip.NewReader(bufio.NewReaderSize(cr, 64<<10))
		if err != nil {
			return s.uploadFailed(name, cr, start, fmt.Errorf("%s: not gzip data: %w", name, orRecv(cr, err)))
		}
		zr.Multistream(true)
		r = zr
	}

	var a *sparse.CSR
	var reserved int64
	switch meta.GetEncoding() {
	case pb.MatrixEncoding_MATRIX_MARKET:
		a, reserved, err = s.readMatrixMarket(r, name)
	case pb.MatrixEncoding_CSR_RAW:
		a, reserved, err = s.readCSRRaw(r, name, meta)
	default:
		err = invalidf("%s: unknown matrix encoding %v", name, meta.GetEncoding())
	}
	if err == nil {
		err = cr.drain(r, name)
	}
	if err == nil {
		if want := strings.ToLower(meta.GetExpectedSha256()); want != "" {
			if got := hex.EncodeToString(cr.hash.Sum(nil)); got != want {
				err = invalidf("%s: SHA-256 of the bytes received is %s, not the expected %s", name, got, want)
			}
		}
	}
	if err != nil {
		s.store.release(reserved)
		return s.uploadFailed(name, cr, start, orRecv(cr, err))
	}

	e := newMatrixEntry(a, name, "", reserved)
	id := e.info.Id
	if s.data != nil {
		// Durable before the reply: the reply means the matrix survives.
		if err := s.data.put(id, a, e.info); err != nil {
			s.store.release(reserved)
			return s.uploadFailed(name, cr, start, err)
		}
	}
	it, _, existed := s.store.insert(key{kind: kindMatrix, id: id}, reserved, false, e, func() { s.matrixEvicted(id) })
	out := cloneMatrix(it.value.(*matrixEntry).info)
	out.AlreadyStored = existed
	out.UploadSeconds = time.Since(start).Seconds()
	out.UploadBytes = cr.n
	s.log.Info("upload", "matrix", id, "name", name, "outcome", "stored", "already_stored", existed,
		"rows", a.Rows, "cols", a.Cols, "nonzeros", a.NNZ(), "bytes_received", cr.n,
		"encoding", meta.GetEncoding().String(), "gzip", meta.GetGzip(), "duration", time.Since(start).String())
	return stream.SendAndClose(out)
}

// orRecv prefers the stream's own error (the client went away) over the
// parse error it caused.
func orRecv(cr *chunkReader, err error) error {
	if cr.recvErr != nil && !errors.Is(cr.recvErr, ErrLimit) && !errors.Is(cr.recvErr, ErrInvalid) {
		return cr.recvErr
	}
	return err
}

func (s *Server) uploadFailed(name string, cr *chunkReader, start time.Time, err error) error {
	s.log.Info("upload", "name", name, "outcome", "refused", "error", err.Error(),
		"bytes_received", cr.n, "duration", time.Since(start).String())
	return err
}

// readMatrixMarket parses Matrix Market text with the server's limits
// checked against the size line before matrixio allocates, then reserves
// the matrix's memory. It returns the bytes reserved.
func (s *Server) readMatrixMarket(r io.Reader, name string) (*sparse.CSR, int64, error) {
	// The entries a matrix of the free memory could hold at 12 bytes each:
	// a size line claiming more cannot be stored, so it is refused before
	// the parser allocates for it.
	avail := s.store.available()
	maxEntries := min(s.cfg.MaxNonzeros, avail/12)
	opt := &matrixio.Options{Limits: matrixio.Limits{
		MaxRows: s.cfg.MaxRows, MaxCols: s.cfg.MaxRows,
		MaxEntries: int(maxEntries), MaxBytes: s.cfg.MaxUploadBytes,
	}}
	a, _, err := matrixio.ReadMatrix(r, opt)
	if err != nil {
		var pe *matrixio.ParseError
		if errors.As(err, &pe) && pe.File == "" {
			pe.File = name
		}
		if errors.Is(err, matrixio.ErrLimit) && maxEntries < s.cfg.MaxNonzeros {
			return nil, 0, fmt.Errorf("%w (the memory budget has room for %d entries now)", err, maxEntries)
		}
		return nil, 0, err
	}
	if int64(a.NNZ()) > s.cfg.MaxNonzeros {
		return nil, 0, limitf("%s: %d stored entries after symmetric expansion exceed the server's limit of %d", name, a.NNZ(), s.cfg.MaxNonzeros)
	}
	n := wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))
	if err := s.store.reserve(n, "matrix "+name); err != nil {
		return nil, 0, err
	}
	return a, n, nil
}

// readCSRRaw reads the CSR_RAW encoding (see the .proto): sizes from the
// metadata, checked and reserved before allocating, then the three arrays
// (wire.DecodeCSR, whose errors give the byte offset and the row).
func (s *Server) readCSRRaw(r io.Reader, name string, meta *pb.UploadMetadata) (*sparse.CSR, int64, error) {
	rows, cols, nnz := meta.GetRows(), meta.GetCols(), meta.GetNonzeros()
	if rows < 0 || cols < 0 || nnz < 0 {
		return nil, 0, invalidf("%s: negative CSR sizes %d×%d with %d entries", name, rows, cols, nnz)
	}
	if rows > int64(s.cfg.MaxRows) || cols > int64(s.cfg.MaxRows) || rows > sparse.MaxDim || cols > sparse.MaxDim {
		return nil, 0, limitf("%s: %d×%d exceeds the server's limit of %d rows and columns", name, rows, cols, min(int64(s.cfg.MaxRows), sparse.MaxDim))
	}
	if nnz > s.cfg.MaxNonzeros {
		return nil, 0, limitf("%s: %d entries exceed the server's limit of %d", name, nnz, s.cfg.MaxNonzeros)
	}
	if rows*cols < nnz && rows*cols >= 0 {
		return nil, 0, invalidf("%s: %d entries cannot fit a %d×%d matrix", name, nnz, rows, cols)
	}
	total := wire.CSRBytes(rows, nnz)
	if !meta.GetGzip() && total > s.cfg.MaxUploadBytes {
		return nil, 0, limitf("%s: the CSR arrays take %d bytes, over the server's upload limit of %d", name, total, s.cfg.MaxUploadBytes)
	}
	if err := s.store.reserve(total, "matrix "+name); err != nil {
		return nil, 0, err
	}
	a, err := wire.DecodeCSR(r, int(rows), int(cols), int(nnz))
	if err != nil {
		var re *wire.RawError
		if errors.As(err, &re) {
			return nil, total, fmt.Errorf("%w: %s: CSR_RAW %w", ErrInvalid, name, err)
		}
		return nil, total, err
	}
	return a, total, nil
}

// UploadVector implements the UploadVector RPC (see the .proto).
func (s *Server) UploadVector(stream pb.Solver_UploadVectorServer) error {
	start := time.Now()
	meta, err := recvMetadata(s, stream.Recv, (*pb.UploadVectorRequest).GetMetadata, "vector upload")
	if err != nil {
		return err
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
	if s.data != nil {
		// Durable before the reply (datavec.go).
		if err := s.data.putVector(x, info); err != nil {
			return fail(err)
		}
	}
	it, _, existed := s.store.insert(key{kind: kindVector, id: id}, 8*n, false, &vectorEntry{x: x, info: info}, nil)
	s.log.Info("vector upload", "vector", id, "name", meta.GetName(), "outcome", "stored", "already_stored", existed,
		"length", n, "duration", time.Since(start).String())
	return stream.SendAndClose(proto.Clone(it.value.(*vectorEntry).info).(*pb.VectorInfo))
}
