// Package api is the residua gRPC server: it stores uploaded matrices,
// runs solve jobs on them (conjugate gradients for SPD matrices, LSQR or
// CGLS for least squares) through the same solve layer as a local solve
// (package solve: so a remote solve gives bitwise the same x and the same
// summary, except that its max_iter and time_limit_seconds echo the
// server's ceilings where they applied), and streams their progress to any number of clients. What
// crosses the wire (vectors, the CSR_RAW codec, the summary and progress
// messages) is converted in package wire, shared with the client. The service is
// defined, message by message, in proto/residua/v1/residua.proto; this
// package implements it.
//
// # Pieces
//
// Server (NewServer, Serve) registers the Solver service, the standard
// grpc.health.v1 health service and server reflection, with keepalive
// matched to the bundled client, optional TLS and an optional bearer token
// checked in the interceptors. The interceptors also recover from panics
// (logging the stack and answering INTERNAL) and convert every handler
// error to a gRPC status with Status, the one function that picks codes.
//
// Registry (registry.go, job.go) holds the jobs. A job is queued (the
// queue is bounded by Config.MaxQueued; past it a request gets
// RESOURCE_EXHAUSTED), then runs in its own goroutine when one of
// Config.MaxConcurrentSolves slots is free (run.go). Each right-hand side
// records every iteration in a history.Log, bounded by thinning evenly past
// 4096 rows (progress.go): that full history is what GetHistory and the
// watch page read. Its events (queued, accepted, progress at the request's
// rate, results, finished) go to a replay kept for late watchers (progress
// thinned to at most 2048 events) and to each subscriber's own queue, which
// drops its oldest progress events when its reader is slow and counts
// them; nothing else is ever dropped, and the solver never waits on a
// reader. Exactly one goroutine sends on each stream (handlers.go). A job's
// state is queued, running or done, and its outcome one of package solve's
// words; Config.Observer (the metrics) is told of every start, end and
// iteration count. Registry is exported so that other front ends (the web
// page) can list jobs and read their histories.
//
// The store accounts for matrices, stored vectors, cached preconditioners,
// running jobs' vectors and kept solutions against Config.MemoryBudget
// (store.go). Items are keyed by kind and id; space is reserved before the
// allocation it stands for; idle items are evicted least recently used
// first to make room, and an item a queued or running job uses is pinned,
// through a handle that releases its pin once, and never evicted.
// The fairness rule: a matrix, vector or kept solution used within
// Config.ProtectRecent (10 min) is not evicted for anyone else's request,
// which is refused with RESOURCE_EXHAUSTED instead, its message naming
// what holds the budget (pinned by jobs, reserved by uploads in progress
// or by set-ups, recently used). Preconditioner set-ups are cached by
// (matrix id, preconditioner) in precache.go: the second solve on a matrix
// skips the set-up and its accepted event says so; a job runs the cached
// set-up with its own request's settings.
//
// # Ceilings
//
// Each right-hand side's iterations are capped at Config.MaxJobIterations
// and a job's wall time at Config.MaxJobTime (run.go); a request's
// max_iter and time_limit lower them, never raise them, and the accepted
// event echoes them. A SolveRequest's references are counted in its wire
// bytes before they are decoded (codec.go), so a request of a million
// empty references costs its 2 MB and no more.
//
// # Uploads
//
// An upload is parsed as its chunks arrive: a reader pulls one chunk at a
// time from the stream, so the server holds one chunk plus the matrix
// being built, never the whole text. Bytes are counted as they arrive and
// the upload is refused as soon as they pass Config.MaxUploadBytes; the
// Matrix Market size line (or the CSR_RAW metadata) is checked against
// MaxRows, MaxNonzeros and matrixio.MostlyEmpty (unless
// Config.AllowMostlyEmpty), and the matrix's cost (rows and entries:
// triplets while parsing, then CSR) is reserved in the budget, before
// anything is allocated. Metadata alone reserves nothing: a CSR_RAW
// matrix's arrays and a vector grow as their bytes arrive
// (wire.DecodeCSRCharged, wire.Grow), charged before each allocation, so an
// upload holds at most wire.GrowAmplification (8) times what it sent. The
// stream is read
// on a goroutine of its own (the pump in upload.go) so that an upload whose
// client sends nothing for Config.UploadIdleTimeout is dropped
// (DEADLINE_EXCEEDED) and its reservation released. Every gzip error is
// INVALID_ARGUMENT, and a malformed expected_sha256 is refused at the
// metadata. A matrix's id is the SHA-256 of its dimensions and CSR
// arrays, so the same matrix is stored once.
//
// # The data folder
//
// With Config.DataDir the state survives restarts and crashes (README,
// "The data folder"): datadir.go and datavec.go keep uploaded matrices and
// vectors as csrfiles named by id, written before the upload's reply,
// listed from their headers at start-up and read back, verified, on first
// use, under a disk budget with the store's eviction rule; jobstore.go
// keeps job records and histories in go.etcd.io/bbolt (committed before a
// job's id is sent), checkpoints of running detached jobs and their kept
// solutions, and at start-up restores finished jobs and runs queued and
// running detached ones again from their last checkpoints. Damaged files are
// quarantined with a log line.
//
// # Errors
//
// Handlers return Go errors wrapping the named reasons of this package
// (ErrInvalid, ErrNotFound, ErrLimit, ...) or of matrixio, sparse, precond
// and krylov; Status maps them to codes with errors.Is. Nothing here
// panics on client input; the server never allocates on a client's say-so
// without a bound; an accepted job always ends with a finished event.
//
// # Logs
//
// Config.Logger (log/slog) gets one line per upload (ids, sizes, duration,
// outcome), per job start and end, and per shutdown step. Secrets (the
// token) are never logged.
package api
