package api

import (
	"encoding/json"
	"fmt"

	"github.com/residua/residua/sparse"
)

// symmetryTol is the relative tolerance for calling a stored matrix
// symmetric, the same as `residua inspect` and the local solve use:
// |a(i,j) − a(j,i)| ≤ 1e-12·max|a| accepts a matrix such as AᵀA formed in
// floating point (common practice: a few hundred ulps).
const symmetryTol = 1e-12

// inspect returns a's inspect report as JSON (the document `residua
// inspect --json` prints), whether it is symmetric within symmetryTol and
// exactly, and if not, which pair of entries shows it, in words.
func inspect(a *sparse.CSR) (report string, symmetric, exact bool, why string) {
	r := sparse.Analyze(a, symmetryTol)
	b, err := json.Marshal(r)
	if err != nil {
		// Analyze leaves non-finite values out of its figures, so the
		// report always encodes; this is a programmer's mistake.
		panic("api: encoding the inspect report: " + err.Error())
	}
	switch {
	case !r.Square:
		why = fmt.Sprintf("is %d×%d, not square", a.Rows, a.Cols)
	case r.WorstPair != nil && !r.Symmetric:
		w := r.WorstPair
		why = fmt.Sprintf("is not symmetric: a(%d,%d) = %g but a(%d,%d) = %g", w.Row+1, w.Col+1, w.Aij, w.Col+1, w.Row+1, w.Aji)
	case !r.Symmetric:
		why = "is not symmetric"
	}
	exact = r.Symmetric && r.PatternSymmetric && r.Asymmetry == 0 && r.NonFinite == 0
	return string(b), r.Symmetric, exact, why
}
