package sparse

import (
	"fmt"
	"math"
	"math/big"
	"testing"
)

// TestResidualBound checks CSR.ResidualBound against the rounding error it
// claims to bound: the residual that Residual computes in float64 against
// the exact b − A·x, formed in 400-bit big.Float arithmetic (every product
// and sum of float64 values is then exact), on every test pool. The bound
// is u·‖((w_i+1)·(|A|·|x| + |b|)_i)‖₂ (Higham, Accuracy and Stability of
// Numerical Algorithms, 2nd ed., §3.1, the inner product bound γ_n·|x|ᵀ|y|
// to first order); the actual error is typically much smaller, so the test
// also checks that the bound equals its definition evaluated by a plain
// loop, to rounding of the bound itself (relative 1e-13).
func TestResidualBound(t *testing.T) {
	for _, tc := range conformanceCases() {
		a := tc.a
		if a.Rows != a.Cols {
			continue
		}
		t.Run(tc.name, func(t *testing.T) {
			x := randVec(a.Cols, 21)
			b := randVec(a.Rows, 22)
			// Scale b up so that |b| and |A|·|x| differ in size across rows.
			for i := range b {
				b[i] *= float64(1 + i%3*100)
			}
			r := make([]float64, a.Rows)
			a.Residual(r, b, x)
			var errSq, defSq float64
			for i := 0; i < a.Rows; i++ {
				exact := new(big.Float).SetPrec(400).SetFloat64(b[i])
				abs := math.Abs(b[i])
				for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
					prod := new(big.Float).SetPrec(400).SetFloat64(a.Val[p])
					prod.Mul(prod, new(big.Float).SetPrec(400).SetFloat64(x[a.ColIdx[p]]))
					exact.Sub(exact, prod)
					abs += math.Abs(a.Val[p] * x[a.ColIdx[p]])
				}
				e, _ := new(big.Float).Sub(new(big.Float).SetPrec(400).SetFloat64(r[i]), exact).Float64()
				errSq += e * e
				w := float64(a.RowPtr[i+1]-a.RowPtr[i]+1) * abs
				defSq += w * w
			}
			bound := a.ResidualBound(x, b)
			if err := math.Sqrt(errSq); err > bound {
				t.Errorf("rounding error %g exceeds the bound %g", err, bound)
			}
			def := 0x1p-53 * math.Sqrt(defSq)
			if math.Abs(bound-def) > 1e-13*def {
				t.Errorf("bound %g, definition %g", bound, def)
			}
			for _, p := range testPools {
				got := unitRoundoff * math.Sqrt(p.matOp(job{op: opResidualBound, a: a, d: b, x: x, y: b}))
				if math.Abs(got-def) > 1e-13*def {
					t.Errorf("%s: bound %g, definition %g", fmt.Sprintf("parts=%d", p.parts), got, def)
				}
			}
		})
	}
}
