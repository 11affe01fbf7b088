package main

import (
	"flag"
	"fmt"
	"time"

	"github.com/residua/residua/checkpoint"
	"github.com/residua/residua/krylov"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

// defaultCheckpointEvery is the default of --checkpoint-every: the issue's
// figure, about 1% of an hour-long solve spent saving a 10⁷-unknown state
// at disk speed (see BENCHMARKS.md), and at most 30 s of work lost.
const defaultCheckpointEvery = 30 * time.Second

// ckptOpts are the checkpoint flags of solve and lsq.
type ckptOpts struct {
	path   string
	resume string
	every  time.Duration
}

func addCheckpointFlags(f *cmdFlags, c *ckptOpts) {
	f.StringVar(&c.path, "checkpoint", "", "keep the solve's state in this `file`: written every --checkpoint-every and on SIGINT/SIGTERM, so that --resume can continue it")
	f.StringVar(&c.resume, "resume", "", "continue the solve saved in this checkpoint `file` (same matrix, right-hand side and settings; --x0 is not read)")
	f.DurationVar(&c.every, "checkpoint-every", defaultCheckpointEvery, "wall time between two checkpoints")
}

// check refuses the flag combinations that cannot work.
func (c *ckptOpts) check(f *cmdFlags, remote bool) error {
	cmd := f.Name()
	set := map[string]bool{}
	f.Visit(func(fl *flag.Flag) { set[fl.Name] = true })
	switch {
	case remote && (c.path != "" || c.resume != ""):
		return usageErrorf("%s: --checkpoint and --resume are for local solves (a server keeps its jobs' state in its --data folder)", cmd)
	case set["checkpoint-every"] && c.path == "":
		return usageErrorf("%s: --checkpoint-every needs --checkpoint FILE", cmd)
	case c.every <= 0:
		return usageErrorf("%s: --checkpoint-every %v: want a positive duration, e.g. 30s", cmd, c.every)
	}
	return nil
}

// ckptRun is one solve's checkpointing: the ids it is saved under, the
// rows kept for the checkpoints' history, and the outcome of the saves.
type ckptRun struct {
	o               *ckptOpts
	req             solve.Request
	matrixID, rhsID string
	resume          *checkpoint.File
	rows            checkpoint.Rows
	saved, failures int
	savedAt         int
	e               *env
}

// openCheckpoint reads and checks the --resume file against the problem
// and the validated request, and prepares the --checkpoint writes. It
// returns nil when neither flag is given.
func openCheckpoint(e *env, c *ckptOpts, p *problem, req solve.Request) (*ckptRun, error) {
	if c.path == "" && c.resume == "" {
		return nil, nil
	}
	if len(p.bs) > 1 {
		return nil, usageErrorf("--checkpoint and --resume take one right-hand side; b has %d columns (solve them one at a time, or on a server with --data)", len(p.bs))
	}
	r := &ckptRun{o: c, req: req, e: e, matrixID: wire.MatrixID(p.a), rhsID: wire.VectorSum(p.bs[0])}
	if c.resume != "" {
		f, err := checkpoint.Read(c.resume)
		if err != nil {
			return nil, inputError(fmt.Errorf("--resume: %w", err))
		}
		if err := f.Matches(r.matrixID, r.rhsID, req); err != nil {
			return nil, inputError(fmt.Errorf("--resume %s: %w", c.resume, err))
		}
		r.resume = f
		r.rows.Rows = append(r.rows.Rows, f.History...)
	}
	return r, nil
}

// attach replays the resumed history into rec (so the history file, the
// plot and the display show the whole solve) and returns rec with the
// checkpoint's row keeper added.
func (r *ckptRun) attach(rec krylov.Recorder) (krylov.Recorder, error) {
	if r == nil {
		return rec, nil
	}
	if r.resume != nil && rec != nil {
		for _, row := range r.resume.History {
			if err := rec.Record(row); err != nil {
				return nil, err
			}
		}
	}
	if r.o.path == "" {
		return rec, nil
	}
	if rec == nil {
		return &r.rows, nil
	}
	return tee{rec, &r.rows}, nil
}

// durable returns the solve layer's checkpoint hook and resume state.
func (r *ckptRun) durable() solve.Durable {
	var d solve.Durable
	if r == nil {
		return d
	}
	if r.resume != nil {
		d.Resume = r.resume.State
	}
	if r.o.path != "" {
		d.Checkpoint = &krylov.Checkpoint{Every: r.o.every, Save: r.save}
	}
	return d
}

// save writes one checkpoint. A write that fails (a full disk, say) is
// reported on stderr and the solve goes on: the previous checkpoint is
// still in place, since the write is atomic.
func (r *ckptRun) save(s *krylov.State) error {
	f := &checkpoint.File{
		MatrixID: r.matrixID, RHSID: r.rhsID, Request: r.req, Written: time.Now(),
		History: r.rows.UpTo(s.Iteration), State: s,
	}
	if err := checkpoint.Write(r.o.path, f); err != nil {
		r.failures++
		fmt.Fprintf(r.e.stderr, "residua: checkpoint at iteration %d not written: %v (the solve goes on)\n", s.Iteration, err)
		return nil
	}
	r.saved++
	r.savedAt = s.Iteration
	if afterCheckpoint != nil {
		afterCheckpoint()
	}
	return nil
}

// afterCheckpoint, when set (by tests only), is called after each
// checkpoint written: the in-process tests interrupt a solve there, at a
// point that does not depend on timing.
var afterCheckpoint func()

// report notes the checkpoint in the summary and, for a solve that was
// interrupted, says on stderr how to continue it.
func (r *ckptRun) report(sum *solve.Summary) {
	if r == nil || r.o.path == "" {
		return
	}
	if r.saved > 0 {
		sum.CheckpointFile = r.o.path
	}
	if sum.Status == string(solve.Cancelled) && r.saved > 0 {
		fmt.Fprintf(r.e.stderr, "residua: the state at iteration %d is saved in %s; continue with the same command and --resume %s\n",
			r.savedAt, r.o.path, r.o.path)
	}
}
