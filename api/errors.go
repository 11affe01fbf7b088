package api

import (
	"compress/flate"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"io"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/matrixio"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/wire"
)

// Named reasons for the errors the server returns, for errors.Is. Each maps
// to one gRPC code in Status.
var (
	// ErrInvalid: the request or the uploaded data is malformed.
	ErrInvalid = errors.New("invalid request")
	// ErrNotFound: an unknown matrix, vector or job id, or a solution that
	// was not kept.
	ErrNotFound = errors.New("not found")
	// ErrLimit: a server limit (sizes, queue, memory budget) was hit.
	ErrLimit = errors.New("server limit reached")
	// ErrInUse: the matrix is used by a queued or running job.
	ErrInUse = errors.New("in use")
	// ErrUnauthenticated: the bearer token is missing or wrong.
	ErrUnauthenticated = errors.New("unauthenticated")
	// ErrShuttingDown: the server is shutting down and takes no new work.
	ErrShuttingDown = errors.New("server is shutting down")
	// ErrStalled: an upload's client sent nothing for the idle timeout.
	ErrStalled = errors.New("upload stalled")
	// ErrPanic: the server caught a panic; a log line has the details.
	ErrPanic = errors.New("internal error (a panic, logged by the server)")
)

// Status converts an error to the gRPC status the client sees. It is the
// one place that picks codes; handlers return plain Go errors and the
// interceptors call Status on them. Errors that already carry a gRPC status
// (those of a stream whose client has gone) keep it.
func Status(err error) error {
	if err == nil {
		return nil
	}
	var pe *matrixio.ParseError
	var re *wire.RawError
	var se *solve.SetupError
	code := codes.Internal
	switch {
	case errors.Is(err, context.Canceled):
		code = codes.Canceled
	case errors.Is(err, context.DeadlineExceeded), errors.Is(err, ErrStalled):
		code = codes.DeadlineExceeded
	case errors.Is(err, ErrUnauthenticated):
		code = codes.Unauthenticated
	case errors.Is(err, ErrShuttingDown):
		code = codes.Unavailable
	case errors.Is(err, ErrNotFound):
		code = codes.NotFound
	// A size line over a limit is a ParseError too: test the limit first.
	case errors.Is(err, ErrLimit), errors.Is(err, matrixio.ErrLimit):
		code = codes.ResourceExhausted
	case errors.Is(err, ErrInvalid), errors.Is(err, solve.ErrInvalid), errors.As(err, &pe), errors.As(err, &re),
		errors.Is(err, wire.ErrPartialEntry),
		errors.Is(err, sparse.ErrInvalidCSR), errors.Is(err, io.ErrUnexpectedEOF),
		errors.Is(err, gzip.ErrHeader), errors.Is(err, gzip.ErrChecksum), isFlateCorrupt(err):
		code = codes.InvalidArgument
	case errors.Is(err, ErrInUse), errors.Is(err, solve.ErrNotSquare), errors.Is(err, solve.ErrNotSymmetric),
		errors.As(err, &se),
		errors.Is(err, krylov.ErrNotPositiveDefinite), errors.Is(err, krylov.ErrPreconditionerNotSPD),
		errors.Is(err, krylov.ErrNotFinite), errors.Is(err, precond.ErrBreakdown),
		errors.Is(err, precond.ErrNotSquare), errors.Is(err, precond.ErrTooLarge),
		errors.Is(err, precond.ErrMissingDiagonal), errors.Is(err, precond.ErrZeroDiagonal),
		errors.Is(err, precond.ErrNegativeDiagonal), errors.Is(err, precond.ErrNotFiniteDiagonal):
		code = codes.FailedPrecondition
	default:
		if s, ok := status.FromError(err); ok {
			return s.Err()
		}
	}
	return status.Error(code, err.Error())
}

func isFlateCorrupt(err error) bool {
	var ce flate.CorruptInputError
	return errors.As(err, &ce)
}

// invalidf returns an ErrInvalid error with a message.
func invalidf(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrInvalid}, args...)...)
}

// limitf returns an ErrLimit error with a message.
func limitf(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrLimit}, args...)...)
}

// notFoundf returns an ErrNotFound error with a message.
func notFoundf(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrNotFound}, args...)...)
}
