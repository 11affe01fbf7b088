package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
)

// Environment variables the client commands read (flags override them).
const (
	envServer    = "RESIDUA_SERVER"     // the server's address, host:port
	envTokenFile = "RESIDUA_TOKEN_FILE" // a file holding the bearer token
)

// serverOpts are the flags of every command that talks to a server.
type serverOpts struct {
	addr, tokenFile, caFile string
	tls                     bool
}

func addServerFlags(f *cmdFlags, s *serverOpts) {
	f.StringVar(&s.addr, "server", "", "residua server `address` host:port (default $"+envServer+")")
	f.StringVar(&s.tokenFile, "token-file", "", "send the bearer token held in this `file` (default $"+envTokenFile+")")
	f.BoolVar(&s.tls, "tls", false, "speak TLS, trusting the system's certificate authorities")
	f.StringVar(&s.caFile, "ca-file", "", "speak TLS, trusting the certificates in this PEM `file`")
}

// resolve fills what the flags left empty from the environment.
func (s *serverOpts) resolve() {
	if s.addr == "" {
		s.addr = os.Getenv(envServer)
	}
	if s.tokenFile == "" {
		s.tokenFile = os.Getenv(envTokenFile)
	}
}

func (s *serverOpts) dial(ctx context.Context, cmd string) (*client.Client, error) {
	if s.addr == "" {
		return nil, usageErrorf("%s: no server: give --server host:port or set $%s", cmd, envServer)
	}
	var opts []client.Option
	if s.tokenFile != "" {
		opts = append(opts, client.WithTokenFile(s.tokenFile))
	}
	switch {
	case s.caFile != "":
		opts = append(opts, client.WithCAFile(s.caFile))
	case s.tls:
		opts = append(opts, client.WithTLS(nil))
	}
	c, err := client.Dial(ctx, s.addr, opts...)
	if err != nil {
		return nil, usageErrorf("%s: %v", cmd, err)
	}
	return c, nil
}

// remoteError gives a gRPC error from the server the exit status of the
// matching local failure, in a sentence rather than a status code:
// malformed input or an unknown id 2, not positive definite or breakdown
// 4, cancelled or past a deadline 3, anything else (unreachable, refused,
// unauthenticated) 1. The gRPC code stays on the error (grpcCodeOf) for
// --json, where scripts read it.
func remoteError(what, addr string, err error) error {
	st, ok := status.FromError(err)
	if !ok {
		return fmt.Errorf("%s: %w", what, err)
	}
	text := strings.TrimSuffix(st.Message(), ": context canceled")
	code := exitFailure
	switch st.Code() {
	case codes.InvalidArgument, codes.NotFound:
		code = exitUsage
	case codes.FailedPrecondition:
		code = exitBreakdown
	case codes.Canceled:
		code, text = exitNotConverged, "cancelled on request"
	case codes.DeadlineExceeded:
		code, text = exitNotConverged, "the deadline passed before the server answered"
	case codes.Unavailable:
		text = fmt.Sprintf("no residua server answers at %s (is 'residua serve' running there, and is the address right?)", addr)
	case codes.Unauthenticated:
		text = fmt.Sprintf("the server at %s wants a valid bearer token (--token-file or $%s)", addr, envTokenFile)
	case codes.PermissionDenied:
		text = fmt.Sprintf("the server at %s refused the bearer token: %s", addr, text)
	case codes.ResourceExhausted:
		text = "the server is out of room: " + text
	}
	return &exitError{code: code, err: &remoteFailure{code: st.Code(), err: fmt.Errorf("%s: %s", what, text)}}
}

// remoteFailure is an error from a server, in words, with its gRPC code.
type remoteFailure struct {
	code codes.Code
	err  error
}

func (e *remoteFailure) Error() string { return e.err.Error() }
func (e *remoteFailure) Unwrap() error { return e.err }

// grpcCodeOf returns the gRPC code name of a server's error ("" for a
// local one).
func grpcCodeOf(err error) string {
	var rf *remoteFailure
	if errors.As(err, &rf) {
		return rf.code.String()
	}
	return ""
}

// plainStatus returns a gRPC error as its message alone, for a summary
// that already names the server and the outcome.
func plainStatus(err error) error {
	if st, ok := status.FromError(err); ok && err != nil {
		msg := st.Message()
		msg = strings.TrimSuffix(msg, ": context canceled")
		return errors.New(msg)
	}
	return err
}
