package main

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
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
	var httpAddr string
	uploadBytes := byteSize(api.DefaultMaxUploadBytes)
	memory := byteSize(api.DefaultMemoryBudget)
	disk := byteSize(api.DefaultDiskBudget)
	f := newFlags("serve", "residua serve [--listen 127.0.0.1:7447] [--http 127.0.0.1:7448] [limits] [--token-file F] [--tls-cert C --tls-key K]", serveAbout)
	f.StringVar(&cfg.Listen, "listen", api.DefaultListen, "gRPC `address` to listen on")
	f.StringVar(&httpAddr, "http", "", "also serve the watch page and /metrics on this `address` (default off)")
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
		"shutdown-grace": int64(cfg.ShutdownGrace), "stop-timeout": int64(cfg.StopTimeout), "checkpoint-every": int64(cfg.CheckpointEvery), "max-upload-bytes": cfg.MaxUploadBytes, "memory": cfg.MemoryBudget} {
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
	lis, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		return fmt.Errorf("serve: %w", err)
	}
	fmt.Fprintf(e.stderr, "residua: serving gRPC on %s\n", lis.Addr())

	var wg sync.WaitGroup
	var httpErr error
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	if httpAddr != "" {
		hl, err := net.Listen("tcp", httpAddr)
		if err != nil {
			lis.Close()
			return fmt.Errorf("serve: --http: %w", err)
		}
		m.ObserveQueue(srv.Registry().Counts)
		m.ObserveUploads(srv.UploadBytes)
		m.ObserveStore(srv.StoredBytes)
		page := web.New(web.FromRegistry(srv.Registry()), web.Options{Metrics: m})
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
