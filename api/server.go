package api

import (
	"bytes"
	"context"
	"crypto/subtle"
	"crypto/tls"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"runtime/debug"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/keepalive"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/reflection"

	pb "github.com/residua/residua/proto/residua/v1"
)

// Keepalive policy, matched with the bundled client (client.Dial): the
// client pings an idle connection every 30 s (KeepaliveClientTime in the
// client), which the server permits because its enforcement minimum is
// 15 s, so an hours-long quiet stream (a long solve with rare progress) is
// neither closed by the server as abusive nor dropped silently by a
// middlebox. The server pings idle clients every 60 s and drops one that
// does not answer within 20 s, so a vanished client's job is cancelled.
const (
	KeepaliveMinTime       = 15 * time.Second
	keepaliveServerTime    = 60 * time.Second
	keepaliveServerTimeout = 20 * time.Second
)

// Flow-control windows for data the server receives (uploads). gRPC's
// default starts at 64 KiB and grows with its bandwidth-delay estimate,
// which leaves a multi-megabyte upload waiting on window updates much of
// the time; a fixed 4 MiB per stream (a few upload chunks in flight) and
// 16 MiB per connection keep the sender busy. They bound what one stream
// (connection) can make the server buffer.
const (
	streamWindow = 4 << 20
	connWindow   = 16 << 20
)

// Server is the residua gRPC service. Make one with NewServer and run it
// with Serve; it serves once.
type Server struct {
	pb.UnimplementedSolverServer

	cfg    Config
	log    *slog.Logger
	token  []byte // nil: no authentication
	grpc   *grpc.Server
	health *health.Server
	store  *store
	jobs   *Registry
	obs    Observer // nil: none
	// uploaded counts the bytes received by all uploads (for metrics).
	uploaded atomic.Int64
	// data is the data folder (Config.DataDir) and jobsDB its job store;
	// nil without one.
	data   *dataDir
	jobsDB *jobStore

	mu sync.Mutex // guards the fields below
	// building holds the preconditioners being set up, by cache key, so
	// that jobs asking for the same one at once wait for one set-up.
	building map[key]*setupEntry
	closing  bool

	// testHookIteration, when set (by tests), is called from the solver
	// loop at every iteration with the job's context.
	testHookIteration func(ctx context.Context, jobID string, rhs, iteration int)
}

// NewServer makes a server from cfg (zero fields take their defaults). It
// reads the token and TLS files now, so a missing file fails here.
func NewServer(cfg Config) (*Server, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	s := &Server{
		cfg:      cfg,
		log:      cfg.Logger,
		store:    newStore(cfg.MemoryBudget, cfg.ProtectRecent),
		building: make(map[key]*setupEntry),
		obs:      cfg.Observer,
	}
	s.jobs = newRegistry(cfg.Logger, cfg.Observer, cfg.MaxConcurrentSolves, cfg.MaxQueued, cfg.MaxJobsKept)
	if cfg.DataDir != "" {
		if s.data, err = openDataDir(cfg.DataDir, cfg.DiskBudget, cfg.Logger, s.inUse); err != nil {
			return nil, err
		}
		if s.jobsDB, err = openJobStoreOrQuarantine(cfg.DataDir, cfg.CheckpointEvery, cfg.Logger, s.data); err != nil {
			return nil, err
		}
	}
	s.jobs.onForget = s.forgetJob
	if cfg.TokenFile != "" {
		if s.token, err = ReadToken(cfg.TokenFile); err != nil {
			return nil, err
		}
	}
	opts := []grpc.ServerOption{
		grpc.KeepaliveEnforcementPolicy(keepalive.EnforcementPolicy{
			MinTime:             KeepaliveMinTime,
			PermitWithoutStream: true,
		}),
		grpc.KeepaliveParams(keepalive.ServerParameters{
			Time:    keepaliveServerTime,
			Timeout: keepaliveServerTimeout,
		}),
		grpc.InitialWindowSize(streamWindow),
		grpc.InitialConnWindowSize(connWindow),
		grpc.ForceServerCodecV2(newRequestCodec(cfg.MaxRHS)),
		grpc.ChainUnaryInterceptor(s.unaryInterceptor),
		grpc.ChainStreamInterceptor(s.streamInterceptor),
	}
	if cfg.TLSCert != "" {
		cert, err := tls.LoadX509KeyPair(cfg.TLSCert, cfg.TLSKey)
		if err != nil {
			return nil, fmt.Errorf("api: loading the TLS key pair: %w", err)
		}
		opts = append(opts, grpc.Creds(credentials.NewTLS(&tls.Config{
			Certificates: []tls.Certificate{cert},
			MinVersion:   tls.VersionTLS12,
		})))
	}
	s.grpc = grpc.NewServer(opts...)
	pb.RegisterSolverServer(s.grpc, s)
	s.health = health.NewServer()
	healthpb.RegisterHealthServer(s.grpc, s.health)
	s.health.SetServingStatus(pb.Solver_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	reflection.Register(s.grpc)
	return s, nil
}

// ReadToken reads a token file as the server does: its content with the
// surrounding white space trimmed, which must not be empty. The watch page
// (package web) takes the same token from it.
func ReadToken(path string) ([]byte, error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("api: reading the token file: %w", err)
	}
	tok := bytes.TrimSpace(raw)
	if len(tok) == 0 {
		return nil, fmt.Errorf("api: token file %s is empty", path)
	}
	return tok, nil
}

// Registry returns the server's job registry, for other front ends (the
// web page, metrics) to list and follow jobs.
func (s *Server) Registry() *Registry { return s.jobs }

// UploadBytes returns the bytes received by all matrix and vector uploads
// since the server started, refused ones included: a count that only
// grows.
func (s *Server) UploadBytes() int64 { return s.uploaded.Load() }

// StoredBytes returns the bytes held now by stored matrices (with the
// transposes kept for least-squares products) and by cached
// preconditioners.
func (s *Server) StoredBytes() (matrices, preconditioners int64) {
	for _, e := range s.store.snapshot(func(k key) bool {
		return k.kind == kindMatrix || k.kind == kindTranspose || k.kind == kindSetup
	}) {
		if e.key.kind == kindSetup {
			preconditioners += e.bytes
		} else {
			matrices += e.bytes
		}
	}
	return matrices, preconditioners
}

// Config returns the configuration in use, defaults filled in.
func (s *Server) Config() Config { return s.cfg }

// ListenAndServe listens on cfg.Listen and serves until ctx is done (see
// Serve).
func (s *Server) ListenAndServe(ctx context.Context) error {
	lis, err := net.Listen("tcp", s.cfg.Listen)
	if err != nil {
		return err
	}
	return s.Serve(ctx, lis)
}

// Serve serves gRPC on lis until ctx is done or the listener fails, then
// shuts down in order: health goes NOT_SERVING and new work is refused
// (UNAVAILABLE); running and queued jobs get ShutdownGrace to finish and
// are then cancelled, their histories kept; the gRPC server stops
// gracefully (open streams end as their jobs end), bounded by StopTimeout,
// then forcibly. Serve returns nil after a shutdown caused by ctx.
func (s *Server) Serve(ctx context.Context, lis net.Listener) error {
	s.log.Info("serving", "address", lis.Addr().String(), "tls", s.cfg.TLSCert != "", "auth", s.token != nil,
		"max_concurrent_solves", s.cfg.MaxConcurrentSolves, "max_queued", s.cfg.MaxQueued,
		"memory_budget_bytes", s.cfg.MemoryBudget, "max_upload_bytes", s.cfg.MaxUploadBytes,
		"max_job_iterations", s.cfg.MaxJobIterations, "max_job_time", s.cfg.MaxJobTime.String(),
		"upload_idle_timeout", s.cfg.UploadIdleTimeout.String(), "protect_recent", s.cfg.ProtectRecent.String(),
		"allow_mostly_empty", s.cfg.AllowMostlyEmpty)
	s.restoreJobs()
	serveErr := make(chan error, 1)
	go func() { serveErr <- s.grpc.Serve(lis) }()
	var err error
	select {
	case err = <-serveErr:
		// The listener failed: shut down what runs, then report it.
		s.shutdown()
		return err
	case <-ctx.Done():
	}
	s.shutdown()
	if err := <-serveErr; err != nil && !errors.Is(err, grpc.ErrServerStopped) {
		return err
	}
	return nil
}

// shutdown runs the shutdown sequence described on Serve.
func (s *Server) shutdown() {
	start := time.Now()
	s.log.Info("shutting down", "grace", s.cfg.ShutdownGrace.String())
	s.health.Shutdown()
	s.mu.Lock()
	s.closing = true
	s.mu.Unlock()
	s.jobs.close()

	graceCtx, cancel := context.WithTimeout(context.Background(), s.cfg.ShutdownGrace)
	if err := s.jobs.wait(graceCtx); err != nil {
		q, r := s.jobs.Counts()
		s.log.Warn("grace period over; cancelling jobs", "queued", q, "running", r)
		s.jobs.cancelAll(fmt.Errorf("%w: %w", errStopping, context.Canceled))
		// The solvers check their context every iteration; wait for them.
		_ = s.jobs.wait(context.Background())
	}
	cancel()

	stopped := make(chan struct{})
	go func() { s.grpc.GracefulStop(); close(stopped) }()
	select {
	case <-stopped:
	case <-time.After(s.cfg.StopTimeout):
		s.log.Warn("graceful stop timed out; stopping forcibly", "timeout", s.cfg.StopTimeout.String())
		s.grpc.Stop()
		<-stopped
	}
	if s.jobsDB != nil {
		if err := s.jobsDB.close(); err != nil {
			s.log.Error("closing the job store", "error", err.Error())
		}
	}
	s.log.Info("stopped", "duration", time.Since(start).String())
}

// refuseIfClosing returns ErrShuttingDown once shutdown has begun.
func (s *Server) refuseIfClosing() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closing {
		return ErrShuttingDown
	}
	return nil
}

// authorize checks the bearer token of a call. The health service is open,
// so that orchestrator probes need no secret.
func (s *Server) authorize(ctx context.Context, method string) error {
	if s.token == nil || strings.HasPrefix(method, "/grpc.health.v1.Health/") {
		return nil
	}
	md, _ := metadata.FromIncomingContext(ctx)
	for _, v := range md.Get("authorization") {
		scheme, tok, ok := strings.Cut(v, " ")
		if ok && strings.EqualFold(scheme, "bearer") &&
			subtle.ConstantTimeCompare([]byte(strings.TrimSpace(tok)), s.token) == 1 {
			return nil
		}
	}
	// Log the method and peer only: never what was presented.
	s.log.Warn("unauthenticated call refused", "method", method, "token_present", len(md.Get("authorization")) > 0)
	return fmt.Errorf("%w: a valid bearer token is required (authorization: Bearer <token>)", ErrUnauthenticated)
}

func (s *Server) unaryInterceptor(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (resp any, err error) {
	defer func() {
		if p := recover(); p != nil {
			s.log.Error("handler panicked", "method", info.FullMethod, "panic", fmt.Sprint(p), "stack", string(debug.Stack()))
			resp, err = nil, Status(ErrPanic)
		}
	}()
	if err := s.authorize(ctx, info.FullMethod); err != nil {
		return nil, Status(err)
	}
	resp, err = handler(ctx, req)
	return resp, Status(err)
}

func (s *Server) streamInterceptor(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) (err error) {
	defer func() {
		if p := recover(); p != nil {
			s.log.Error("handler panicked", "method", info.FullMethod, "panic", fmt.Sprint(p), "stack", string(debug.Stack()))
			err = Status(ErrPanic)
		}
	}()
	if err := s.authorize(ss.Context(), info.FullMethod); err != nil {
		return Status(err)
	}
	return Status(handler(srv, ss))
}
