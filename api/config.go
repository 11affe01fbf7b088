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
	if c.Logger == nil {
		c.Logger = slog.Default()
	}
	if (c.TLSCert == "") != (c.TLSKey == "") {
		return c, fmt.Errorf("api: TLS needs both a certificate and a key file")
	}
	return c, nil
}
