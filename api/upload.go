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

// received is one stream message, or the error that ended the stream.
type received[M any] struct {
	m   M
	err error
}

// pump receives an upload stream's messages on a goroutine of its own, so
// that the handler can stop waiting for a client that sends nothing: a
// stream's Recv cannot be interrupted, but the handler can return, which
// ends the stream and so the pending Recv. The goroutine holds at most one
// message beyond what the handler took, and ends at the stream's end or
// error, or when the handler has returned (stop) and the stream closes.
type pump[M any] struct {
	ch   chan received[M]
	done chan struct{}
	idle time.Duration
	t    *time.Timer
}

func newPump[M any](recv func() (M, error), idle time.Duration) *pump[M] {
	p := &pump[M]{ch: make(chan received[M]), done: make(chan struct{}), idle: idle}
	go func() {
		for {
			m, err := recv()
			select {
			case p.ch <- received[M]{m, err}:
			case <-p.done:
				return
			}
			if err != nil {
				return
			}
		}
	}()
	return p
}

// next returns the next message, or ErrStalled when none comes within the
// idle timeout.
func (p *pump[M]) next() (M, error) {
	if p.t == nil {
		p.t = time.NewTimer(p.idle)
	} else {
		p.t.Reset(p.idle)
	}
	select {
	case r := <-p.ch:
		p.t.Stop()
		return r.m, r.err
	case <-p.t.C:
		var zero M
		return zero, fmt.Errorf("%w: the client sent nothing for %v (the server's upload idle timeout, serve --upload-idle-timeout); "+
			"the upload is dropped and what it reserved released", ErrStalled, p.idle)
	}
}

// stop lets the goroutine go; call it when the handler returns.
func (p *pump[M]) stop() {
	close(p.done)
	if p.t != nil {
		p.t.Stop()
	}
}

// gzipReader marks every read error of the decompressor that is not the
// stream's own as invalid input: whatever is wrong with gzip data (empty,
// truncated, corrupt, bad checksum) is the client's to fix.
type gzipReader struct {
	r  io.Reader
	cr *chunkReader
}

func (g gzipReader) Read(p []byte) (int, error) {
	n, err := g.r.Read(p)
	if err != nil && err != io.EOF && err != g.cr.recvErr {
		err = fmt.Errorf("%w: gzip data: %w", ErrInvalid, err)
	}
	return n, err
}

// checkSHA256 refuses an expected_sha256 that is not 64 hex digits.
func checkSHA256(name, want string) error {
	if want == "" {
		return nil
	}
	if len(want) != 2*sha256.Size {
		return invalidf("%s: expected_sha256 has %d characters; a SHA-256 is 64 hex digits", name, len(want))
	}
	if _, err := hex.DecodeString(want); err != nil {
		return invalidf("%s: expected_sha256 %q is not hex: %v", name, want, err)
	}
	return nil
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
	pm := newPump(stream.Recv, s.cfg.UploadIdleTimeout)
	defer pm.stop()
	meta, err := recvMetadata(s, pm.next, (*pb.UploadMatrixRequest).GetMetadata, "matrix upload")
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
	if err := checkSHA256(name, meta.GetExpectedSha256()); err != nil {
		return err
	}
	cr := &chunkReader{limit: s.cfg.MaxUploadBytes, count: &s.uploaded}
	if meta.GetExpectedSha256() != "" {
		cr.hash = sha256.New()
	}
	cr.recv = func() ([]byte, error) {
		req, err := pm.next()
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
			if cr.recvErr == nil {
				err = fmt.Errorf("%w: %s: not gzip data: %w", ErrInvalid, name, err)
			}
			return s.uploadFailed(name, cr, start, orRecv(cr, err))
		}
		zr.Multistream(true)
		r = gzipReader{r: zr, cr: cr}
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
		s.store.noteUpload(-reserved)
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
	s.store.noteUpload(-reserved)
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
// checked against the size line, and the matrix's cost reserved in the
// memory budget there, before matrixio allocates anything for it. It
// returns the bytes reserved, which the caller releases or turns into the
// stored matrix (noted as an upload's until then).
func (s *Server) readMatrixMarket(r io.Reader, name string) (*sparse.CSR, int64, error) {
	var reserved int64
	opt := &matrixio.Options{
		Limits: matrixio.Limits{
			MaxRows: s.cfg.MaxRows, MaxCols: s.cfg.MaxRows,
			MaxEntries: int(s.cfg.MaxNonzeros), MaxBytes: s.cfg.MaxUploadBytes,
			RefuseMostlyEmpty: !s.cfg.AllowMostlyEmpty,
		},
		// The cost of a matrix is what the reader holds at its peak: the
		// triplets as parsed (16 bytes an entry: two int32 indices and a
		// float64) and the CSR arrays built from them (wire.CSRBytes of
		// the entries after symmetric expansion, 8 bytes a row for the
		// row pointers however few the entries).
		Admit: func(sz matrixio.Size) error {
			if int64(sz.Stored) > s.cfg.MaxNonzeros {
				return limitf("%d stored entries after symmetric expansion would exceed the server's limit of %d", sz.Stored, s.cfg.MaxNonzeros)
			}
			n := 16*int64(sz.Entries) + wire.CSRBytes(int64(sz.Rows), int64(sz.Stored))
			if err := s.store.reserve(n, fmt.Sprintf("matrix %s (%d×%d, %d entries)", name, sz.Rows, sz.Cols, sz.Entries)); err != nil {
				return err
			}
			s.store.noteUpload(n)
			reserved = n
			return nil
		},
	}
	fail := func(err error) (*sparse.CSR, int64, error) {
		var pe *matrixio.ParseError
		if errors.As(err, &pe) && pe.File == "" {
			pe.File = name
		}
		if errors.Is(err, matrixio.ErrMostlyEmpty) {
			err = fmt.Errorf("%w: %w (the server was started without --allow-mostly-empty)", ErrInvalid, err)
		}
		return nil, reserved, err
	}
	a, _, err := matrixio.ReadMatrix(r, opt)
	if err != nil {
		return fail(err)
	}
	if int64(a.NNZ()) > s.cfg.MaxNonzeros {
		return fail(limitf("%s: %d stored entries after symmetric expansion exceed the server's limit of %d", name, a.NNZ(), s.cfg.MaxNonzeros))
	}
	// Keep what the stored matrix takes; give back the parse's share.
	n := wire.CSRBytes(int64(a.Rows), int64(a.NNZ()))
	if n > reserved {
		// Admit reserved an upper bound; this cannot happen.
		return fail(fmt.Errorf("api: matrix %s takes %d bytes, over the %d reserved", name, n, reserved))
	}
	s.store.release(reserved - n)
	s.store.noteUpload(n - reserved)
	return a, n, nil
}

// readCSRRaw reads the CSR_RAW encoding (see the .proto): sizes from the
// metadata, checked before anything is allocated, then the three arrays
// (wire.DecodeCSRCharged, whose errors give the byte offset and the row),
// each grown as its bytes arrive and charged to the budget before each
// allocation, so that an upload holds at most wire.GrowAmplification times
// the bytes it has sent (a client that declares a huge matrix and stalls
// holds next to nothing). It returns the bytes held, CSRBytes once done.
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
	if !s.cfg.AllowMostlyEmpty && matrixio.MostlyEmpty(rows, cols, nnz) {
		return nil, 0, invalidf("%s: a %d×%d matrix with %d entries leaves more than half of its rows or columns empty; "+
			"empty rows are legal, but this one costs %s of row pointers: the server was started without --allow-mostly-empty",
			name, rows, cols, nnz, human(8*(rows+1)))
	}
	total := wire.CSRBytes(rows, nnz)
	if !meta.GetGzip() && total > s.cfg.MaxUploadBytes {
		return nil, 0, limitf("%s: the CSR arrays take %d bytes, over the server's upload limit of %d", name, total, s.cfg.MaxUploadBytes)
	}
	if total > s.cfg.MemoryBudget {
		return nil, 0, limitf("%s: the CSR arrays take %s, more than the memory budget of %s", name, human(total), human(s.cfg.MemoryBudget))
	}
	what := fmt.Sprintf("matrix %s (%d×%d, %d entries)", name, rows, cols, nnz)
	var held int64
	charge := func(n int64) error {
		if n < 0 {
			s.store.release(-n)
		} else if err := s.store.reserve(n, what); err != nil {
			return err
		}
		s.store.noteUpload(n)
		held += n
		return nil
	}
	a, err := wire.DecodeCSRCharged(r, int(rows), int(cols), int(nnz), charge)
	if err != nil {
		var re *wire.RawError
		if errors.As(err, &re) {
			return nil, held, fmt.Errorf("%w: %s: CSR_RAW %w", ErrInvalid, name, err)
		}
		return nil, held, err
	}
	return a, held, nil
}

// UploadVector implements the UploadVector RPC (see the .proto).
func (s *Server) UploadVector(stream pb.Solver_UploadVectorServer) error {
	start := time.Now()
	pm := newPump(stream.Recv, s.cfg.UploadIdleTimeout)
	defer pm.stop()
	meta, err := recvMetadata(s, pm.next, (*pb.UploadVectorRequest).GetMetadata, "vector upload")
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
	// The vector grows as its data arrive (wire.Grow), charged to the
	// budget before each allocation, so that an upload holds at most
	// wire.GrowAmplification times the bytes it has sent.
	var x []float64
	var held int64
	what := "vector " + meta.GetName()
	charge := func(k int64) error {
		if k < 0 {
			s.store.release(-k)
		} else if err := s.store.reserve(k, what); err != nil {
			return err
		}
		s.store.noteUpload(k)
		held += k
		return nil
	}
	h := sha256.New()
	var got int64 // bytes received
	var partial [8]byte
	np := 0 // bytes of a split entry held in partial
	fail := func(err error) error {
		s.store.release(held)
		s.store.noteUpload(-held)
		s.log.Info("vector upload", "name", meta.GetName(), "outcome", "refused", "error", err.Error(), "bytes_received", got)
		return err
	}
	for {
		req, err := pm.next()
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
		if x, err = wire.Grow(x, int((got+int64(len(b))+7)/8), int(n), 8, charge); err != nil {
			return fail(err)
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
	if x == nil {
		x = []float64{} // the empty vector
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
	it, _, existed := s.store.insert(key{kind: kindVector, id: id}, held, false, &vectorEntry{x: x, info: info}, nil)
	s.store.noteUpload(-held)
	s.log.Info("vector upload", "vector", id, "name", meta.GetName(), "outcome", "stored", "already_stored", existed,
		"length", n, "duration", time.Since(start).String())
	return stream.SendAndClose(proto.Clone(it.value.(*vectorEntry).info).(*pb.VectorInfo))
}
