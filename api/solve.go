package api

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	pb "github.com/residua/residua/proto/residua/v1"
)

// ErrMethod: the method cannot solve this matrix (CG on a matrix that is
// not square and symmetric). It maps to FAILED_PRECONDITION.
var ErrMethod = errors.New("method does not apply to this matrix")

const (
	// defaultProgressInterval is the progress policy when a request sets
	// neither rule.
	defaultProgressInterval = 200 * time.Millisecond
	// solutionChunk is the number of entries per solution chunk by
	// default: 1 MiB of payload, well under the 4 MiB message limit.
	solutionChunk = 1 << 17
	// maxSolutionChunk bounds a requested chunk: 4,000,000 bytes.
	maxSolutionChunk = 500_000
	// cgWorkVectors is the number of length-n vectors CG allocates
	// (r, z, p, A·p and a spare), for the job's memory reservation.
	cgWorkVectors = 5
)

func precondKeyPrefix(matrixID string) string { return "p:" + matrixID + "/" }
func jobKey(id string) string                 { return "j:" + id }

// jobParams is what a validated solve request becomes.
type jobParams struct {
	matrixID string
	m        *matrixEntry
	kind     precond.Kind
	rhs      [][]float64
	x0       [][]float64 // nil entries: start from zero
	settings krylov.Settings
	// lsq is set for a least-squares job, which uses lsqSet (and its
	// Scaling and Method) instead of kind and settings.
	lsq      bool
	lsqSet   krylov.LSQSettings
	method   string // the method's resolved name: "cg", "lsqr" or "cgls"
	every    int
	interval time.Duration
	pinned   []*item // the matrix and stored vectors, unpinned when the job ends
}

// precondEntry is a cached preconditioner, or one being built (ready not
// yet closed) by the first job that asked for it.
type precondEntry struct {
	ready  chan struct{}
	choice *precond.Choice
	err    error
}

// Solve implements the Solve RPC (see the .proto for the stream contract).
func (s *Server) Solve(req *pb.SolveRequest, stream pb.Solver_SolveServer) error {
	if err := s.refuseIfClosing(); err != nil {
		return err
	}
	j, p, err := s.newJob(req)
	if err != nil {
		return err
	}
	sub := j.subscribe()
	defer sub.Close()
	if err := s.jobs.add(j); err != nil {
		s.releaseParams(p)
		s.store.unpin(j.mem)
		if !j.keep {
			s.store.unpin(j.mem)
		}
		_, _, _ = s.store.remove(jobKey(j.id))
		return err
	}
	s.log.Info("job queued", "job", j.id, "matrix", p.matrixID, "rows", p.m.a.Rows, "nonzeros", p.m.a.NNZ(),
		"rhs", len(p.rhs), "preconditioner", string(p.kind), "detached", req.GetDetach())
	s.jobs.start(j, func() (pb.JobState, error) { return s.runJob(j, p) })

	ctx := stream.Context()
	if req.GetDetach() {
		ev, err := sub.Next(ctx)
		if err != nil {
			return err
		}
		return stream.Send(ev)
	}
	// Attached: the job dies with the stream. When the handler returns
	// normally the job has finished, so this cancel is a no-op then.
	stop := context.AfterFunc(ctx, func() {
		j.cancel(fmt.Errorf("the solve stream ended: %w", streamCause(ctx)))
	})
	defer stop()
	if !j.keep {
		defer func() {
			j.dropSolutions("the solution was streamed and not kept")
			s.store.unpinDrop(j.mem)
		}()
	}
	return s.follow(ctx, j, sub, stream, !j.keep)
}

// deadlineSlack: a stream cancelled this close to its deadline counts as
// having reached it. A client whose deadline passes resets the stream with
// the same code as a cancellation, and that reset races the server's own
// timer for the same deadline; the slack lets the job record the deadline
// either way.
const deadlineSlack = 20 * time.Millisecond

// streamCause says why a stream's context ended.
func streamCause(ctx context.Context) error {
	if dl, ok := ctx.Deadline(); ok && time.Until(dl) < deadlineSlack {
		return context.DeadlineExceeded
	}
	return context.Cause(ctx)
}

// follow sends a subscription's events to a stream, with each result's
// solution after it when withSolutions is set, and returns the job's
// outcome as the stream's error. It is the only goroutine sending on the
// stream; a failed send ends it (the client has gone).
func (s *Server) follow(ctx context.Context, j *job, sub *Subscription, stream interface{ Send(*pb.JobEvent) error }, withSolutions bool) error {
	for {
		ev, err := sub.Next(ctx)
		if err != nil {
			return err
		}
		if err := stream.Send(ev); err != nil {
			return err
		}
		if res := ev.GetResult(); res != nil && withSolutions {
			x, err := j.solution(int(res.GetRhs()))
			if err != nil {
				return err
			}
			if err := sendVector(x, int(res.GetRhs()), solutionChunk, func(c *pb.VectorChunk) error {
				return stream.Send(&pb.JobEvent{JobId: j.id, Event: &pb.JobEvent_Solution{Solution: c}})
			}); err != nil {
				return err
			}
		}
		if ev.GetFinished() != nil {
			_, err := j.outcome()
			return err
		}
	}
}

// sendVector sends x in chunks of at most per entries; an empty vector is
// one empty chunk flagged last.
func sendVector(x []float64, rhs, per int, send func(*pb.VectorChunk) error) error {
	for off := 0; ; off += per {
		end := min(off+per, len(x))
		c := &pb.VectorChunk{Rhs: int32(rhs), Length: int64(len(x)), Offset: int64(off),
			Data: pack(make([]byte, 0, 8*(end-off)), x[off:end]), Last: end == len(x)}
		if err := send(c); err != nil {
			return err
		}
		if c.Last {
			return nil
		}
	}
}

// newJob validates a solve request and makes its job: the matrix and
// stored vectors pinned, inline vectors decoded, the job's vectors
// reserved in the memory budget.
func (s *Server) newJob(req *pb.SolveRequest) (*job, *jobParams, error) {
	p := &jobParams{matrixID: req.GetMatrixId()}
	ok := false
	defer func() {
		if !ok {
			s.releaseParams(p)
		}
	}()
	switch req.GetMethod() {
	case "", "cg":
		p.method = "cg"
	case "lsq", "lsqr":
		p.lsq, p.method, p.lsqSet.Method = true, "lsqr", krylov.LSQR
	case "cgls":
		p.lsq, p.method, p.lsqSet.Method = true, "cgls", krylov.CGLS
	default:
		return nil, nil, invalidf("unknown method %q (want cg, lsq, lsqr or cgls)", req.GetMethod())
	}
	kindName := req.GetPreconditioner()
	if kindName == "" {
		kindName = string(precond.KindAuto)
	}
	if p.lsq {
		switch kindName {
		case "auto":
			p.lsqSet.Scaling = krylov.ScaleAuto
		case "colscale":
			p.lsqSet.Scaling = krylov.ScaleColumns
		case "none":
			p.lsqSet.Scaling = krylov.ScaleNone
		default:
			return nil, nil, invalidf("unknown column scaling %q for least squares (want auto, colscale or none)", kindName)
		}
		p.kind = precond.Kind(kindName)
	} else {
		kind, err := precond.ParseKind(kindName)
		if err != nil {
			return nil, nil, fmt.Errorf("%w: %v", ErrInvalid, err)
		}
		p.kind = kind
	}
	if err := checkSettings(req, p.lsq); err != nil {
		return nil, nil, err
	}
	it, found := s.store.get(matrixKey(p.matrixID), 1)
	if !found {
		return nil, nil, notFoundf("no matrix %q (upload it first; it may have been evicted or deleted)", p.matrixID)
	}
	p.pinned = append(p.pinned, it)
	p.m = it.value.(*matrixEntry)
	a := p.m.a
	if !p.lsq && a.Rows != a.Cols {
		return nil, nil, fmt.Errorf("%w: the matrix is %d×%d; conjugate gradients needs a square symmetric positive definite matrix (use method lsq for least squares)", ErrMethod, a.Rows, a.Cols)
	}
	if !p.lsq && !p.m.symmetric {
		return nil, nil, fmt.Errorf("%w: %s %s; conjugate gradients needs a symmetric positive definite matrix (method lsq solves the normal equations instead)", ErrMethod, p.m.info.GetName(), p.m.asymmetry)
	}
	if p.lsq && !p.m.exactSym {
		// The products by Aᵀ use a transpose that sparse builds on first
		// use and keeps with the matrix: account for it, pinned for the
		// job, and let it go if it is evicted later.
		key := precondKeyPrefix(p.matrixID) + "transpose"
		it, ok := s.store.get(key, 1)
		if !ok {
			size := csrBytes(int64(a.Cols), int64(a.NNZ()))
			if err := s.store.reserve(size, "the transpose of "+p.m.info.GetName()); err != nil {
				return nil, nil, err
			}
			it, _ = s.store.insert(key, size, 1, nil, a.ForgetTranspose)
		}
		p.pinned = append(p.pinned, it)
	}
	n, ncols := a.Rows, a.Cols
	nrhs := len(req.GetRhs())
	if nrhs == 0 {
		return nil, nil, invalidf("the request has no right-hand side")
	}
	if nrhs > s.cfg.MaxRHS {
		return nil, nil, limitf("%d right-hand sides exceed the server's limit of %d per request", nrhs, s.cfg.MaxRHS)
	}
	if nx := len(req.GetX0()); nx != 0 && nx != 1 && nx != nrhs {
		return nil, nil, invalidf("%d starting guesses for %d right-hand sides (give none, one, or one each)", nx, nrhs)
	}
	inline := 0
	resolve := func(ref *pb.VectorRef, what string, n int, dim string) ([]float64, error) {
		var x []float64
		switch src := ref.GetSource().(type) {
		case *pb.VectorRef_Data:
			if len(src.Data) != 8*n {
				return nil, invalidf("%s has %d bytes; the matrix has %d %s, so it needs %d", what, len(src.Data), n, dim, 8*n)
			}
			v, err := unpack(src.Data)
			if err != nil {
				return nil, fmt.Errorf("%s: %w", what, err)
			}
			inline++
			x = v
		case *pb.VectorRef_VectorId:
			it, found := s.store.get(vectorKey(src.VectorId), 1)
			if !found {
				return nil, notFoundf("%s: no vector %q (upload it first; it may have been evicted)", what, src.VectorId)
			}
			p.pinned = append(p.pinned, it)
			x = it.value.(*vectorEntry).x
			if len(x) != n {
				return nil, invalidf("%s has %d entries; the matrix has %d %s", what, len(x), n, dim)
			}
		default:
			return nil, invalidf("%s is empty (give data or a vector id)", what)
		}
		return x, nil
	}
	for i, ref := range req.GetRhs() {
		b, err := resolve(ref, fmt.Sprintf("right-hand side %d", i), n, "rows")
		if err != nil {
			return nil, nil, err
		}
		p.rhs = append(p.rhs, b)
	}
	p.x0 = make([][]float64, nrhs)
	for i, ref := range req.GetX0() {
		x, err := resolve(ref, fmt.Sprintf("starting guess %d", i), ncols, "columns")
		if err != nil {
			return nil, nil, err
		}
		if len(req.GetX0()) == 1 {
			for k := range p.x0 {
				p.x0[k] = x
			}
		} else {
			p.x0[i] = x
		}
	}
	var limit time.Duration
	if req.GetTimeLimit() != nil {
		limit = req.GetTimeLimit().AsDuration()
	}
	p.settings = krylov.Settings{
		RelTol: req.GetRtol(), AbsTol: req.GetAtol(), MaxIter: int(req.GetMaxIter()),
		TimeLimit: limit, RefreshEvery: int(req.GetRefreshEvery()),
	}
	p.lsqSet.Damp, p.lsqSet.ATol, p.lsqSet.BTol = req.GetDamp(), req.GetAtol(), req.GetBtol()
	p.lsqSet.MaxIter, p.lsqSet.TimeLimit = int(req.GetMaxIter()), limit
	p.every = int(req.GetProgress().GetEveryIterations())
	if req.GetProgress().GetInterval() != nil {
		p.interval = req.GetProgress().GetInterval().AsDuration()
	}
	if p.every == 0 && p.interval == 0 {
		p.interval = defaultProgressInterval
	}

	keep := req.GetKeepSolution() || req.GetDetach()
	id := newJobID()
	// The job's vectors: the solutions, the inline vectors it decoded and
	// the method's work vectors.
	mem := 8 * int64(max(n, ncols)) * int64(nrhs+inline+cgWorkVectors)
	if err := s.store.reserve(mem, "job "+id); err != nil {
		return nil, nil, err
	}
	pins := 1 // the runner's
	if !keep {
		pins++ // the attached stream's, until it has sent the solutions
	}
	j := &job{id: id, created: time.Now(), keep: keep, done: make(chan struct{}), stride: 1}
	j.ctx, j.cancel = context.WithCancelCause(context.Background())
	j.mem, _ = s.store.insert(jobKey(id), mem, pins, j, func() { j.dropSolutions("the solution was evicted under memory pressure") })
	j.solutions = make([][]float64, nrhs)
	rtol := p.settings.RelTol
	if rtol == 0 {
		rtol = 1e-8 // krylov.Settings' documented default
	}
	if p.lsq {
		rtol = 0
	}
	j.info = &pb.Job{
		Id: id, MatrixId: p.matrixID, MatrixName: p.m.info.GetName(), Rows: int64(n), Nonzeros: int64(a.NNZ()),
		Method: p.method, PreconditionerRequested: string(p.kind), RhsCount: int32(nrhs),
		Detached: req.GetDetach(), Label: req.GetLabel(), Rtol: rtol,
	}
	ok = true
	return j, p, nil
}

// checkSettings refuses settings the solver would reject (it panics on
// negative values, as a programmer's mistake; from a client they are bad
// input).
func checkSettings(req *pb.SolveRequest, lsq bool) error {
	bad := func(v float64) bool { return v < 0 || math.IsNaN(v) || math.IsInf(v, 0) }
	switch {
	case lsq && req.GetRtol() != 0:
		return invalidf("least squares stops by atol and btol; rtol must be 0")
	case !lsq && (req.GetBtol() != 0 || req.GetDamp() != 0):
		return invalidf("btol and damp apply to least squares only, not to method cg")
	case bad(req.GetBtol()):
		return invalidf("btol %g must be a finite number ≥ 0", req.GetBtol())
	case bad(req.GetDamp()):
		return invalidf("damp %g must be a finite number ≥ 0", req.GetDamp())
	case bad(req.GetRtol()):
		return invalidf("rtol %g must be a finite number ≥ 0", req.GetRtol())
	case bad(req.GetAtol()):
		return invalidf("atol %g must be a finite number ≥ 0", req.GetAtol())
	case req.GetMaxIter() < 0:
		return invalidf("max_iter %d is negative", req.GetMaxIter())
	case req.GetTimeLimit() != nil && (req.GetTimeLimit().CheckValid() != nil || req.GetTimeLimit().AsDuration() < 0):
		return invalidf("time_limit must be a valid duration ≥ 0")
	case req.GetProgress().GetEveryIterations() < 0:
		return invalidf("progress.every_iterations is negative")
	case req.GetProgress().GetInterval() != nil && (req.GetProgress().GetInterval().CheckValid() != nil || req.GetProgress().GetInterval().AsDuration() < 0):
		return invalidf("progress.interval must be a valid duration ≥ 0")
	}
	return nil
}

// releaseParams unpins what a job's parameters pinned.
func (s *Server) releaseParams(p *jobParams) {
	for _, it := range p.pinned {
		s.store.unpin(it)
	}
	p.pinned = nil
}

// runJob is the body of a job's goroutine once it has a solve slot: the
// preconditioner from the cache or built, then CG on each right-hand side.
func (s *Server) runJob(j *job, p *jobParams) (state pb.JobState, err error) {
	start := time.Now()
	defer func() {
		s.releaseParams(p)
		// The work vectors are gone; the solutions stay accounted while
		// kept (or until the attached stream has sent them).
		s.store.shrink(j.mem, 8*int64(p.m.a.Cols)*int64(len(p.rhs)))
		if j.keep {
			s.store.unpin(j.mem)
		} else {
			s.store.unpinDrop(j.mem)
		}
		attrs := []any{"job", j.id, "matrix", p.matrixID, "state", state.String(), "duration", time.Since(start).String()}
		if err != nil {
			attrs = append(attrs, "error", err.Error())
		}
		s.log.Info("job end", attrs...)
	}()
	if p.lsq {
		return s.runLSQ(j, p)
	}
	choice, pit, fromCache, err := s.preconditioner(j.ctx, p)
	if err != nil {
		if j.ctx.Err() != nil {
			return pb.JobState_CANCELLED, context.Cause(j.ctx)
		}
		return pb.JobState_FAILED, err
	}
	defer s.store.unpin(pit)
	j.mu.Lock()
	j.chosen = string(choice.Kind)
	j.mu.Unlock()
	acc := &pb.Accepted{
		MatrixId: p.matrixID, Method: "cg", Preconditioner: string(choice.Kind),
		PreconditionerReason: choice.Reason, Shift: choice.Shift, Tries: int32(choice.Tries),
		FromCache: fromCache, SetupSeconds: choice.Setup.Seconds(), PreconditionerBytes: choice.Bytes,
		RhsCount: int32(len(p.rhs)), Detached: j.info.GetDetached(),
	}
	j.publish(&pb.JobEvent{Event: &pb.JobEvent_Accepted{Accepted: acc}})
	s.log.Info("job start", "job", j.id, "matrix", p.matrixID, "rows", p.m.a.Rows, "nonzeros", p.m.a.NNZ(),
		"rhs", len(p.rhs), "preconditioner", string(choice.Kind), "reason", choice.Reason, "from_cache", fromCache,
		"setup", choice.Setup.String(), "queued_for", start.Sub(j.created).String())

	var m krylov.Preconditioner
	if choice.M != nil {
		m = choice.M
	}
	for i, b := range p.rhs {
		x := make([]float64, len(b))
		set := p.settings
		set.X0 = p.x0[i]
		rec := &progressRecorder{s: s, j: j, rhs: i, every: p.every, interval: p.interval}
		set.Recorder = rec
		res, cgErr := krylov.CG(j.ctx, p.m.a, b, x, m, set)
		rec.flush()
		res.Preconditioner = string(choice.Kind)
		res.Setup = choice.Setup
		j.deliver(i, x, resultMessage(i, &res, choice, fromCache, cgErr))
		s.log.Info("solve", "job", j.id, "rhs", i, "status", res.Status.String(), "iterations", res.Iterations,
			"relative_residual", res.RelResidual, "solve", res.Solve.String())
		if state, stop, err := j.stopAfter(res.Status, cgErr); stop {
			return state, err
		}
	}
	return pb.JobState_FINISHED, nil
}

// deliver keeps right-hand side i's solution x (when the job keeps
// solutions) and publishes its result.
func (j *job) deliver(i int, x []float64, out *pb.SolveResult) {
	j.mu.Lock()
	if j.solutions != nil {
		j.solutions[i] = x
	}
	j.mu.Unlock()
	j.publish(&pb.JobEvent{Event: &pb.JobEvent_Result{Result: out}})
}

// stopAfter says whether a job must stop after a right-hand side that ended
// with status and err, and in which state: a cancelled solve ends the job
// cancelled, with the cancellation's cause where the job's context has one;
// an error (a breakdown) ends it failed; any other outcome goes on to the
// next right-hand side.
func (j *job) stopAfter(status krylov.Status, err error) (pb.JobState, bool, error) {
	switch {
	case status == krylov.Cancelled:
		if cause := context.Cause(j.ctx); cause != nil {
			return pb.JobState_CANCELLED, true, cause
		}
		if err == nil {
			err = context.Canceled
		}
		return pb.JobState_CANCELLED, true, err
	case err != nil:
		return pb.JobState_FAILED, true, err
	}
	return 0, false, nil
}

// resultMessage converts a krylov result to the wire form.
func resultMessage(rhs int, r *krylov.Result, choice *precond.Choice, fromCache bool, err error) *pb.SolveResult {
	out := &pb.SolveResult{
		Rhs: int32(rhs), Converged: r.Status == krylov.Converged, Status: r.Status.String(),
		Method: r.Method, Iterations: int64(r.Iterations), RelativeResidual: r.RelResidual,
		ResidualNorm: r.ResidualNorm, TrueResidualNorm: r.TrueResidualNorm, RhsNorm: r.RHSNorm,
		Preconditioner: string(choice.Kind), PreconditionerReason: choice.Reason, Shift: choice.Shift,
		SetupSeconds: choice.Setup.Seconds(), SolveSeconds: r.Solve.Seconds(),
		PerIterationSeconds: r.PerIteration.Seconds(),
		LambdaMin:           r.LambdaMin, LambdaMax: r.LambdaMax, Cond: r.Cond,
		Settings: &pb.Settings{
			Rtol: r.Settings.RelTol, Atol: r.Settings.AbsTol, MaxIter: int64(r.Settings.MaxIter),
			TimeLimitSeconds: r.Settings.TimeLimit.Seconds(), RefreshEvery: int32(r.Settings.RefreshEvery),
		},
		FromCache: fromCache,
	}
	if out.Method == "" {
		out.Method = "cg"
	}
	if err != nil && r.Status != krylov.Cancelled {
		out.Error = err.Error()
	}
	return out
}

// preconditioner returns the preconditioner for the job, pinned: from the
// cache when a solve on the same matrix asked for the same kind before,
// else built now (once, however many jobs ask at the same time) and cached.
func (s *Server) preconditioner(ctx context.Context, p *jobParams) (*precond.Choice, *item, bool, error) {
	key := precondKeyPrefix(p.matrixID) + string(p.kind)
	for {
		if it, ok := s.store.get(key, 1); ok {
			return it.value.(*precondEntry).choice, it, true, nil
		}
		s.mu.Lock()
		if b, ok := s.building[key]; ok {
			s.mu.Unlock()
			select {
			case <-b.ready:
				if b.err != nil {
					return nil, nil, false, b.err
				}
				continue
			case <-ctx.Done():
				return nil, nil, false, context.Cause(ctx)
			}
		}
		b := &precondEntry{ready: make(chan struct{})}
		s.building[key] = b
		s.mu.Unlock()

		var it *item
		var choice *precond.Choice
		err := func() (err error) {
			// Whatever happens, even a panic (recovered by the job), the
			// jobs waiting for this set-up must be released.
			defer func() {
				if p := recover(); p != nil {
					b.err = ErrPanic
					s.mu.Lock()
					delete(s.building, key)
					s.mu.Unlock()
					close(b.ready)
					panic(p)
				}
			}()
			choice, err = precond.New(p.m.a, p.kind)
			if err == nil {
				err = s.store.reserve(choice.Bytes, "preconditioner "+string(choice.Kind))
			}
			if err == nil {
				b.choice = choice
				it, _ = s.store.insert(key, choice.Bytes, 1, b, nil)
			}
			return err
		}()
		s.mu.Lock()
		delete(s.building, key)
		s.mu.Unlock()
		b.err = err
		close(b.ready)
		if err != nil {
			return nil, nil, false, fmt.Errorf("setting up the %s preconditioner: %w", p.kind, err)
		}
		return choice, it, false, nil
	}
}

// progressRecorder is the krylov.Recorder of one right-hand side of a job:
// it publishes a progress event at iteration 0, whenever the request's rule
// fires, and for the final iteration. It never blocks on readers (a slow
// stream drops progress events in its own queue) and never stops the
// solve.
type progressRecorder struct {
	s        *Server
	j        *job
	rhs      int
	every    int
	interval time.Duration

	lastSent time.Time
	pending  krylov.Progress
	havePend bool
}

func (r *progressRecorder) Record(p krylov.Progress) error {
	if h := r.s.testHookIteration; h != nil {
		h(r.j.ctx, r.j.id, r.rhs, p.Iteration)
	}
	now := time.Now()
	if p.Iteration == 0 || (r.every > 0 && p.Iteration%r.every == 0) ||
		(r.interval > 0 && now.Sub(r.lastSent) >= r.interval) {
		r.send(p)
		r.lastSent = now
		r.havePend = false
		return nil
	}
	r.pending, r.havePend = p, true
	return nil
}

func (r *progressRecorder) Finish(*krylov.Result) { r.flush() }

// flush sends the last recorded progress if it was held back, so the
// history always ends at the final iteration.
func (r *progressRecorder) flush() {
	if r.havePend {
		r.send(r.pending)
		r.havePend = false
	}
}

func (r *progressRecorder) send(p krylov.Progress) {
	r.j.publish(&pb.JobEvent{Event: &pb.JobEvent_Progress{Progress: &pb.Progress{
		Rhs: int32(r.rhs), Iteration: int64(p.Iteration), ElapsedSeconds: p.Elapsed.Seconds(),
		ResidualNorm: p.ResidualNorm, RelativeResidual: p.RelResidual, NormalResidualNorm: p.NormalResidualNorm,
	}}})
}

// solution returns the solution of right-hand side rhs, or ErrNotFound
// when it is not (or no longer) held.
func (j *job) solution(rhs int) ([]float64, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.solutions == nil {
		return nil, notFoundf("job %s: %s", j.id, j.solutionGone)
	}
	if rhs < 0 || rhs >= len(j.solutions) {
		return nil, notFoundf("job %s has %d right-hand sides; there is no number %d", j.id, len(j.solutions), rhs)
	}
	if j.solutions[rhs] == nil {
		return nil, notFoundf("job %s has no solution for right-hand side %d yet", j.id, rhs)
	}
	return j.solutions[rhs], nil
}

// dropSolutions lets go of the job's solutions, saying why.
func (j *job) dropSolutions(why string) {
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.solutions != nil {
		j.solutions = nil
		j.solutionGone = why
	}
}

// forgetJob runs when the registry forgets a finished job.
func (s *Server) forgetJob(j *job) {
	j.dropSolutions("the job was forgotten")
	s.store.remove(jobKey(j.id))
}

// Watch implements the Watch RPC.
func (s *Server) Watch(req *pb.WatchRequest, stream pb.Solver_WatchServer) error {
	sub, err := s.jobs.Subscribe(req.GetJobId())
	if err != nil {
		return err
	}
	defer sub.Close()
	return s.follow(stream.Context(), sub.j, sub, stream, false)
}

// GetJob implements the GetJob RPC.
func (s *Server) GetJob(ctx context.Context, req *pb.GetJobRequest) (*pb.Job, error) {
	return s.jobs.Job(req.GetJobId())
}

// ListJobs implements the ListJobs RPC.
func (s *Server) ListJobs(ctx context.Context, _ *pb.ListJobsRequest) (*pb.ListJobsResponse, error) {
	return &pb.ListJobsResponse{Jobs: s.jobs.Jobs()}, nil
}

// CancelJob implements the CancelJob RPC.
func (s *Server) CancelJob(ctx context.Context, req *pb.CancelJobRequest) (*pb.Job, error) {
	j, err := s.jobs.Cancel(req.GetJobId())
	if err != nil {
		return nil, err
	}
	s.log.Info("job cancel requested", "job", req.GetJobId())
	return j, nil
}

// DownloadSolution implements the DownloadSolution RPC.
func (s *Server) DownloadSolution(req *pb.DownloadSolutionRequest, stream pb.Solver_DownloadSolutionServer) error {
	j, err := s.jobs.lookup(req.GetJobId())
	if err != nil {
		return err
	}
	if !j.isDone() {
		return notFoundf("job %s has not finished; its solution is not available yet", j.id)
	}
	if !j.keep {
		return notFoundf("job %s did not keep its solution (it was streamed; set keep_solution or detach)", j.id)
	}
	x, err := j.solution(int(req.GetRhs()))
	if err != nil {
		return err
	}
	per := int(req.GetChunkEntries())
	switch {
	case per < 0:
		return invalidf("chunk_entries %d is negative", per)
	case per == 0:
		per = solutionChunk
	case per > maxSolutionChunk:
		per = maxSolutionChunk
	}
	// The store item may be evicted while we send; we hold x, so sending
	// completes either way.
	s.store.get(jobKey(j.id), 0)
	return sendVector(x, int(req.GetRhs()), per, stream.Send)
}

var _ krylov.Recorder = (*progressRecorder)(nil)
