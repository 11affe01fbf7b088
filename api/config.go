package api

import (
	"fmt"
	"log/slog"
	"runtime"
	"time"
)

// DefaultListen is the address `residua serve` listens on by default:
// loopback only, so that exposing the service is an explicit choice.
const DefaultListen = "127.0.0.1:7447"

// Defaults of the Config fields. Each is documented on its field.
const (
	DefaultMaxUploadBytes = 4 << 30
	DefaultMaxRows        = 50_000_000
	DefaultMaxNonzeros    = 200_000_000
	DefaultMaxRHS         = 64
	DefaultMaxQueued      = 64
	DefaultMemoryBudget   = 8 << 30
	DefaultMaxJobsKept    = 1000
	DefaultShutdownGrace  = 10 * time.Second
	DefaultStopTimeout    = 5 * time.Second

	DefaultMaxJobIterations  = 10_000_000
	DefaultMaxJobTime        = time.Hour
	DefaultUploadIdleTimeout = 30 * time.Second
	DefaultProtectRecent     = 10 * time.Minute
)

// Config holds a server's settings. The zero value works: every field's
// comment gives the default used when it is zero.
type Config struct {
	// Listen is the address ListenAndServe listens on. Default
	// DefaultListen (127.0.0.1:7447).
	Listen string

	// MaxUploadBytes bounds one matrix or vector upload: the bytes received
	// on the wire and, for gzip uploads, the bytes after decompression.
	// An upload is refused as soon as it passes the bound. Default 4 GiB.
	MaxUploadBytes int64
	// MaxRows bounds the rows (and columns) of an uploaded matrix and the
	// length of an uploaded vector, checked against the Matrix Market size
	// line or the CSR_RAW metadata before anything is allocated. Default
	// 50,000,000.
	MaxRows int
	// MaxNonzeros bounds the stored entries of an uploaded matrix, checked
	// like MaxRows. Default 200,000,000 (2.4 GB of CSR arrays).
	MaxNonzeros int64
	// MaxRHS bounds the right-hand sides of one solve request. Default 64.
	MaxRHS int
	// MaxConcurrentSolves is the number of jobs that iterate at once; more
	// wait in the queue. Default GOMAXPROCS: sparse's worker pool serves
	// one solve's kernels at a time and the others run theirs on their own
	// goroutine, so a job alone uses every core and GOMAXPROCS jobs use
	// about one core each; more running jobs would only time-slice the
	// cores and hold more memory, while a queued job waits for nothing
	// but a core.
	MaxConcurrentSolves int
	// MaxQueued bounds the jobs waiting for a solve slot; a request past it
	// gets RESOURCE_EXHAUSTED. Default 64.
	MaxQueued int
	// MemoryBudget bounds the bytes of stored matrices, stored vectors,
	// cached preconditioners, running jobs' vectors and kept solutions.
	// Idle items are evicted least recently used first to make room; items
	// in use by a queued or running job never are. Default 8 GiB.
	MemoryBudget int64
	// MaxJobsKept bounds the finished jobs remembered for Watch, GetJob
	// and ListJobs; the oldest finished are forgotten first. Default 1000.
	MaxJobsKept int

	// TokenFile, when set, names a file whose content (surrounding white
	// space trimmed) is the bearer token every RPC except the health check
	// must present. The token is never logged.
	TokenFile string
	// TLSCert and TLSKey, when both set, name PEM files; the server then
	// speaks TLS only.
	TLSCert, TLSKey string

	// Observer, when set, is told of every job's start, end (with its
	// outcome) and iterations: the service's metrics. Default none.
	Observer Observer

	// Logger receives the structured logs. Default slog.Default().
	Logger *slog.Logger
	// ShutdownGrace is how long running solves may continue after shutdown
	// begins before they are cancelled. Default 10 s.
	ShutdownGrace time.Duration
	// StopTimeout bounds the graceful stop of the gRPC server (waiting for
	// open streams to end) after the jobs have ended; then the server
	// stops forcibly. Default 5 s.
	StopTimeout time.Duration

	// MaxJobIterations is the ceiling on the iterations of each right-hand
	// side of a job: a request's max_iter (or its default, 10·n) above it
	// is lowered to it, never raised. The ceiling in force is echoed in
	// the job's accepted event. Default 10,000,000 (our own choice: about
	// ten seconds of a 5×5 system's iterations; a preconditioned solve of
	// the largest matrix the default limits admit needs far fewer).
	MaxJobIterations int
	// MaxJobTime is the ceiling on a job's wall time, its right-hand sides
	// together: each one's time_limit is lowered to what remains of it, so
	// a job ends with the time-limit outcome at the latest this long after
	// it starts iterating. Default 1 h.
	MaxJobTime time.Duration
	// UploadIdleTimeout ends an upload whose client sends nothing for this
	// long (DEADLINE_EXCEEDED), releasing what it reserved. Default 30 s.
	UploadIdleTimeout time.Duration
	// ProtectRecent is the fairness rule's window: a matrix, vector or
	// kept solution used within it is not evicted to make room for another
	// request, which is refused with RESOURCE_EXHAUSTED instead. Default
	// 10 min.
	ProtectRecent time.Duration
	// AllowMostlyEmpty accepts matrices whose dimensions dwarf their
	// entries (matrixio.MostlyEmpty: more than half the rows or columns
	// necessarily empty). By default they are refused at the size line or
	// metadata with INVALID_ARGUMENT, because their row pointers cost 8
	// bytes a row however short the upload.
	AllowMostlyEmpty bool
	// DataDir, when set, is the data folder: uploaded matrices are written
	// there (by content id, fsynced) before the upload's reply, listed
	// again at start-up and read back, checksums verified, on first use
	// (see datadir.go). Default "": nothing is kept across restarts.
	DataDir string
	// DiskBudget bounds the bytes of the data folder's matrices; to make
	// room the least recently used are deleted, never one a queued or
	// running job uses. Default 64 GiB.
	DiskBudget int64
	// CheckpointEvery is the wall time between two checkpoints of a
	// running detached job with a data folder (also written when a
	// shutdown cancels it). Default 30 s.
	CheckpointEvery time.Duration
}

// withDefaults returns c with zero fields replaced by their defaults, or an
// error for a negative value.
func (c Config) withDefaults() (Config, error) {
	if c.Listen == "" {
		c.Listen = DefaultListen
	}
	neg := func(name string, v int64) error {
		if v < 0 {
			return fmt.Errorf("api: %s is negative (%d)", name, v)
		}
		return nil
	}
	for _, f := range []struct {
		name string
		v    int64
	}{
		{"MaxUploadBytes", c.MaxUploadBytes}, {"MaxRows", int64(c.MaxRows)},
		{"MaxNonzeros", c.MaxNonzeros}, {"MaxRHS", int64(c.MaxRHS)},
		{"MaxConcurrentSolves", int64(c.MaxConcurrentSolves)}, {"MaxQueued", int64(c.MaxQueued)},
		{"MemoryBudget", c.MemoryBudget}, {"MaxJobsKept", int64(c.MaxJobsKept)},
		{"ShutdownGrace", int64(c.ShutdownGrace)}, {"StopTimeout", int64(c.StopTimeout)},
		{"MaxJobIterations", int64(c.MaxJobIterations)}, {"MaxJobTime", int64(c.MaxJobTime)},
		{"UploadIdleTimeout", int64(c.UploadIdleTimeout)}, {"ProtectRecent", int64(c.ProtectRecent)},
		{"DiskBudget", c.DiskBudget}, {"CheckpointEvery", int64(c.CheckpointEvery)},
	} {
		if err := neg(f.name, f.v); err != nil {
			return c, err
		}
	}
	def := func(v *int64, d int64) {
		if *v == 0 {
			*v = d
		}
	}
	defInt := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	def(&c.MaxUploadBytes, DefaultMaxUploadBytes)
	defInt(&c.MaxRows, DefaultMaxRows)
	def(&c.MaxNonzeros, DefaultMaxNonzeros)
	defInt(&c.MaxRHS, DefaultMaxRHS)
	defInt(&c.MaxConcurrentSolves, runtime.GOMAXPROCS(0))
	defInt(&c.MaxQueued, DefaultMaxQueued)
	def(&c.MemoryBudget, DefaultMemoryBudget)
	defInt(&c.MaxJobsKept, DefaultMaxJobsKept)
	def(&c.DiskBudget, DefaultDiskBudget)
	if c.CheckpointEvery == 0 {
		c.CheckpointEvery = DefaultCheckpointEvery
	}
	if c.ShutdownGrace == 0 {
		c.ShutdownGrace = DefaultShutdownGrace
	}
	if c.StopTimeout == 0 {
		c.StopTimeout = DefaultStopTimeout
	}
	defInt(&c.MaxJobIterations, DefaultMaxJobIterations)
	for _, d := range []struct {
		v *time.Duration
		d time.Duration
	}{{&c.MaxJobTime, DefaultMaxJobTime}, {&c.UploadIdleTimeout, DefaultUploadIdleTimeout}, {&c.ProtectRecent, DefaultProtectRecent}} {
		if *d.v == 0 {
			*d.v = d.d
		}
	}
	if c.Logger == nil {
		c.Logger = slog.Default()
	}
	if (c.TLSCert == "") != (c.TLSKey == "") {
		return c, fmt.Errorf("api: TLS needs both a certificate and a key file")
	}
	return c, nil
}
