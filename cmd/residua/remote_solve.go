package main

import (
	"context"
	"fmt"
	"path/filepath"

	"github.com/residua/residua/client"
	"github.com/residua/residua/history"
	"github.com/residua/residua/monitor"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
)

// remoteDisplay shows a job's event stream live: the monitor is made when
// the job is accepted, so that it names the preconditioner chosen.
type remoteDisplay struct {
	e    *env
	o    *solveOpts
	mo   monitor.Options
	mon  *monitor.Monitor
	rows int
}

func (d *remoteDisplay) event(ev client.Event) {
	switch {
	case ev.Accepted != nil:
		d.mo.Preconditioner = ev.Accepted.GetPreconditioner()
		if !d.o.quiet && d.mon == nil {
			d.mon = newMonitor(d.e, d.mo)
		}
	case ev.Progress != nil && ev.RHS == 0:
		d.rows++
		if d.mon != nil {
			d.mon.Record(*ev.Progress)
		}
	case ev.Result != nil && ev.RHS == 0:
		d.stop()
	}
}

// stop ends the live display, before the summary is printed.
func (d *remoteDisplay) stop() {
	if d.mon != nil {
		d.mon.Close()
	}
}

// remoteOutputs returns the finish step of a remote solve: the history
// file and the plot, written from the job's full history as the server
// recorded it (every iteration, up to its budget of rows).
func remoteOutputs(ctx context.Context, c *client.Client, o *solveOpts, jobID string, rhs int, mo monitor.Options) func(*solve.Summary) error {
	return func(sum *solve.Summary) error {
		if o.hist == "" && o.plot == "" {
			return nil
		}
		h, err := c.History(ctx, jobID, rhs)
		if err != nil {
			return remoteError("fetching the history", "", err)
		}
		if o.hist != "" {
			if err := writeHistoryFile(o.hist, h); err != nil {
				return err
			}
			sum.HistoryFile = o.hist
		}
		if o.plot != "" {
			if err := drawPlot(o.plot, mo, h); err != nil {
				return err
			}
			sum.PlotFile = o.plot
		}
		return nil
	}
}

// writeHistoryFile writes h to path in the format its name gives,
// atomically.
func writeHistoryFile(path string, h history.History) error {
	w, err := history.Create(path, history.Options{LeastSquares: h.LeastSquares})
	if err != nil {
		return err
	}
	for _, p := range h.Rows {
		w.Record(p)
	}
	if err := w.Close(); err != nil {
		return fmt.Errorf("writing the history %s: %w", path, err)
	}
	return nil
}

// remoteSolve is solve --server and lsq --server: the matrix is read here
// and checked, sent only when the server does not hold it already (by its
// content hash), solved with the live display, and summarised with the
// same summary and outputs as a local run.
func remoteSolve(ctx context.Context, e *env, path string, req solve.Request, o *solveOpts, so *serverOpts, detach bool) error {
	cmd := "solve"
	if req.LeastSquares {
		cmd = "lsq"
	}
	if detach && (o.out != "" || o.hist != "" || o.plot != "") {
		return usageErrorf("%s: --detach returns at once; fetch the outputs later with 'residua watch JOB -o ... --history ... --plot ...'", cmd)
	}
	p, err := loadProblem(path, o.b, o.mostlyEmpty)
	if err != nil {
		return err
	}
	m := solve.Check(p.a, path, p.symmetric)
	ones, rhs := p.onesSolution(req)
	if err := req.Applies(m); err != nil {
		sum := solve.Failure(m, req, err)
		sum.RHS, sum.ReadSeconds, sum.Server = rhs, solve.Seconds(p.read), so.addr
		return printOnly(e, o, &sum, err)
	}
	k := len(p.bs)
	x0, err := readX0(o.x0, p.a.Cols, k)
	if err != nil {
		return err
	}
	c, err := so.dial(ctx, cmd)
	if err != nil {
		return err
	}
	defer c.Close()
	name := filepath.Base(path)
	info, uploaded, err := c.EnsureCSR(ctx, p.a, name)
	if err != nil {
		return remoteError("uploading "+path, so.addr, err)
	}
	creq := client.SolveRequest{MatrixID: info.GetId(), B: p.bs, Request: req,
		Detach: detach, KeepSolution: detach, Label: name}
	if o.x0 != "" {
		creq.X0 = x0
	}
	if detach {
		out, err := c.Solve(ctx, creq, nil)
		if err != nil {
			return remoteError(cmd, so.addr, err)
		}
		if o.json {
			return writeJSON(e.stdout, map[string]any{"job_id": out.JobID, "matrix_id": info.GetId(), "server": so.addr, "matrix_uploaded": uploaded})
		}
		fmt.Fprintf(e.stdout, "%s\n", out.JobID)
		fmt.Fprintf(e.stderr, "residua: job %s started on %s; follow it with 'residua watch %s'\n", out.JobID, so.addr, out.JobID)
		return nil
	}
	// The live display follows the first right-hand side; every one gets
	// its summary and its history.
	mo := monitor.Options{Target: target(req, p.bs[0]), Matrix: name}
	disp := &remoteDisplay{e: e, o: o, mo: mo}
	out, solveErr := c.Solve(ctx, creq, disp.event)
	disp.stop()
	if out == nil || len(out.Results) != k {
		if solveErr == nil {
			solveErr = fmt.Errorf("job %s ended (%s) with %d results for %d right-hand sides: %s", out.JobID, out.Outcome, len(out.Results), k, out.Error)
		}
		return remoteError(cmd+" on "+so.addr, so.addr, solveErr)
	}
	runs := make([]columnRun, k)
	for j := range runs {
		sum := out.Results[j]
		sum.Matrix, sum.RHS, sum.ReadSeconds, sum.Server, sum.JobID = path, p.rhsOf(j, rhs), solve.Seconds(p.read), so.addr, out.JobID
		sum.MatrixUploaded = &uploaded
		if uploaded {
			sum.UploadSeconds = solve.NumPtr(info.GetUploadSeconds())
		}
		var x []float64
		if j < len(out.X) {
			x = out.X[j]
		}
		if ones && x != nil {
			sum.ErrorVsOnes = solve.NumPtr(maxErrorVsOnes(x))
		}
		moj := mo
		moj.Preconditioner, moj.Target = sum.Preconditioner, target(req, p.bs[j])
		runs[j] = columnRun{sum: sum, x: x, finish: remoteOutputs(ctx, c, o.forColumn(j, k), out.JobID, j, moj), err: plainStatus(solveErr)}
	}
	return finishRuns(e, o, runs, nil)
}

// watchOptions is the live display's options for watching a job: its matrix
// and, for a system, its tolerance.
func watchOptions(j *pb.Job) monitor.Options {
	mo := monitor.Options{Matrix: j.GetMatrixName(), Target: j.GetRtol()}
	if solve.Method(j.GetMethod()).LeastSquares() {
		mo.Target = 0 // least squares has no target relative residual
	}
	return mo
}
