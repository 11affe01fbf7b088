package solve

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"github.com/residua/residua/precond"
	"github.com/residua/residua/sparse"
)

// Normal-equations solves: (B·diag(d)·Bᵀ + δ·I)·y = r for a stored B, with
// weights d and a regularisation δ ≥ 0 given per solve, as an
// interior-point method needs at each of its steps (Nocedal and Wright,
// Numerical Optimization, 2nd ed., §14.1). The operator is applied
// matrix-free (sparse.Normal): two products per iteration, B·Bᵀ never
// formed unless IC(0) asks for it.

// Weights are a normal-equations solve's data besides the right-hand side.
type Weights struct {
	// D holds one weight per column of B, each finite and ≥ 0.
	D []float64
	// Delta is the regularisation δ ≥ 0 added to the diagonal.
	Delta float64
}

// NormalCache keeps what normal-equations solves with one B reuse whatever
// the weights: the assembled pattern of B·Bᵀ + I, made on the first solve
// that asks for IC(0). B's transpose is kept by B itself (sparse.CSR's
// MulVecTrans cache), shared by every operator. Safe for concurrent use.
type NormalCache struct {
	b    *sparse.CSR
	once sync.Once
	mu   sync.Mutex // guards asm's publication for PatternBytes
	asm  *sparse.NormalAssembly
	// PatternSeconds is the time the one symbolic product took (zero
	// until it ran).
	patternTime time.Duration
}

// NewNormalCache returns the cache of b.
func NewNormalCache(b *sparse.CSR) *NormalCache { return &NormalCache{b: b} }

// assembly returns the pattern, computing it on first use, and whether
// this call computed it.
func (c *NormalCache) assembly() (*sparse.NormalAssembly, bool) {
	made := false
	c.once.Do(func() {
		start := time.Now()
		asm := sparse.NewNormalAssembly(c.b)
		c.mu.Lock()
		c.asm = asm
		c.mu.Unlock()
		c.patternTime = time.Since(start)
		made = true
	})
	return c.asm, made
}

// PatternBytes returns the memory the kept pattern holds: zero until a
// solve with IC(0) made it.
func (c *NormalCache) PatternBytes() int64 {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.asm == nil {
		return 0
	}
	return int64(c.asm.NNZ())*4 + int64(c.b.Rows+1)*8
}

// normalInfo is what a normal-equations set-up reports.
type normalInfo struct {
	b          *sparse.CSR
	dmin, dmax float64
	delta      float64
}

// PrepareNormal validates req for the system (B·diag(w.D)·Bᵀ + w.Delta·I)·y
// = r, with B = m.A (any shape; m.Symmetric is not needed), builds the
// operator and the preconditioner for these weights. The method is CG
// (auto) or MINRES; least-squares methods are refused. Preconditioners:
// "jacobi" (and "auto"): the diagonal Σ_j b_ij²·d_j + δ, one pass over B;
// "ic0": IC(0) of N assembled on the pattern that cache keeps (cache may
// be nil: one is made for this call); "none". Bad weights are a
// *FieldError on "weights" or "reg". The returned Setup's Solve is not safe
// for concurrent use (the operator has scratch space): prepare one per
// solve, which is what changing weights means anyway.
func PrepareNormal(m Matrix, req Request, w Weights, cache *NormalCache) (*Setup, error) {
	req, err := req.Validate()
	if err != nil {
		return nil, err
	}
	if req.LeastSquares {
		return nil, fieldErr("method", "%s solves least squares; the normal equations (B·D·Bᵀ + δI)·y = r are a symmetric system: cg or minres", req.Method)
	}
	b := m.A
	if len(w.D) != b.Cols {
		return nil, fieldErr("weights", "%d weights for the %d columns of B", len(w.D), b.Cols)
	}
	start := time.Now()
	op := sparse.NewNormal(b)
	if err := op.SetWeights(w.D, w.Delta); err != nil {
		var we *sparse.WeightError
		if errors.As(err, &we) && we.Index < 0 {
			return nil, fieldErr("reg", "%g must be a finite number ≥ 0", w.Delta)
		}
		return nil, fieldErr("weights", "weight %d is %g; weights must be finite and ≥ 0", we.Index+1, we.Value)
	}
	s := &Setup{Request: req, Matrix: m, op: op}
	lo, hi := op.WeightRange()
	s.normal = &normalInfo{b: b, dmin: lo, dmax: hi, delta: w.Delta}
	diag := op.Diagonal(nil)
	for _, v := range diag {
		if v == 0 {
			s.zeroDiag++
		}
	}
	kind, _ := precond.ParseKind(req.Preconditioner)
	var c *precond.Choice
	switch kind {
	case precond.KindNone:
		c = &precond.Choice{Kind: precond.KindNone, Reason: "none: as requested"}
	case precond.KindJacobi, precond.KindAuto:
		j, err := precond.NewJacobiDiagonal(diag)
		switch {
		case err == nil:
			why := "jacobi: as requested"
			if kind == precond.KindAuto {
				why = "jacobi"
			}
			c = &precond.Choice{Kind: precond.KindJacobi, M: j, Bytes: j.Bytes(), Reason: why + ", from the diagonal Σ_j b_ij²·d_j + δ (one pass over B; N is never formed)"}
		case kind == precond.KindAuto:
			c = &precond.Choice{Kind: precond.KindNone, Reason: "none: " + trimPackage(err).Error() + " (a row of B whose weighted entries all vanish, with δ = 0, makes N singular)"}
		default:
			return nil, &SetupError{Preconditioner: req.Preconditioner, Err: err}
		}
	case precond.KindIC0:
		if cache == nil {
			cache = NewNormalCache(b)
		}
		asm, made := cache.assembly()
		a := asm.Assemble(w.D, w.Delta)
		ic, err := precond.NewIC0(a, precond.IC0Options{})
		if err != nil {
			return nil, &SetupError{Preconditioner: req.Preconditioner, Err: err}
		}
		pattern := "reused the pattern of B·Bᵀ"
		if made {
			pattern = fmt.Sprintf("computed the pattern of B·Bᵀ (%d entries, %s) for reuse", asm.NNZ(), cache.patternTime.Round(time.Microsecond))
		}
		c = &precond.Choice{Kind: precond.KindIC0, M: ic, Bytes: ic.Bytes(), Shift: ic.Shift(), Tries: ic.Tries(),
			Reason: fmt.Sprintf("ic0: as requested, of N = B·D·Bᵀ + δI assembled (%s); factorization succeeded with shift %g", pattern, ic.Shift())}
	default:
		return nil, &SetupError{Preconditioner: req.Preconditioner, Err: fmt.Errorf("%s does not apply to the normal equations (want auto, none, jacobi or ic0)", kind)}
	}
	c.Setup = time.Since(start)
	s.Choice = c
	return s, nil
}

// describe fills a normal-equations summary's operator fields.
func (n *normalInfo) describe(sum *Summary) {
	m := n.b.Rows
	sum.Rows, sum.Cols = m, m
	sum.Operator = fmt.Sprintf("(B·D·Bᵀ + δI) with B %d×%d, %d nonzeros", n.b.Rows, n.b.Cols, n.b.NNZ())
	ratio := math.Inf(1)
	if n.dmin > 0 {
		ratio = n.dmax / n.dmin
	}
	sum.WeightRatio = NumPtr(ratio)
	sum.Regularization = NumPtr(n.delta)
}
