package main

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/residua/residua/api"
	"github.com/residua/residua/metrics"
	"github.com/residua/residua/web"
)

func init() {
	register(&command{
		name:    "serve",
		summary: "run the solver service (gRPC) and, with --http, the watch page and metrics",
		run:     runServe,
	})
}

const serveAbout = `
Runs the residua solver service: simulation codes (or 'residua solve
--server') upload matrices once and solve many right-hand sides against them
over gRPC, with the preconditioner built once and cached, progress streamed,
and jobs that can be watched, listed and cancelled. The standard gRPC health
service and server reflection are registered.

It listens on loopback by default; give an explicit address (e.g.
0.0.0.0:7447) to expose it, ideally with --token-file and TLS. Port 0 picks
a free port. Once listening it prints "serving gRPC on ADDRESS" (and "watch
page on http://ADDRESS/" with --http) on stderr, followed by structured logs:
one line per upload and per job start and end.

--http adds the watch page: the jobs with their live residual curves, JSON
endpoints (/api/jobs, /api/jobs/ID, /api/jobs/ID/history,
/api/jobs/ID/chart.svg, /api/events) and Prometheus metrics at /metrics.
With --token-file, those endpoints and /metrics need the same bearer token
(the page asks for it once and keeps a session cookie); --metrics-listen
serves /metrics alone, open, on a separate address for a scraper.

A job's iterations and wall time have ceilings (--max-job-iterations,
--max-job-time) that a request can lower but not raise; an upload that
sends nothing for --upload-idle-timeout is dropped; a matrix, vector or
solution used within --protect-recent is never evicted for another
request, which is refused instead.

Limits are checked before anything is allocated. Sizes accept a unit:
KB, MB, GB (powers of 1000) or KiB, MiB, GiB (powers of 1024).

--data DIR keeps the state in DIR: every uploaded matrix and vector
(written and synced before the upload's reply, named by its id, read back
with its checksums verified on first use), the job records and histories
(committed before a job's id is sent), checkpoints of running detached jobs
every --checkpoint-every, and kept solutions. After a restart finished jobs
are listed again and queued or running detached jobs continue from their
last checkpoint. Damaged files are moved to DIR/quarantine with a log line.
--disk bounds the matrices and vectors (default 64GiB), deleting the least
recently used that no queued or running job uses. Without --data nothing is
kept across restarts.

SIGINT or SIGTERM shuts down in order: health goes NOT_SERVING, new work is
refused, running solves get --shutdown-grace to finish and are then
cancelled, open streams get --stop-timeout to close, then the servers stop.`

func runServe(ctx context.Context, e *env, args []string) error {
	var cfg api.Config
	var httpAddr, metricsAddr string
	uploadBytes := byteSize(api.DefaultMaxUploadBytes)
	memory := byteSize(api.DefaultMemoryBudget)
	disk := byteSize(api.DefaultDiskBudget)
	f := newFlags("serve", "residua serve [--listen 127.0.0.1:7447] [--http 127.0.0.1:7448] [limits] [--token-file F] [--tls-cert C --tls-key K]", serveAbout)
	f.StringVar(&cfg.Listen, "listen", api.DefaultListen, "gRPC `address` to listen on")
	f.StringVar(&httpAddr, "http", "", "also serve the watch page and /metrics on this `address` (default off); with --token-file they need the token")
	f.StringVar(&metricsAddr, "metrics-listen", "", "also serve /metrics alone, without the token, on this `address` for a scraper (default off; keep it on a private interface)")
	f.Var(&uploadBytes, "max-upload-bytes", "largest matrix or vector upload in `bytes`, on the wire and after decompression")
	f.IntVar(&cfg.MaxRows, "max-rows", api.DefaultMaxRows, "most rows (and columns) of an uploaded matrix")
	f.Int64Var(&cfg.MaxNonzeros, "max-nonzeros", api.DefaultMaxNonzeros, "most stored entries of an uploaded matrix")
	f.IntVar(&cfg.MaxRHS, "max-rhs", api.DefaultMaxRHS, "most right-hand sides in one solve request")
	f.IntVar(&cfg.MaxConcurrentSolves, "max-solves", 0, "solves that run at once; more wait in the queue (default: the number of processors)")
	f.IntVar(&cfg.MaxQueued, "max-queued", api.DefaultMaxQueued, "most solves waiting; more are refused with RESOURCE_EXHAUSTED")
	f.Var(&memory, "memory", "memory budget in `bytes` for stored matrices, vectors, cached preconditioners and solutions; idle ones are evicted least recently used first")
	f.IntVar(&cfg.MaxJobsKept, "max-jobs-kept", api.DefaultMaxJobsKept, "finished jobs remembered for watch and jobs")
	f.StringVar(&cfg.TokenFile, "token-file", "", "require the bearer token held in this `file` on every call")
	f.StringVar(&cfg.TLSCert, "tls-cert", "", "serve TLS with this PEM certificate `file` (needs --tls-key)")
	f.StringVar(&cfg.TLSKey, "tls-key", "", "PEM private key `file` for --tls-cert")
	f.DurationVar(&cfg.ShutdownGrace, "shutdown-grace", api.DefaultShutdownGrace, "on shutdown, how long running solves may continue before they are cancelled")
	f.DurationVar(&cfg.StopTimeout, "stop-timeout", api.DefaultStopTimeout, "on shutdown, how long open streams may take to close after the solves end before the server stops them")
	f.IntVar(&cfg.MaxJobIterations, "max-job-iterations", api.DefaultMaxJobIterations, "ceiling on each right-hand side's iterations; a request's max_iter can lower it, never raise it")
	f.DurationVar(&cfg.MaxJobTime, "max-job-time", api.DefaultMaxJobTime, "ceiling on a job's wall time, its right-hand sides together; a request's time_limit can lower it, never raise it")
	f.DurationVar(&cfg.UploadIdleTimeout, "upload-idle-timeout", api.DefaultUploadIdleTimeout, "drop an upload whose client sends nothing for this long, releasing its memory")
	f.DurationVar(&cfg.ProtectRecent, "protect-recent", api.DefaultProtectRecent, "never evict a matrix, vector or kept solution used within this long; refuse the request that needs the room instead")
	f.BoolVar(&cfg.AllowMostlyEmpty, "allow-mostly-empty", false, "accept matrices with more than half of their rows or columns empty (refused by default: their row pointers cost 8 bytes a row however short the upload)")
	f.StringVar(&cfg.DataDir, "data", "", "keep uploaded matrices in this `folder` across restarts (default: nothing is kept)")
	f.DurationVar(&cfg.CheckpointEvery, "checkpoint-every", api.DefaultCheckpointEvery, "with --data: wall time between two checkpoints of a running detached job")
	f.Var(&disk, "disk", "disk budget in `bytes` for the --data folder's matrices; idle ones are deleted least recently used first")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 {
		return usageErrorf("serve: takes no arguments, got %q", pos)
	}
	cfg.DiskBudget = int64(disk)
	if cfg.DataDir == "" {
		fmt.Fprintln(e.stderr, "residua: state is not kept across restarts (no --data folder)")
	} else {
		fmt.Fprintf(e.stderr, "residua: state is kept in %s across restarts (matrices, jobs, histories, kept solutions; uploaded vectors are not)\n", cfg.DataDir)
	}
	cfg.MaxUploadBytes, cfg.MemoryBudget = int64(uploadBytes), int64(memory)
	for name, v := range map[string]int64{"max-rows": int64(cfg.MaxRows), "max-nonzeros": cfg.MaxNonzeros, "max-rhs": int64(cfg.MaxRHS),
		"max-solves": int64(cfg.MaxConcurrentSolves), "max-queued": int64(cfg.MaxQueued), "max-jobs-kept": int64(cfg.MaxJobsKept),
		"shutdown-grace": int64(cfg.ShutdownGrace), "stop-timeout": int64(cfg.StopTimeout), "checkpoint-every": int64(cfg.CheckpointEvery), "max-upload-bytes": cfg.MaxUploadBytes, "memory": cfg.MemoryBudget,
		"max-job-iterations": int64(cfg.MaxJobIterations), "max-job-time": int64(cfg.MaxJobTime), "upload-idle-timeout": int64(cfg.UploadIdleTimeout),
		"protect-recent": int64(cfg.ProtectRecent)} {
		if v < 0 {
			return usageErrorf("serve: --%s must not be negative", name)
		}
	}
	if (cfg.TLSCert == "") != (cfg.TLSKey == "") {
		return usageErrorf("serve: --tls-cert and --tls-key go together")
	}
	cfg.Logger = slog.New(slog.NewTextHandler(e.stderr, nil))
	// The service counts its jobs into the metrics whether or not the
	// page that serves them runs.
	m := metrics.New()
	cfg.Observer = m
	srv, err := api.NewServer(cfg)
	if err != nil {
		return usageErrorf("serve: %v", err)
	}
	// Both ports are taken before either is announced, so a busy --http
	// port is an error before anything says "serving".
	lis, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		return fmt.Errorf("serve: --listen %s: %w", cfg.Listen, err)
	}
	var hl net.Listener
	if httpAddr != "" {
		if hl, err = net.Listen("tcp", httpAddr); err != nil {
			lis.Close()
			return fmt.Errorf("serve: --http %s: %w", httpAddr, err)
		}
	}
	if cfg.TokenFile == "" && !loopback(lis.Addr()) {
		fmt.Fprintf(e.stderr, "residua: warning: listening on %s without --token-file: anyone who can reach this port can upload matrices and run solves\n", lis.Addr())
	}
	fmt.Fprintf(e.stderr, "residua: serving gRPC on %s\n", lis.Addr())

	var wg sync.WaitGroup
	var httpErr, metricsErr error
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	if httpAddr != "" || metricsAddr != "" {
		m.ObserveQueue(srv.Registry().Counts)
		m.ObserveUploads(srv.UploadBytes)
		m.ObserveStore(srv.StoredBytes)
	}
	if metricsAddr != "" {
		ml, err := net.Listen("tcp", metricsAddr)
		if err != nil {
			lis.Close()
			return fmt.Errorf("serve: --metrics-listen: %w", err)
		}
		mux := http.NewServeMux()
		mux.Handle("GET /metrics", m.Handler())
		fmt.Fprintf(e.stderr, "residua: metrics on http://%s/metrics\n", ml.Addr())
		wg.Add(1)
		go func() {
			defer wg.Done()
			if metricsErr = web.Serve(ctx, ml, mux, 2*time.Second); metricsErr != nil {
				cancel() // the listener failed: stop the whole service
			}
		}()
	}
	if hl != nil {
		var token []byte
		if cfg.TokenFile != "" {
			// NewServer has read it already; read it the same way.
			if token, err = api.ReadToken(cfg.TokenFile); err != nil {
				lis.Close()
				hl.Close()
				return usageErrorf("serve: %v", err)
			}
		}
		page := web.New(web.FromRegistry(srv.Registry()), web.Options{Metrics: m, Token: token})
		fmt.Fprintf(e.stderr, "residua: watch page on http://%s/\n", hl.Addr())
		wg.Add(1)
		go func() {
			defer wg.Done()
			defer page.Close()
			httpErr = web.Serve(ctx, hl, page, 2*time.Second)
			if httpErr != nil {
				cancel() // the page failed: stop the whole service
			}
		}()
	}
	err = srv.Serve(ctx, lis)
	cancel()
	wg.Wait()
	if err == nil && httpErr != nil {
		err = fmt.Errorf("serve: watch page: %w", httpErr)
	}
	if err == nil && metricsErr != nil {
		err = fmt.Errorf("serve: metrics listener: %w", metricsErr)
	}
	return err
}

// byteSize is a flag value holding a number of bytes, written with an
// optional unit.
type byteSize int64

var byteUnits = []struct {
	suffix string
	factor int64
}{
	{"KiB", 1 << 10}, {"MiB", 1 << 20}, {"GiB", 1 << 30}, {"TiB", 1 << 40},
	{"KB", 1e3}, {"MB", 1e6}, {"GB", 1e9}, {"TB", 1e12}, {"B", 1},
}

func (b *byteSize) String() string {
	v := int64(*b)
	for _, u := range byteUnits[:4] {
		if v >= u.factor && v%u.factor == 0 && (v/u.factor < 1024 || u.suffix == "TiB") {
			return strconv.FormatInt(v/u.factor, 10) + u.suffix
		}
	}
	return strconv.FormatInt(v, 10)
}

func (b *byteSize) Set(s string) error {
	s = strings.TrimSpace(s)
	factor := int64(1)
	for _, u := range byteUnits {
		if strings.HasSuffix(s, u.suffix) {
			s, factor = strings.TrimSpace(strings.TrimSuffix(s, u.suffix)), u.factor
			break
		}
	}
	n, err := strconv.ParseInt(s, 10, 64)
	if err != nil || n < 0 {
		return errors.New("want a whole number of bytes, optionally with a unit such as MiB or GB")
	}
	if n > 0 && factor > (1<<63-1)/n {
		return errors.New("too large")
	}
	*b = byteSize(n * factor)
	return nil
}

// loopback reports whether a listener's address is reachable from this
// machine only.
func loopback(a net.Addr) bool {
	t, ok := a.(*net.TCPAddr)
	return ok && t.IP.IsLoopback()
}
