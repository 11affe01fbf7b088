package main

import (
	"context"
	"fmt"
	"text/tabwriter"
	"time"

	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

func init() {
	register(&command{name: "jobs", summary: "list the jobs on a residua server", run: runJobs})
	register(&command{name: "watch", summary: "follow a job on a residua server live, then print its summary", run: runWatch})
	register(&command{name: "cancel", summary: "cancel a job on a residua server", run: runCancel})
}

const jobsAbout = `
Lists the jobs the server knows (queued, running and recently done),
newest first: id, state, outcome, matrix, preconditioner, iteration,
relative residual and elapsed time. With --json, prints {"jobs": [...]}
with the keys listed in the README (those of the watch page's /api/jobs).`

func runJobs(ctx context.Context, e *env, args []string) error {
	so := &serverOpts{}
	f := newFlags("jobs", "residua jobs [--server ADDR] [--json]", jobsAbout)
	asJSON := f.Bool("json", false, "print the jobs as JSON")
	addServerFlags(f, so)
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 {
		return usageErrorf("jobs: takes no arguments, got %q", pos)
	}
	so.resolve()
	c, err := so.dial(ctx, "jobs")
	if err != nil {
		return err
	}
	defer c.Close()
	jobs, err := c.Jobs(ctx)
	if err != nil {
		return remoteError("jobs", so.addr, err)
	}
	views := make([]wire.Job, 0, len(jobs))
	now := time.Now()
	for _, j := range jobs {
		views = append(views, wire.JobRecord(j, now))
	}
	if *asJSON {
		return writeJSON(e.stdout, map[string]any{"jobs": views})
	}
	if len(views) == 0 {
		fmt.Fprintf(e.stdout, "no jobs on %s\n", so.addr)
		return nil
	}
	tw := tabwriter.NewWriter(e.stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "ID\tSTATE\tOUTCOME\tMATRIX\tSIZE\tPRECONDITIONER\tITERATION\tREL. RESIDUAL\tELAPSED")
	for _, v := range views {
		outcome := v.Outcome
		if outcome == "" {
			outcome = "-"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d×%d\t%s\t%d\t%s\t%s\n", v.ID, v.State, outcome, v.Matrix, v.Rows, v.Cols, v.Preconditioner,
			v.Iteration, solve.Sci(num(v.RelResidual)), fmtSec(solve.Num(v.ElapsedSeconds)))
	}
	return tw.Flush()
}

const watchAbout = `
Follows a job on the server: replays its progress so far, then shows it
live (the same panel or plain lines as solve; --quiet silences them), and
prints the same summary as solve when the job ends (with --json, one JSON
object per right-hand side). Interrupting watch stops watching only: the job
goes on. -o downloads the solution (for jobs that keep theirs, such as
those started with solve --detach); --history and --plot write the job's
full history as the server recorded it (every iteration, thinned evenly
past 4096 rows).

Exit statuses as for solve, from the job's outcome.`

func runWatch(ctx context.Context, e *env, args []string) error {
	so := &serverOpts{}
	o := &solveOpts{}
	f := newFlags("watch", "residua watch JOB [--server ADDR] [--json] [-o x.mtx] [--history h.csv] [--plot p.svg]", watchAbout)
	addServerFlags(f, so)
	f.StringVar(&o.out, "o", "", "download the solution to this Matrix Market `file` (only if converged)")
	f.StringVar(&o.hist, "history", "", "write the job's history to this `file` (.csv or .json)")
	f.StringVar(&o.plot, "plot", "", "draw the residual curve to this `file` (.svg or .png)")
	f.BoolVar(&o.json, "json", false, "print the summary as JSON")
	f.BoolVar(&o.quiet, "quiet", false, "no live progress on stderr")
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("watch: want one job id, got %d arguments", len(pos))
	}
	if err := checkOutputFlags("watch", o); err != nil {
		return err
	}
	so.resolve()
	c, err := so.dial(ctx, "watch")
	if err != nil {
		return err
	}
	defer c.Close()
	id := pos[0]
	job, err := c.Job(ctx, id)
	if err != nil {
		return remoteError("watch", so.addr, err)
	}
	mo := watchOptions(job)
	disp := &remoteDisplay{e: e, o: o, mo: mo}
	out, watchErr := c.Watch(ctx, id, disp.event)
	disp.stop()
	if watchErr != nil && ctx.Err() != nil {
		return &exitError{code: exitNotConverged, err: fmt.Errorf("stopped watching job %s; it goes on on %s", id, so.addr)}
	}
	if out == nil || len(out.Results) == 0 {
		if watchErr != nil {
			return remoteError("watch", so.addr, watchErr)
		}
		code := exitFailure
		if out.Outcome == solve.Cancelled {
			code = exitNotConverged
		}
		return &exitError{code: code, err: fmt.Errorf("job %s ended (%s) without a result: %s", id, out.Outcome, out.Error)}
	}
	if job, err = c.Job(ctx, id); err != nil {
		return remoteError("watch", so.addr, err)
	}
	k := len(out.Results)
	converged := true
	for _, s := range out.Results {
		converged = converged && s.Converged
	}
	if o.out != "" && converged && !job.GetSolutionKept() {
		return usageErrorf("watch: job %s did not keep its solution on the server (only detached jobs do); -o cannot download it", id)
	}
	runs := make([]columnRun, k)
	for i := range runs {
		sum := out.Results[i]
		sum.Matrix, sum.Server, sum.JobID = job.GetMatrixName(), so.addr, id
		sum.RHS = fmt.Sprintf("right-hand side %d of %d, given by the job's submitter", i+1, k)
		var x []float64
		if o.out != "" && converged {
			if x, err = c.DownloadSolution(ctx, id, i); err != nil {
				return remoteError("downloading the solution", so.addr, err)
			}
		}
		moi := mo
		moi.Preconditioner = sum.Preconditioner
		runs[i] = columnRun{sum: sum, x: x, finish: remoteOutputs(ctx, c, o.forColumn(i, k), id, i, moi), err: plainStatus(watchErr)}
	}
	return finishRuns(e, o, runs, nil)
}

const cancelAbout = `
Asks the server to cancel a job. A running solve stops within one
iteration and keeps its history; the job becomes done, with the outcome
cancelled.`

func runCancel(ctx context.Context, e *env, args []string) error {
	so := &serverOpts{}
	f := newFlags("cancel", "residua cancel JOB [--server ADDR] [--json]", cancelAbout)
	asJSON := f.Bool("json", false, "print the job as JSON")
	addServerFlags(f, so)
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 1 {
		return usageErrorf("cancel: want one job id, got %d arguments", len(pos))
	}
	so.resolve()
	c, err := so.dial(ctx, "cancel")
	if err != nil {
		return err
	}
	defer c.Close()
	j, err := c.Cancel(ctx, pos[0])
	if err != nil {
		return remoteError("cancel", so.addr, err)
	}
	if *asJSON {
		return writeJSON(e.stdout, wire.JobRecord(j, time.Now()))
	}
	switch j.GetState() {
	case pb.JobState_QUEUED, pb.JobState_RUNNING:
		fmt.Fprintf(e.stdout, "job %s: cancel requested (it was %s; a running solve stops within one iteration)\n", j.GetId(), wire.State(j.GetState()))
	default:
		fmt.Fprintf(e.stdout, "job %s: already done (%s)\n", j.GetId(), j.GetOutcome())
	}
	return nil
}
