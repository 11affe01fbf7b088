package api

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/krylov"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/wire"
)

const (
	// defaultProgressInterval is the progress policy when a request sets
	// neither rule.
	defaultProgressInterval = 200 * time.Millisecond
	// workVectors is the number of length-max(m, n) vectors a method
	// allocates (conjugate gradients: r, z, p, A·p and a spare; LSQR and
	// CGLS fewer of the longer length), for the job's memory reservation.
	workVectors = 5
)

// jobParams is what a validated solve request becomes.
type jobParams struct {
	matrixID string
	m        *matrixEntry
	req      solve.Request // validated
	rhs      [][]float64
	x0       [][]float64 // nil entries: start from zero
	every    int
	interval time.Duration
	// weights, for a normal-equations job (SolveRequest.weights): the
	// matrix is B; reg is δ.
	weights []float64
	reg     float64

	pins []*pin // the matrix, its transpose and stored vectors, released when the job ends
	// done holds the results of the right-hand sides a job resumed after
	// a restart had finished before it (jobstore.go).
	done []*pb.SolveResult
}

// solutionLen is the length of the job's solutions: A's columns, or for
// the normal equations (B·D·Bᵀ + δI)·y = b, B's rows.
func (p *jobParams) solutionLen() int {
	if p.weights != nil {
		return p.m.a.Rows
	}
	return p.m.a.Cols
}

// release gives back what the parameters pinned.
func (p *jobParams) release() {
	for _, pn := range p.pins {
		pn.Release()
	}
	p.pins = nil
}

// fieldError turns the solve layer's refusal of a setting into the
// server's: INVALID_ARGUMENT naming the request field.
func fieldError(err error) error {
	var fe *solve.FieldError
	if errors.As(err, &fe) {
		return invalidf("%s: %v", fe.Field, fe.Err)
	}
	return err
}

// newJob validates a solve request and makes its job: the matrix and
// stored vectors pinned, inline vectors decoded, the job's vectors
// reserved in the memory budget.
func (s *Server) newJob(req *pb.SolveRequest) (*job, *jobParams, error) {
	return s.newJobWithID(req, "")
}

// newJobWithID is newJob under a given id (a job resumed after a restart);
// "" draws a new one.
func (s *Server) newJobWithID(req *pb.SolveRequest, id string) (*job, *jobParams, error) {
	p := &jobParams{matrixID: req.GetMatrixId()}
	ok := false
	defer func() {
		if !ok {
			p.release()
		}
	}()
	r, err := wire.Request(req)
	if err == nil {
		r, err = r.Validate()
	}
	if err != nil {
		return nil, nil, fieldError(err)
	}
	p.req = r
	if err := checkPolicy(req.GetProgress()); err != nil {
		return nil, nil, err
	}
	it, pn, found := s.store.acquire(key{kind: kindMatrix, id: p.matrixID})
	if !found {
		// Not in memory: the data folder may hold it (datadir.go).
		if it, pn, err = s.loadStored(p.matrixID); err != nil {
			return nil, nil, err
		}
	}
	p.pins = append(p.pins, pn)
	p.m = it.value.(*matrixEntry)
	a := p.m.a
	normal := req.GetWeights() != nil
	switch {
	case normal && r.LeastSquares:
		return nil, nil, invalidf("method: %s solves least squares; the normal equations (B·D·Bᵀ + reg·I)·y = b are a symmetric system (cg or minres)", r.Method)
	case normal && (!(req.GetReg() >= 0) || math.IsInf(req.GetReg(), 0)):
		return nil, nil, invalidf("reg: %v must be a finite number ≥ 0", req.GetReg())
	case normal:
		// B may have any shape: the operator B·D·Bᵀ is square and symmetric.
	default:
		if err := r.Applies(p.m.solveMatrix()); err != nil {
			return nil, nil, err
		}
	}
	if (r.LeastSquares || normal) && !p.m.exactSym {
		// The products by Aᵀ use a transpose that the matrix keeps after
		// the first one: account for it, pinned for the job, and let it go
		// if it is evicted later.
		k := key{kind: kindTranspose, id: p.matrixID}
		_, tp, found := s.store.acquire(k)
		if !found {
			size := wire.CSRBytes(int64(a.Cols), int64(a.NNZ()))
			if err := s.store.reserve(size, "the transpose of "+p.m.info.GetName()); err != nil {
				return nil, nil, err
			}
			_, tp, _ = s.store.insert(k, size, true, nil, a.ForgetTranspose)
		}
		p.pins = append(p.pins, tp)
	}
	n, ncols := a.Rows, a.Cols
	nrhs := len(req.GetRhs())
	if nrhs == 0 {
		return nil, nil, invalidf("the request has no right-hand side")
	}
	// Past the limit the codec decodes only the first MaxRHS+1 references
	// (codec.go), so the count is "more than", not the number sent.
	if nrhs > s.cfg.MaxRHS {
		return nil, nil, limitf("more right-hand sides than the server's limit of %d per request", s.cfg.MaxRHS)
	}
	if len(req.GetX0()) > s.cfg.MaxRHS {
		return nil, nil, limitf("more starting guesses than the server's limit of %d per request", s.cfg.MaxRHS)
	}
	if nx := len(req.GetX0()); nx != 0 && nx != 1 && nx != nrhs {
		return nil, nil, invalidf("%d starting guesses for %d right-hand sides (give none, one, or one each)", nx, nrhs)
	}
	inline := 0
	resolve := func(ref *pb.VectorRef, what string, n int, dim string) ([]float64, error) {
		switch src := ref.GetSource().(type) {
		case *pb.VectorRef_Data:
			if len(src.Data) != 8*n {
				return nil, invalidf("%s has %d bytes; the matrix has %d %s, so it needs %d", what, len(src.Data), n, dim, 8*n)
			}
			x, err := wire.Unpack(src.Data)
			if err != nil {
				return nil, invalidf("%s: %v", what, err)
			}
			if i := firstNotFinite(x); i >= 0 {
				return nil, invalidf("%s: entry %d is not finite (%g)", what, i, x[i])
			}
			inline++
			return x, nil
		case *pb.VectorRef_VectorId:
			it, pn, found := s.store.acquire(key{kind: kindVector, id: src.VectorId})
			if !found {
				// Not in memory: the data folder may hold it.
				var err error
				if it, pn, err = s.loadVector(src.VectorId, what); err != nil {
					return nil, err
				}
			}
			p.pins = append(p.pins, pn)
			x := it.value.(*vectorEntry).x
			if len(x) != n {
				return nil, invalidf("%s has %d entries; the matrix has %d %s", what, len(x), n, dim)
			}
			return x, nil
		}
		return nil, invalidf("%s is empty (give data or a vector id)", what)
	}
	for i, ref := range req.GetRhs() {
		b, err := resolve(ref, fmt.Sprintf("right-hand side %d", i), n, "rows")
		if err != nil {
			return nil, nil, err
		}
		p.rhs = append(p.rhs, b)
	}
	p.x0 = make([][]float64, nrhs)
	x0Len, x0Dim := ncols, "columns"
	if normal {
		x0Len, x0Dim = n, "rows"
		w, err := resolve(req.GetWeights(), "weights", ncols, "columns")
		if err != nil {
			return nil, nil, err
		}
		if i := firstNegative(w); i >= 0 {
			return nil, nil, invalidf("weights: entry %d is %g; weights must be ≥ 0", i, w[i])
		}
		p.weights, p.reg = w, req.GetReg()
	}
	for i, ref := range req.GetX0() {
		x, err := resolve(ref, fmt.Sprintf("starting guess %d", i), x0Len, x0Dim)
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
	p.every = int(req.GetProgress().GetEveryIterations())
	if req.GetProgress().GetInterval() != nil {
		p.interval = req.GetProgress().GetInterval().AsDuration()
	}
	if p.every == 0 && p.interval == 0 {
		p.interval = defaultProgressInterval
	}

	keep := req.GetKeepSolution() || req.GetDetach()
	if id == "" {
		id = newJobID()
	}
	// The job's vectors: the solutions, the inline vectors it decoded and
	// the method's work vectors.
	// Several right-hand sides of a system are solved as one block
	// (solve.SolveBlock), whose workspace grows with the block's width.
	work := max(workVectors, solve.BlockWorkVectors(nrhs, p.req.LeastSquares))
	mem := 8 * int64(max(n, ncols)) * int64(nrhs+inline+work)
	if normal {
		// The operator's scaled copy of Bᵀ's values, its scratch vector and
		// the Jacobi diagonal; for IC(0), the assembled B·D·Bᵀ and its
		// factor, whose size B alone decides and which can be far larger
		// than B (one dense column makes it dense): a client's B cannot
		// make the server allocate beyond its budget.
		mem += 8*int64(a.NNZ()) + 8*int64(ncols) + 8*int64(n)
		if r.Preconditioner == "ic0" {
			mem += normalAssemblyBytes(a)
		}
	}
	if err := s.store.reserve(mem, "job "+id); err != nil {
		return nil, nil, err
	}
	j := newJob(id, nrhs, keep)
	pins := 1 // the runner's
	if !keep {
		pins++ // the attached stream's, until it has sent the solutions
	}
	var ps []*pin
	j.mem, ps = s.store.insertDropping(key{kind: kindJob, id: id}, mem, pins, j,
		func() { j.dropSolutions("the solution was evicted under memory pressure") })
	j.runnerPin = ps[0]
	if !keep {
		j.streamPin = ps[1]
	}
	rtol := 0.0
	if !r.LeastSquares {
		rtol = r.RelTol
		if rtol == 0 {
			rtol = krylov.DefaultRelTol
		}
	}
	j.info = &pb.Job{
		Id: id, MatrixId: p.matrixID, MatrixName: p.m.info.GetName(), Rows: int64(n), Cols: int64(ncols), Nonzeros: int64(a.NNZ()),
		Method: string(r.Method), PreconditionerRequested: r.Preconditioner, RhsCount: int32(nrhs),
		Detached: req.GetDetach(), Label: req.GetLabel(), Rtol: rtol,
	}
	ok = true
	return j, p, nil
}

// firstNegative returns the index of x's first negative entry, or −1.
func firstNegative(x []float64) int {
	for i, v := range x {
		if v < 0 {
			return i
		}
	}
	return -1
}

// checkPolicy refuses a progress policy with negative or malformed rules.
func checkPolicy(pp *pb.ProgressPolicy) error {
	switch {
	case pp.GetEveryIterations() < 0:
		return invalidf("progress.every_iterations is negative")
	case pp.GetInterval() != nil && (pp.GetInterval().CheckValid() != nil || pp.GetInterval().AsDuration() < 0):
		return invalidf("progress.interval must be a valid duration ≥ 0")
	}
	return nil
}

func firstNotFinite(x []float64) int {
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return i
		}
	}
	return -1
}
