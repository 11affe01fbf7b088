package api

import (
	"encoding/json"

	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
)

// inspect returns a's inspect report as JSON (the document `residua
// inspect --json` prints), whether it is symmetric within sparse.SymmetryTolerance and
// exactly, and if not, which pair of entries shows it, in words.
func inspect(a *sparse.CSR) (report string, symmetric, exact bool, why string) {
	r := sparse.Analyze(a, sparse.SymmetryTolerance)
	b, err := json.Marshal(r)
	if err != nil {
		// Analyze leaves non-finite values out of its figures, so the
		// report always encodes; this is a programmer's mistake.
		panic("api: encoding the inspect report: " + err.Error())
	}
	_, why = solve.Symmetry(r)
	exact = r.Symmetric && r.PatternSymmetric && r.Asymmetry == 0 && r.NonFinite == 0
	return string(b), r.Symmetric, exact, why
}
