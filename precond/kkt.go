package precond

import (
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/sparse"
)

// Preconditioners for symmetric indefinite systems, which MINRES needs
// symmetric positive definite (Elman, Silvester and Wathen, Finite Elements
// and Fast Iterative Solvers, 2nd ed., 2014, §4.2): Jacobi on the absolute
// diagonal, and the block-diagonal preconditioner of a saddle-point (KKT)
// matrix
//
//	K = [ H  Bᵀ ]      M = [ H̃  0 ]
//	    [ B −C  ],         [ 0  S̃ ],
//
// with H̃ an SPD preconditioner of H and S̃ one of the Schur complement
// approximation S = C + B·diag(H)⁻¹·Bᵀ. With exact blocks, M = diag(H, B·H⁻¹·Bᵀ)
// and C = 0, the preconditioned matrix M⁻¹K has the three eigenvalues 1 and
// (1 ± √5)/2 only (Murphy, Golub and Wathen, SIAM J. Sci. Comput. 21(6),
// 2000), so MINRES converges in at most three iterations; with approximate
// blocks the eigenvalues cluster around those three.

// NewAbsJacobi returns the Jacobi preconditioner M = |diag(A)| of the square
// matrix a, SPD whatever the signs of the diagonal, for MINRES on a symmetric
// indefinite A (Elman, Silvester and Wathen §4.2). It refuses a missing, zero
// or non-finite diagonal entry with a *DiagonalError naming the first such
// row: a saddle-point matrix's zero (2,2) block needs the block-diagonal
// preconditioner instead.
func NewAbsJacobi(a *sparse.CSR) (*Jacobi, error) {
	if a.Rows != a.Cols {
		return nil, fmt.Errorf("precond: %w (%d×%d)", ErrNotSquare, a.Rows, a.Cols)
	}
	inv := make([]float64, a.Rows)
	for i := range inv {
		v, ok := diagonalEntry(a, i)
		if err := checkDiagonal(i, math.Abs(v), ok); err != nil {
			var de *DiagonalError
			if errors.As(err, &de) {
				de.Value = v // report the entry as stored, sign included
			}
			return nil, err
		}
		inv[i] = 1 / math.Abs(v)
	}
	return &Jacobi{inv: inv}, nil
}

// ZeroBlockSplit returns the size s of the leading block H of a saddle-point
// matrix K = [H Bᵀ; B 0] read from its structure: the smallest s ≥ 1 such
// that rows and columns s…n−1 store no nonzero value in their trailing block
// (the (2,2) block is zero). It returns n when there is no such block
// (the last diagonal entry is nonzero).
func ZeroBlockSplit(k *sparse.CSR) int {
	n := k.Rows
	best := n
	last := -1 // the largest column of a nonzero in rows s…n−1
	for s := n - 1; s >= 1; s-- {
		for p := k.RowPtr[s+1] - 1; p >= k.RowPtr[s]; p-- {
			if k.Val[p] != 0 {
				last = max(last, int(k.ColIdx[p]))
				break
			}
		}
		if last < s {
			best = s
		}
	}
	return best
}

// ErrNoSaddle reports a block split that does not describe a saddle-point
// matrix.
var ErrNoSaddle = errors.New("not a saddle-point block split")

// BlockOptions configure NewBlockDiagonal. The zero value works.
type BlockOptions struct {
	// Split is the size of the leading block H; 0 reads it from a zero
	// trailing block (ZeroBlockSplit), which must then exist.
	Split int
	// H and S are the kinds of the preconditioners of H and of the Schur
	// complement approximation S = C + B·diag(H)⁻¹·Bᵀ: KindJacobi, KindIC0
	// or KindAuto (the default, when empty), by New's rules.
	H, S Kind
}

// BlockDiagonal is the block-diagonal preconditioner diag(H̃, S̃) of a
// saddle-point matrix (see NewBlockDiagonal). It is safe for concurrent use
// when its two block preconditioners are.
type BlockDiagonal struct {
	split  int
	n      int
	top    interface{ Precondition(dst, r []float64) }
	bottom interface{ Precondition(dst, r []float64) }
	// HChoice and SChoice describe the two block preconditioners (nil
	// when the blocks were given by NewBlockDiagonalOf).
	HChoice, SChoice *Choice
	// Schur is the assembled Schur complement approximation S (nil when
	// the blocks were given).
	Schur *sparse.CSR
	// Setup is the time NewBlockDiagonal took (extraction, product and
	// both block set-ups).
	Setup time.Duration
}

// NewBlockDiagonalOf returns diag(top, bottom)⁻¹ applied block by block:
// rows 0…split−1 by top, the rest of n by bottom. Both must be SPD for
// MINRES. It panics if split is not in 1…n−1.
func NewBlockDiagonalOf(n, split int, top, bottom interface{ Precondition(dst, r []float64) }) *BlockDiagonal {
	if split < 1 || split >= n {
		panic(fmt.Sprintf("precond: block split %d not in 1…%d", split, n-1))
	}
	return &BlockDiagonal{split: split, n: n, top: top, bottom: bottom}
}

// NewBlockDiagonal builds the block-diagonal preconditioner of the
// symmetric saddle-point matrix k = [H Bᵀ; B −C] (only read): H̃ from H,
// and S̃ from S = C + B·diag(H)⁻¹·Bᵀ formed by sparse.Mul (Elman, Silvester
// and Wathen §4.2; Murphy, Golub and Wathen 2000). It returns an error
// wrapping ErrNoSaddle for a split that leaves either block empty or,
// with opt.Split = 0, when k has no zero trailing block; a *DiagonalError
// for a diagonal entry of H that is missing, zero, negative or not finite
// (H must be positive definite on the whole space here); and the errors
// of New for the two blocks.
func NewBlockDiagonal(k *sparse.CSR, opt BlockOptions) (*BlockDiagonal, error) {
	start := time.Now()
	if k.Rows != k.Cols {
		return nil, fmt.Errorf("precond: %w (%d×%d)", ErrNotSquare, k.Rows, k.Cols)
	}
	n := k.Rows
	split := opt.Split
	if split == 0 {
		split = ZeroBlockSplit(k)
		if split == n {
			return nil, fmt.Errorf("precond: %w: the matrix has no zero trailing block (row %d has a nonzero diagonal); give the size of the leading block", ErrNoSaddle, n)
		}
	}
	if split < 1 || split >= n {
		return nil, fmt.Errorf("precond: %w: leading block size %d, want 1…%d", ErrNoSaddle, split, n-1)
	}
	h, bm, c := splitBlocks(k, split)
	dh := make([]float64, split)
	for i := range dh {
		v, ok := diagonalEntry(h, i)
		if err := checkDiagonal(i, v, ok); err != nil {
			return nil, err
		}
		dh[i] = 1 / v
	}
	s, err := NormalMatrix(bm, dh, c)
	if err != nil {
		return nil, err
	}
	kh, ks := opt.H, opt.S
	if kh == "" {
		kh = KindAuto
	}
	if ks == "" {
		ks = KindAuto
	}
	hc, err := New(h, kh)
	if err != nil {
		return nil, fmt.Errorf("precond: leading block H: %w", err)
	}
	sc, err := New(s, ks)
	if err != nil {
		return nil, fmt.Errorf("precond: Schur complement C + B·diag(H)⁻¹·Bᵀ: %w", err)
	}
	if hc.M == nil || sc.M == nil {
		return nil, fmt.Errorf("precond: block preconditioners must not be none")
	}
	bd := NewBlockDiagonalOf(n, split, hc.M, sc.M)
	bd.HChoice, bd.SChoice, bd.Schur = hc, sc, s
	bd.Setup = time.Since(start)
	return bd, nil
}

// Split returns the size of the leading block.
func (p *BlockDiagonal) Split() int { return p.split }

// Precondition sets dst = M⁻¹·r block by block. It panics if len(dst) or
// len(r) is not the matrix order.
func (p *BlockDiagonal) Precondition(dst, r []float64) {
	if len(dst) != p.n || len(r) != p.n {
		panic(fmt.Sprintf("precond: BlockDiagonal.Precondition: len(dst)=%d, len(r)=%d, want %d", len(dst), len(r), p.n))
	}
	p.top.Precondition(dst[:p.split], r[:p.split])
	p.bottom.Precondition(dst[p.split:], r[p.split:])
}

// Bytes returns the memory the block preconditioners and the Schur matrix
// hold, as far as known.
func (p *BlockDiagonal) Bytes() int64 {
	var b int64
	if p.HChoice != nil {
		b += p.HChoice.Bytes
	}
	if p.SChoice != nil {
		b += p.SChoice.Bytes
	}
	if p.Schur != nil {
		b += p.Schur.Bytes()
	}
	return b
}

// splitBlocks returns H = k[0:s, 0:s], B = k[s:n, 0:s] and C = −k[s:n, s:n].
func splitBlocks(k *sparse.CSR, s int) (h, b, c *sparse.CSR) {
	n := k.Rows
	h = &sparse.CSR{Rows: s, Cols: s, RowPtr: make([]int, s+1)}
	b = &sparse.CSR{Rows: n - s, Cols: s, RowPtr: make([]int, n-s+1)}
	c = &sparse.CSR{Rows: n - s, Cols: n - s, RowPtr: make([]int, n-s+1)}
	for i := range n {
		for p := k.RowPtr[i]; p < k.RowPtr[i+1]; p++ {
			j, v := int(k.ColIdx[p]), k.Val[p]
			switch {
			case i < s && j < s:
				h.ColIdx, h.Val = append(h.ColIdx, int32(j)), append(h.Val, v)
			case i >= s && j < s:
				b.ColIdx, b.Val = append(b.ColIdx, int32(j)), append(b.Val, v)
			case i >= s && j >= s:
				c.ColIdx, c.Val = append(c.ColIdx, int32(j-s)), append(c.Val, -v)
			}
		}
		if i < s {
			h.RowPtr[i+1] = len(h.Val)
		} else {
			b.RowPtr[i-s+1] = len(b.Val)
			c.RowPtr[i-s+1] = len(c.Val)
		}
	}
	return h, b, c
}

// NormalMatrix returns B·diag(d)·Bᵀ + C assembled, for the Schur complement
// approximation of a saddle-point matrix (d = diag(H)⁻¹): B·diag(d) is B
// with its columns scaled, multiplied by Bᵀ with sparse.Mul; C (nil or
// empty for none) must be square of B's row count. It returns an error for
// a d of the wrong length or with a negative or non-finite entry (the
// product must stay positive semidefinite).
func NormalMatrix(b *sparse.CSR, d []float64, c *sparse.CSR) (*sparse.CSR, error) {
	if len(d) != b.Cols {
		return nil, fmt.Errorf("precond: %d weights for %d columns of B", len(d), b.Cols)
	}
	for j, v := range d {
		if !(v >= 0) || v > maxFloat {
			return nil, fmt.Errorf("precond: weight %d is %g; the weights must be finite and non-negative", j+1, v)
		}
	}
	bd := &sparse.CSR{Rows: b.Rows, Cols: b.Cols, RowPtr: b.RowPtr, ColIdx: b.ColIdx, Val: make([]float64, len(b.Val))}
	for p, j := range b.ColIdx {
		bd.Val[p] = b.Val[p] * d[j]
	}
	s := sparse.Mul(bd, b.Transpose())
	if c == nil || c.NNZ() == 0 {
		return s, nil
	}
	if c.Rows != s.Rows || c.Cols != s.Cols {
		return nil, fmt.Errorf("precond: C is %d×%d, want %d×%d", c.Rows, c.Cols, s.Rows, s.Cols)
	}
	return addCSR(s, c), nil
}

// addCSR returns a + c for two matrices of the same shape with sorted rows.
func addCSR(a, c *sparse.CSR) *sparse.CSR {
	out := &sparse.CSR{Rows: a.Rows, Cols: a.Cols, RowPtr: make([]int, a.Rows+1)}
	out.ColIdx = make([]int32, 0, a.NNZ()+c.NNZ())
	out.Val = make([]float64, 0, a.NNZ()+c.NNZ())
	for i := range a.Rows {
		p, pe := a.RowPtr[i], a.RowPtr[i+1]
		q, qe := c.RowPtr[i], c.RowPtr[i+1]
		for p < pe || q < qe {
			switch {
			case q == qe || (p < pe && a.ColIdx[p] < c.ColIdx[q]):
				out.ColIdx, out.Val = append(out.ColIdx, a.ColIdx[p]), append(out.Val, a.Val[p])
				p++
			case p == pe || c.ColIdx[q] < a.ColIdx[p]:
				out.ColIdx, out.Val = append(out.ColIdx, c.ColIdx[q]), append(out.Val, c.Val[q])
				q++
			default:
				out.ColIdx, out.Val = append(out.ColIdx, a.ColIdx[p]), append(out.Val, a.Val[p]+c.Val[q])
				p++
				q++
			}
		}
		out.RowPtr[i+1] = len(out.Val)
	}
	return out
}

// NewJacobiDiagonal returns the Jacobi preconditioner M = diag(d) for an
// operator whose diagonal d is known without a stored matrix (the
// normal-equations operator's Σ_j b_ij²·d_j + δ, sparse.Normal.Diagonal). It
// refuses a zero, negative or non-finite entry with a *DiagonalError naming
// the first such row. d is copied.
func NewJacobiDiagonal(d []float64) (*Jacobi, error) {
	inv := make([]float64, len(d))
	for i, v := range d {
		if err := checkDiagonal(i, v, true); err != nil {
			return nil, err
		}
		inv[i] = 1 / v
	}
	return &Jacobi{inv: inv}, nil
}
