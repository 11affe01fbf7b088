package amg

import (
	"fmt"
	"strings"
	"time"
)

// Level describes one level of the hierarchy in a Report.
type Level struct {
	Rows int `json:"rows"`
	NNZ  int `json:"nnz"`
	// Theta is the strength threshold used to coarsen this level (zero on
	// the coarsest) and Omega the prolongator smoothing weight
	// 4/(3·ρ(D_F⁻¹A_F)).
	Theta float64 `json:"theta,omitempty"`
	Omega float64 `json:"omega,omitempty"`
	// LambdaMax is the Lanczos estimate of λmax(D⁻¹A) (Chebyshev only).
	LambdaMax float64 `json:"lambda_max,omitempty"`
}

// Report is what New built and what it costs.
type Report struct {
	Smoother Smoother `json:"smoother"`
	Degree   int      `json:"degree,omitempty"`
	Theta    float64  `json:"theta"`
	K        int      `json:"near_null_vectors"`
	Levels   []Level  `json:"levels"`
	// Coarsest says how the coarsest level is solved: "cholesky" or
	// "smoothed" (when coarsening stalled above MaxDirect rows).
	Coarsest string `json:"coarsest"`
	// OperatorComplexity is Σ nnz(A_l)/nnz(A_0); GridComplexity is
	// Σ rows(A_l)/rows(A_0).
	OperatorComplexity float64 `json:"operator_complexity"`
	GridComplexity     float64 `json:"grid_complexity"`
	// SetupSeconds is New's wall time and SetupSpMVs the same in products
	// with the finest matrix, timed at the end of the set-up.
	SetupSeconds float64 `json:"setup_seconds"`
	SetupSpMVs   float64 `json:"setup_spmvs"`
	// ApplySpMVs is the work of one application in products with the
	// finest matrix: every product with a level's matrix, prolongator and
	// restriction, counted by stored entries, over nnz(A_0). The vector
	// sweeps and the coarsest solve are not counted.
	ApplySpMVs float64 `json:"apply_spmvs"`
	// Bytes is the memory the hierarchy holds beyond the finest matrix:
	// coarse matrices, prolongators and their transposes, smoother
	// diagonals, the Cholesky factor and one set of work vectors.
	Bytes int64 `json:"bytes"`
}

// Report returns the set-up report.
func (h *AMG) Report() Report { return h.rep }

// Bytes returns the memory the preconditioner holds (Report.Bytes).
func (h *AMG) Bytes() int64 { return h.rep.Bytes }

func (h *AMG) report(start time.Time) {
	r := Report{Smoother: h.opt.Smoother, Theta: h.opt.Theta, K: h.opt.K, Coarsest: "cholesky"}
	if h.opt.Smoother == Chebyshev {
		r.Degree = h.opt.Degree
	}
	if h.chol == nil {
		r.Coarsest = "smoothed"
	}
	a0 := h.levels[0].a
	nnz0, rows0 := float64(max(a0.NNZ(), 1)), float64(max(a0.Rows, 1))
	var bytes int64
	apply := 0.0
	// Products per cycle with a level's matrix: Chebyshev of degree d makes
	// d−1 before and d after the coarse correction, plus the residual
	// that is restricted; l1-Jacobi 0 + 1 + 1.
	perLevel := 2 * h.opt.Degree
	if h.opt.Smoother == L1Jacobi {
		perLevel = 2
	}
	for l, lv := range h.levels {
		r.Levels = append(r.Levels, Level{Rows: lv.a.Rows, NNZ: lv.a.NNZ(), Theta: lv.theta, Omega: lv.omega, LambdaMax: lv.lmax})
		if lv.p == nil {
			r.Levels[l].Theta = 0
		}
		r.OperatorComplexity += float64(lv.a.NNZ()) / nnz0
		r.GridComplexity += float64(lv.a.Rows) / rows0
		if l > 0 {
			bytes += lv.a.Bytes()
		}
		bytes += int64(len(lv.winv))*8 + int64(lv.a.Rows)*4*8
		if lv.p != nil {
			bytes += lv.p.Bytes() + lv.r.Bytes()
			apply += float64(perLevel*lv.a.NNZ()+lv.p.NNZ()+lv.r.NNZ()) / nnz0
		} else if h.chol == nil {
			apply += float64(perLevel*lv.a.NNZ()) / nnz0
		}
	}
	bytes += int64(len(h.chol)) * 8
	r.ApplySpMVs = apply
	r.Bytes = bytes
	// Time a few products with the finest matrix to express the set-up in
	// them (three, the best kept: the first may still page in memory).
	x := h.free[0].lv[0].r
	y := h.free[0].lv[0].d
	best := time.Duration(1 << 62)
	for range 3 {
		t := time.Now()
		a0.MulVec(y, x)
		best = min(best, time.Since(t))
	}
	r.SetupSeconds = time.Since(start).Seconds()
	if best > 0 {
		r.SetupSpMVs = r.SetupSeconds / best.Seconds()
	}
	h.rep = r
}

// String gives the report in a few lines of text.
func (r Report) String() string {
	var s strings.Builder
	fmt.Fprintf(&s, "smoothed aggregation: %d levels, operator complexity %.3f, grid complexity %.3f\n",
		len(r.Levels), r.OperatorComplexity, r.GridComplexity)
	for l, lv := range r.Levels {
		fmt.Fprintf(&s, "  level %d: %d rows, %d entries (%.1f a row)\n", l, lv.Rows, lv.NNZ, float64(lv.NNZ)/float64(max(lv.Rows, 1)))
	}
	sm := string(r.Smoother)
	if r.Degree > 0 {
		sm = fmt.Sprintf("%s degree %d", sm, r.Degree)
	}
	fmt.Fprintf(&s, "  smoother %s, θ %g, %d near-null %s, coarsest by %s\n", sm, r.Theta, r.K, plural(r.K, "vector", "vectors"), r.Coarsest)
	fmt.Fprintf(&s, "  set-up %.3g s (%.0f fine products), apply %.2f fine products, %.1f MiB held",
		r.SetupSeconds, r.SetupSpMVs, r.ApplySpMVs, float64(r.Bytes)/(1<<20))
	return s.String()
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}
