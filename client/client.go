package client

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"os"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/keepalive"

	pb "github.com/residua/residua/proto/residua/v1"
)

// Keepalive is matched with the server's enforcement policy (api: pings no
// more often than every 15 s are permitted): the client pings an idle
// connection every 30 s and gives up on it after 20 s without an answer, so
// an hours-long quiet solve stream stays open through idle-connection
// reapers and a dead server is noticed.
const (
	KeepaliveTime    = 30 * time.Second
	KeepaliveTimeout = 20 * time.Second
)

// DefaultChunkSize is the payload of each upload message: 1 MiB, well under
// gRPC's 4 MiB message limit.
const DefaultChunkSize = 1 << 20

// maxChunkSize bounds WithChunkSize: 4,000,000 bytes of payload still fit a
// 4 MiB message with its framing.
const maxChunkSize = 4_000_000

// Client is a connection to a residua server. Its methods are safe for
// concurrent use.
type Client struct {
	conn   *grpc.ClientConn
	rpc    pb.SolverClient
	chunk  int
	inline int
}

type options struct {
	token    string
	tokenErr error
	tls      *tls.Config
	chunk    int
	inline   int
	dialOpts []grpc.DialOption
}

// Option configures Dial.
type Option func(*options)

// WithToken sends the bearer token with every call.
func WithToken(token string) Option {
	return func(o *options) { o.token = strings.TrimSpace(token) }
}

// WithTokenFile reads the bearer token from a file (surrounding white space
// trimmed), as the server's token file holds it.
func WithTokenFile(path string) Option {
	return func(o *options) {
		b, err := os.ReadFile(path)
		if err != nil {
			o.tokenErr = fmt.Errorf("client: reading the token file: %w", err)
			return
		}
		o.token = strings.TrimSpace(string(b))
	}
}

// WithTLS speaks TLS with the given configuration (nil: the system's roots).
// Without it the connection is plaintext.
func WithTLS(cfg *tls.Config) Option {
	return func(o *options) {
		if cfg == nil {
			cfg = &tls.Config{MinVersion: tls.VersionTLS12}
		}
		o.tls = cfg
	}
}

// WithCAFile speaks TLS and trusts the certificates in a PEM file (for a
// server with a self-signed certificate).
func WithCAFile(path string) Option {
	return func(o *options) {
		pem, err := os.ReadFile(path)
		if err != nil {
			o.tokenErr = fmt.Errorf("client: reading the CA file: %w", err)
			return
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			o.tokenErr = fmt.Errorf("client: no PEM certificate in %s", path)
			return
		}
		o.tls = &tls.Config{RootCAs: pool, MinVersion: tls.VersionTLS12}
	}
}

// WithChunkSize sets the payload bytes of each upload message (default
// DefaultChunkSize; at most 4,000,000).
func WithChunkSize(n int) Option {
	return func(o *options) { o.chunk = n }
}

// WithInlineVectorBytes sets how many bytes of vectors a solve request
// may carry inline (default 2 MiB, at most 3 MiB so the request fits
// gRPC's 4 MiB message limit); longer vectors are uploaded first with
// UploadVector. Zero uploads every vector.
func WithInlineVectorBytes(n int) Option {
	return func(o *options) { o.inline = n }
}

// WithDialOptions adds gRPC dial options (a custom dialer in tests, for
// example).
func WithDialOptions(opts ...grpc.DialOption) Option {
	return func(o *options) { o.dialOpts = append(o.dialOpts, opts...) }
}

// Dial makes a client for the server at addr (host:port). The connection
// is made lazily: Dial does not wait for the server, and an unreachable
// server shows up as an UNAVAILABLE error from the first call. ctx is not
// kept.
func Dial(ctx context.Context, addr string, opts ...Option) (*Client, error) {
	o := options{chunk: DefaultChunkSize, inline: inlineBudget}
	for _, opt := range opts {
		opt(&o)
	}
	if o.tokenErr != nil {
		return nil, o.tokenErr
	}
	if o.chunk < 1 || o.chunk > maxChunkSize {
		return nil, fmt.Errorf("client: chunk size %d is outside [1, %d]", o.chunk, maxChunkSize)
	}
	if o.inline < 0 || o.inline > maxInline {
		return nil, fmt.Errorf("client: inline vector bytes %d is outside [0, %d]", o.inline, maxInline)
	}
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	dial := []grpc.DialOption{
		grpc.WithKeepaliveParams(keepalive.ClientParameters{
			Time: KeepaliveTime, Timeout: KeepaliveTimeout, PermitWithoutStream: true,
		}),
		// Fixed flow-control windows for what the client receives
		// (solutions), as the server sets for uploads: gRPC's default
		// starts at 64 KiB and makes a multi-megabyte transfer wait on
		// window updates.
		grpc.WithInitialWindowSize(4 << 20),
		grpc.WithInitialConnWindowSize(16 << 20),
	}
	if o.tls != nil {
		dial = append(dial, grpc.WithTransportCredentials(credentials.NewTLS(o.tls)))
	} else {
		dial = append(dial, grpc.WithTransportCredentials(insecure.NewCredentials()))
	}
	if o.token != "" {
		dial = append(dial, grpc.WithPerRPCCredentials(bearer{token: o.token, secure: o.tls != nil}))
	}
	dial = append(dial, o.dialOpts...)
	conn, err := grpc.NewClient(addr, dial...)
	if err != nil {
		return nil, fmt.Errorf("client: %w", err)
	}
	return &Client{conn: conn, rpc: pb.NewSolverClient(conn), chunk: o.chunk, inline: o.inline}, nil
}

// Close closes the connection.
func (c *Client) Close() error { return c.conn.Close() }

// Conn returns the underlying gRPC connection.
func (c *Client) Conn() *grpc.ClientConn { return c.conn }

// RPC returns the generated stub, for calls this package does not wrap.
func (c *Client) RPC() pb.SolverClient { return c.rpc }

// Health asks the standard health service whether the server is serving
// (the empty service name means the whole server).
func (c *Client) Health(ctx context.Context) (healthpb.HealthCheckResponse_ServingStatus, error) {
	resp, err := healthpb.NewHealthClient(c.conn).Check(ctx, &healthpb.HealthCheckRequest{})
	if err != nil {
		return healthpb.HealthCheckResponse_UNKNOWN, err
	}
	return resp.GetStatus(), nil
}

// bearer sends the token as "authorization: Bearer <token>".
type bearer struct {
	token  string
	secure bool
}

func (b bearer) GetRequestMetadata(ctx context.Context, uri ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + b.token}, nil
}

// RequireTransportSecurity is false so that a token also works over
// plaintext to a loopback server; over any other network use TLS, or the
// token travels in the clear.
func (b bearer) RequireTransportSecurity() bool { return false }

// Jobs lists the server's jobs, newest first.
func (c *Client) Jobs(ctx context.Context) ([]*pb.Job, error) {
	resp, err := c.rpc.ListJobs(ctx, &pb.ListJobsRequest{})
	if err != nil {
		return nil, err
	}
	return resp.GetJobs(), nil
}

// Job describes one job.
func (c *Client) Job(ctx context.Context, jobID string) (*pb.Job, error) {
	return c.rpc.GetJob(ctx, &pb.GetJobRequest{JobId: jobID})
}

// Cancel cancels a job and returns it as it is after the request.
func (c *Client) Cancel(ctx context.Context, jobID string) (*pb.Job, error) {
	return c.rpc.CancelJob(ctx, &pb.CancelJobRequest{JobId: jobID})
}

// Matrices lists the stored matrices, most recently used first.
func (c *Client) Matrices(ctx context.Context) ([]*pb.Matrix, error) {
	resp, err := c.rpc.ListMatrices(ctx, &pb.ListMatricesRequest{})
	if err != nil {
		return nil, err
	}
	return resp.GetMatrices(), nil
}

// DeleteMatrix deletes a stored matrix and returns the bytes freed.
func (c *Client) DeleteMatrix(ctx context.Context, matrixID string) (int64, error) {
	resp, err := c.rpc.DeleteMatrix(ctx, &pb.DeleteMatrixRequest{Id: matrixID})
	if err != nil {
		return 0, err
	}
	return resp.GetFreedBytes(), nil
}
