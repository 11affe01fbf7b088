package client

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/wire"
)

// UploadOptions describe a Matrix Market upload from a reader.
type UploadOptions struct {
	// Gzip: the bytes are gzip-compressed (the server decompresses).
	Gzip bool
	// ExpectedSHA256, if set, is the lowercase hex SHA-256 of the bytes as
	// sent; the server refuses the upload on a mismatch.
	ExpectedSHA256 string
	// TotalBytes, if known, lets the server refuse an upload over its limit
	// before any data is sent.
	TotalBytes int64
}

// UploadFile uploads a Matrix Market file (gzip-compressed when its name
// ends in .gz) and names it name, or the file's base name when name is "".
func (c *Client) UploadFile(ctx context.Context, path, name string) (*pb.Matrix, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, err
	}
	if name == "" {
		name = filepath.Base(path)
	}
	return c.UploadReader(ctx, f, name, &UploadOptions{Gzip: strings.HasSuffix(path, ".gz"), TotalBytes: st.Size()})
}

// UploadReader uploads Matrix Market text read from r, in chunks, as it is
// read. opt may be nil.
func (c *Client) UploadReader(ctx context.Context, r io.Reader, name string, opt *UploadOptions) (*pb.Matrix, error) {
	if opt == nil {
		opt = &UploadOptions{}
	}
	meta := &pb.UploadMetadata{Name: name, Encoding: pb.MatrixEncoding_MATRIX_MARKET,
		Gzip: opt.Gzip, ExpectedSha256: opt.ExpectedSHA256, TotalBytes: opt.TotalBytes}
	return c.upload(ctx, meta, func(send func([]byte) error) error {
		for {
			buf := make([]byte, c.chunk)
			n, err := io.ReadFull(r, buf)
			if n > 0 {
				if err := send(buf[:n]); err != nil {
					return err
				}
			}
			if err == io.EOF || err == io.ErrUnexpectedEOF {
				return nil
			}
			if err != nil {
				return err
			}
		}
	})
}

// UploadCSR uploads a CSR matrix as raw little-endian arrays (the CSR_RAW
// encoding), with no text conversion on either side.
func (c *Client) UploadCSR(ctx context.Context, a *sparse.CSR, name string) (*pb.Matrix, error) {
	nnz := len(a.Val)
	meta := &pb.UploadMetadata{Name: name, Encoding: pb.MatrixEncoding_CSR_RAW,
		Rows: int64(a.Rows), Cols: int64(a.Cols), Nonzeros: int64(nnz),
		TotalBytes: wire.CSRBytes(int64(a.Rows), int64(nnz))}
	return c.upload(ctx, meta, func(send func([]byte) error) error {
		return wire.EncodeCSR(a, c.chunk, send)
	})
}

// EnsureCSR makes sure the server holds a: it computes a's id (the content
// hash, wire.MatrixID) and asks the server (GetMatrix), uploading a in the
// CSR_RAW encoding only when the server does not hold it. uploaded says
// whether it did.
func (c *Client) EnsureCSR(ctx context.Context, a *sparse.CSR, name string) (m *pb.Matrix, uploaded bool, err error) {
	m, err = c.Matrix(ctx, wire.MatrixID(a))
	if err == nil {
		return m, false, nil
	}
	if status.Code(err) != codes.NotFound {
		return nil, false, err
	}
	m, err = c.UploadCSR(ctx, a, name)
	return m, err == nil, err
}

// Matrix describes a stored matrix; NOT_FOUND when the server does not
// hold it.
func (c *Client) Matrix(ctx context.Context, id string) (*pb.Matrix, error) {
	return c.rpc.GetMatrix(ctx, &pb.GetMatrixRequest{Id: id})
}

// UploadVector stores a vector on the server (for right-hand sides and
// starting guesses too long to travel inline) and returns its description.
func (c *Client) UploadVector(ctx context.Context, x []float64, name string) (*pb.VectorInfo, error) {
	stream, err := c.rpc.UploadVector(ctx)
	if err != nil {
		return nil, err
	}
	if err := stream.Send(&pb.UploadVectorRequest{Part: &pb.UploadVectorRequest_Metadata{
		Metadata: &pb.VectorMetadata{Length: int64(len(x)), Name: name}}}); err != nil {
		return nil, closeAndRecvErr(stream, err)
	}
	w := &wire.Chunker{Size: c.chunk, Send: func(b []byte) error {
		return stream.Send(&pb.UploadVectorRequest{Part: &pb.UploadVectorRequest_Chunk{Chunk: b}})
	}}
	w.Float64s(x)
	if err := w.Flush(); err != nil {
		return nil, closeAndRecvErr(stream, err)
	}
	return stream.CloseAndRecv()
}

// upload runs an UploadMatrix stream: the metadata, then what body sends.
func (c *Client) upload(ctx context.Context, meta *pb.UploadMetadata, body func(send func([]byte) error) error) (*pb.Matrix, error) {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	stream, err := c.rpc.UploadMatrix(ctx)
	if err != nil {
		return nil, err
	}
	if err := stream.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Metadata{Metadata: meta}}); err != nil {
		return nil, closeAndRecvErr(stream, err)
	}
	err = body(func(b []byte) error {
		return stream.Send(&pb.UploadMatrixRequest{Part: &pb.UploadMatrixRequest_Chunk{Chunk: b}})
	})
	if err != nil {
		return nil, closeAndRecvErr(stream, err)
	}
	return stream.CloseAndRecv()
}

// closeAndRecvErr returns the server's status when a send failed because
// the server ended the stream (io.EOF from Send), else the send's error.
func closeAndRecvErr[T any](stream interface{ CloseAndRecv() (T, error) }, err error) error {
	if errors.Is(err, io.EOF) {
		if _, serr := stream.CloseAndRecv(); serr != nil {
			return serr
		}
		return fmt.Errorf("client: the server closed the upload early")
	}
	return err
}
