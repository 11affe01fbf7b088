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

	"github.com/residua/residua/matrixio"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/sparse"
)

// matrixEntry is a stored matrix. Its fields never change after the entry
// is stored, so jobs read them without locks.
type matrixEntry struct {
	a    *sparse.CSR
	info *pb.Matrix // static description (id, name, sizes, report)
	// symmetric: A equals Aᵀ within symmetryTol; otherwise asymmetry says
	// why not, in words.
	symmetric bool
	asymmetry string
	// exactSym: A equals Aᵀ bit for bit, so products by Aᵀ need no
	// transpose (sparse uses A itself).
	exactSym bool
}

func matrixKey(id string) string { return "m:" + id }
func vectorKey(id string) string { return "v:" + id }

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

// recvFirst receives an upload's first message, which must come before the
// stream ends: the chunking contract puts the metadata there.
func recvFirst[M any](recv func() (M, error)) (M, error) {
	first, err := recv()
	if err == io.EOF {
		err = invalidf("the upload stream ended before its metadata")
	}
	return first, err
}

// UploadMatrix implements the UploadMatrix RPC (see the .proto).
func (s *Server) UploadMatrix(stream pb.Solver_UploadMatrixServer) error {
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
		return invalidf("the first message of an upload must carry the metadata")
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

	// The content hash and the inspect report each read the whole matrix;
	// they run side by side.
	idc := make(chan string, 1)
	go func() { idc <- matrixID(a) }()
	e := &matrixEntry{a: a}
	e.info = &pb.Matrix{
		Name: name,
		Rows: int64(a.Rows), Cols: int64(a.Cols), Nonzeros: int64(a.NNZ()),
		Symmetry: "general", Bytes: reserved,
	}
	e.info.InspectJson, e.symmetric, e.exactSym, e.asymmetry = inspect(a)
	if e.symmetric {
		e.info.Symmetry = "symmetric"
	}
	id := <-idc
	e.info.Id = id
	it, existed := s.store.insert(matrixKey(id), reserved, 0, e, func() { s.matrixEvicted(id) })
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

// csrBytes is the memory of a CSR with the given sizes (as
// sparse.CSR.Bytes counts it: int row pointers, int32 columns, float64
// values).
func csrBytes(rows, nnz int64) int64 { return 8*(rows+1) + 12*nnz }

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
	n := csrBytes(int64(a.Rows), int64(a.NNZ()))
	if err := s.store.reserve(n, "matrix "+name); err != nil {
		return nil, 0, err
	}
	return a, n, nil
}

// readCSRRaw reads the CSR_RAW encoding (see the .proto): sizes from the
// metadata, checked and reserved before allocating, then the three arrays.
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
	total := csrBytes(rows, nnz)
	if !meta.GetGzip() && total > s.cfg.MaxUploadBytes {
		return nil, 0, limitf("%s: the CSR arrays take %d bytes, over the server's upload limit of %d", name, total, s.cfg.MaxUploadBytes)
	}
	if err := s.store.reserve(total, "matrix "+name); err != nil {
		return nil, 0, err
	}
	a := &sparse.CSR{Rows: int(rows), Cols: int(cols),
		RowPtr: make([]int, rows+1), ColIdx: make([]int32, nnz), Val: make([]float64, nnz)}
	if err := readRawArrays(r, a, name); err != nil {
		return nil, total, err
	}
	if err := a.Validate(); err != nil {
		return nil, total, fmt.Errorf("%s: %w", name, err)
	}
	return a, total, nil
}

// readRawArrays fills a's arrays from little-endian bytes, a buffer at a
// time, and names the byte offset where the data ran out.
func readRawArrays(r io.Reader, a *sparse.CSR, name string) error {
	buf := make([]byte, 1<<20)
	var off int64
	nnz := len(a.Val)
	// next reads the bytes of up to len(buf)/size values starting at value
	// i of count, and returns them.
	next := func(i, count, size int) ([]byte, error) {
		k := min(len(buf)/size, count-i)
		b := buf[:k*size]
		if n, err := io.ReadFull(r, b); err != nil {
			if err == io.EOF || err == io.ErrUnexpectedEOF {
				return nil, fmt.Errorf("%w: %s: CSR_RAW data ends at byte %d, but the sizes in the metadata need %d bytes: %w",
					ErrInvalid, name, off+int64(n), csrBytes(int64(a.Rows), int64(nnz)), io.ErrUnexpectedEOF)
			}
			return nil, err
		}
		off += int64(len(b))
		return b, nil
	}
	for i := 0; i <= a.Rows; {
		b, err := next(i, a.Rows+1, 8)
		if err != nil {
			return err
		}
		for ; len(b) >= 8; b = b[8:] {
			v := int64(binary.LittleEndian.Uint64(b))
			if v < 0 || v > int64(nnz) {
				v = -1 // Validate reports the bad row pointer
			}
			a.RowPtr[i] = int(v)
			i++
		}
	}
	for i := 0; i < nnz; {
		b, err := next(i, nnz, 4)
		if err != nil {
			return err
		}
		for ; len(b) >= 4; b = b[4:] {
			a.ColIdx[i] = int32(binary.LittleEndian.Uint32(b))
			i++
		}
	}
	for i := 0; i < nnz; {
		b, err := next(i, nnz, 8)
		if err != nil {
			return err
		}
		for ; len(b) >= 8; b = b[8:] {
			v := math.Float64frombits(binary.LittleEndian.Uint64(b))
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return invalidf("%s: CSR_RAW value %d is not finite (%g)", name, i, v)
			}
			a.Val[i] = v
			i++
		}
	}
	return nil
}

// matrixID is the content hash of a: SHA-256 over a version tag, the
// dimensions and the three arrays in little-endian form, as lowercase hex.
// Equal matrices have equal ids whatever encoding they arrived in.
func matrixID(a *sparse.CSR) string {
	h := sha256.New()
	h.Write([]byte("residua csr v1\n"))
	buf := make([]byte, 0, 64<<10)
	flush := func() { h.Write(buf); buf = buf[:0] }
	put64 := func(v uint64) {
		if len(buf)+8 > cap(buf) {
			flush()
		}
		buf = binary.LittleEndian.AppendUint64(buf, v)
	}
	put64(uint64(a.Rows))
	put64(uint64(a.Cols))
	for _, p := range a.RowPtr {
		put64(uint64(p))
	}
	for _, c := range a.ColIdx {
		if len(buf)+4 > cap(buf) {
			flush()
		}
		buf = binary.LittleEndian.AppendUint32(buf, uint32(c))
	}
	for _, v := range a.Val {
		put64(math.Float64bits(v))
	}
	flush()
	return hex.EncodeToString(h.Sum(nil))
}
