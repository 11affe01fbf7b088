package mutate

// Mutants is the documented list of planted bugs. The first four are the
// survivors of issue 17's first mutation run; the others are bugs of the
// kinds this code base has had or could easily have: off-by-one limits,
// forgotten factors, checks bypassed, a result field filled from the wrong
// source. Each names the packages whose tests must catch it. TESTING.md
// lists them with the last run's verdicts.
var Mutants = []Mutant{
	{
		Name:     "api-solution-truncated",
		Bug:      "the server's solution stream stops after the first 131072 entries (issue 17, survivor 1)",
		Edits:    []Edit{{File: "api/handlers.go", Old: "return wire.ChunkVector(x, per, func(off int", New: "return wire.ChunkVector(x[:min(len(x), 131072)], per, func(off int"}},
		Packages: []string{"./client", "./api"},
	},
	{
		Name:     "matrixio-coordinate-short-accepted",
		Bug:      "a coordinate file with fewer entries than its size line is accepted; the check is kept for arrays only (issue 17, survivor 2)",
		Edits:    []Edit{{File: "matrixio/read.go", Old: "\tif d.entries < d.hd.entries {", New: "\tif d.hd.array && d.entries < d.hd.entries {"}},
		Packages: []string{"./matrixio"},
	},
	{
		Name:     "web-tolerance-as-residual",
		Bug:      "the watch page shows the tolerance where the relative residual belongs (issue 17, survivor 3)",
		Edits:    []Edit{{File: "web/static/app.js", Old: "let res = sci(job.relative_residual);", New: "let res = sci(job.tolerance);"}},
		Packages: []string{"./web"},
		Needs:    []string{"chromium"},
	},
	{
		Name:     "krylov-colscale-ignores-damping",
		Bug:      "column scaling D = 1/‖a_j‖ instead of 1/√(‖a_j‖² + λ²) (issue 17, survivor 4)",
		Edits:    []Edit{{File: "krylov/colscale.go", Old: "d[j] = 1 / math.Sqrt(c*c+lam2)", New: "d[j] = 1 / c"}},
		Packages: []string{"./krylov"},
	},
	{
		Name:     "sparse-column-norms-squared",
		Bug:      "ColumnNorms returns the squared norms (the square root forgotten)",
		Edits:    []Edit{{File: "sparse/matrix.go", Old: "\t\tdst[j] = math.Sqrt(dst[j])\n", New: "\t\tdst[j] = math.Abs(dst[j])\n"}},
		Packages: []string{"./sparse", "./krylov"},
	},
	{
		Name:     "sparse-validate-duplicate-columns",
		Bug:      "Validate accepts a repeated column in a row (strictly increasing weakened to non-decreasing)",
		Edits:    []Edit{{File: "sparse/csr.go", Old: "if j <= prev {", New: "if j < prev {"}},
		Packages: []string{"./sparse"},
	},
	{
		Name: "sparse-symmetric-diagonal-doubled",
		Bug:  "symmetric assembly mirrors the diagonal too, so every diagonal entry is stored twice and summed",
		Edits: []Edit{
			{File: "sparse/build.go", Old: "if c := t.J[k]; mirror && r != c {", New: "if c := t.J[k]; mirror {"},
			{File: "sparse/build.go", Old: "mirror && r != c && uint32(c-lo) < n", New: "mirror && uint32(c-lo) < n", Count: 2},
		},
		Packages: []string{"./sparse", "./matrixio"},
	},
	{
		Name:     "matrixio-skew-array-not-negated",
		Bug:      "a skew-symmetric array file's upper triangle is filled without the sign change",
		Edits:    []Edit{{File: "matrixio/read.go", Old: "\t\t\t\tif skew {\n\t\t\t\t\tv = -v\n\t\t\t\t}\n\t\t\t\tfull[c*n+r] = v", New: "\t\t\t\tfull[c*n+r] = v"}},
		Packages: []string{"./matrixio"},
	},
	{
		Name:     "matrixio-index-one-past-the-end",
		Bug:      "an index one past the last row or column is accepted (off by one in the range check)",
		Edits:    []Edit{{File: "matrixio/parse.go", Old: "if n < 1 || n > limit {", New: "if n < 1 || n > limit+1 {"}},
		Packages: []string{"./matrixio"},
	},
	{
		Name:     "matrixio-write-15-digits",
		Bug:      "the writer prints 15 significant digits instead of the shortest exact form, so write→read is not exact",
		Edits:    []Edit{{File: "matrixio/write.go", Old: "strconv.AppendFloat(buf, v, 'g', -1, 64)", New: "strconv.AppendFloat(buf, v, 'g', 15, 64)"}},
		Packages: []string{"./matrixio"},
	},
	{
		Name:     "krylov-cg-count-plus-one",
		Bug:      "CG reports one iteration more than it ran",
		Edits:    []Edit{{File: "krylov/cg.go", Old: "res.Iterations = st.iter", New: "res.Iterations = st.iter + 1"}},
		Packages: []string{"./krylov"},
	},
	{
		Name:     "krylov-cg-indefinite-unnoticed",
		Bug:      "CG's curvature test lets pᵀAp ≤ 0 through (only NaN and +Inf are refused)",
		Edits:    []Edit{{File: "krylov/cg.go", Old: "if !(pq > 0) || math.IsInf(pq, 1) {", New: "if math.IsNaN(pq) || math.IsInf(pq, 1) {"}},
		Packages: []string{"./krylov"},
	},
	{
		Name:     "precond-jacobi-not-inverted",
		Bug:      "Jacobi multiplies by the diagonal instead of its inverse",
		Edits:    []Edit{{File: "precond/jacobi.go", Old: "\t\td[i] = 1 / v\n", New: "\t\td[i] = v\n"}},
		Packages: []string{"./precond"},
	},
	{
		Name:     "precond-ic0-pivot-sign",
		Bug:      "IC(0) adds the row's update to the pivot instead of subtracting it",
		Edits:    []Edit{{File: "precond/ic0.go", Old: "\t\t\tdi -= u * l\n", New: "\t\t\tdi += u * l\n"}},
		Packages: []string{"./precond"},
	},
	{
		Name:     "precond-ic0-shift-not-applied",
		Bug:      "IC(0) retries with a shift but factors the unshifted matrix",
		Edits:    []Edit{{File: "precond/ic0.go", Old: "\t\tdi += alpha * di\n", New: "\n"}},
		Packages: []string{"./precond"},
	},
	{
		Name:     "solve-negative-tolerance-accepted",
		Bug:      "Request.Validate lets a negative tolerance or damping through (only ±Inf refused)",
		Edits:    []Edit{{File: "solve/request.go", Old: "if !(f.v >= 0) || math.IsInf(f.v, 0) {", New: "if math.IsInf(f.v, 0) {"}},
		Packages: []string{"./solve"},
	},
	{
		Name:     "solve-summary-iterations-from-products",
		Bug:      "the Summary's iteration count is filled from the product count",
		Edits:    []Edit{{File: "solve/run.go", Old: "sum.Iterations = r.Iterations", New: "sum.Iterations = r.Products"}},
		Packages: []string{"./solve"},
	},
	{
		Name:     "wire-checksum-ignored",
		Bug:      "the receiver never compares the vector's SHA-256 with the sender's",
		Edits:    []Edit{{File: "wire/vector.go", Old: "sum != \"\" && got != sum", New: "false && got != sum"}},
		Packages: []string{"./wire", "./client"},
	},
	{
		Name:     "wire-length-unchecked",
		Bug:      "the receiver accepts a last chunk before all announced entries arrived",
		Edits:    []Edit{{File: "wire/vector.go", Old: "if int64(len(a.x)) != a.length {", New: "if false {"}},
		Packages: []string{"./wire", "./client"},
	},
	{
		Name:     "api-upload-limit-doubled",
		Bug:      "the server's upload byte limit lets twice the configured size through",
		Edits:    []Edit{{File: "api/upload.go", Old: "if c.n > c.limit {", New: "if c.n > 2*c.limit {"}},
		Packages: []string{"./api"},
	},
	{
		Name:     "client-solution-to-first-rhs",
		Bug:      "the client stores every right-hand side's solution in the first slot",
		Edits:    []Edit{{File: "client/solve.go", Old: "\t\to.X[k] = o.chunks[k].Vector()\n", New: "\t\to.X[0] = o.chunks[k].Vector()\n"}},
		Packages: []string{"./client"},
	},
}
