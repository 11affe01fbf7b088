package matrixio

import (
	"crypto/sha256"
	"encoding/hex"
	"io"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/residua/residua/internal/shared"
)

// TestSharedChecksums compares each shared file's SHA-256 (of the bytes as
// stored, compressed or not) with the sha256 column of MANIFEST.tsv, which
// was recorded when the file was fetched from its source repository (the
// manifest's source_repo, source_path and source_commit columns). A file
// that changed since is not the matrix the other checks describe.
func TestSharedChecksums(t *testing.T) {
	dir := shared.Matrices(t)
	for _, e := range shared.Manifest(t) {
		t.Run(e.File, func(t *testing.T) {
			if len(e.SHA256) != 64 {
				t.Fatalf("manifest sha256 %q is not 64 hex digits", e.SHA256)
			}
			f, err := os.Open(e.Path(dir))
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			h := sha256.New()
			if _, err := io.Copy(h, f); err != nil {
				t.Fatal(err)
			}
			if got := hex.EncodeToString(h.Sum(nil)); got != e.SHA256 {
				t.Errorf("sha256 %s, manifest says %s", got, e.SHA256)
			}
		})
	}
}

// sharedValues is a table of values of shared matrices computed
// independently of residua, with SciPy's Matrix Market reader
// (scipy.io.mmread; Debian's python3-scipy 1.10.1 and python3-numpy
// 1.24.2) by this script, run in ../shared/matrices on 2026-12-02:
//
//	import sys, numpy as np, scipy, scipy.io, scipy.sparse as sp
//	files = ["bcsstk01.mtx","nos4.mtx","bcsstm05.mtx","west0479.mtx","well1033.mtx","plat362.mtx","Chem97ZtZ.mtx","orsirr_1.mtx","cavity14.mtx.gz","bcsstk14.mtx","blckhole.mtx"]
//	print("# scipy", scipy.__version__, "numpy", np.__version__)
//	for f in files:
//	    a = sp.csr_matrix(scipy.io.mmread(f))
//	    a.sum_duplicates()
//	    m, n = a.shape
//	    rs = np.asarray(a.sum(axis=1)).ravel()
//	    d = a.diagonal()
//	    rows = [0, m//2, m-1]
//	    # the first stored entry of row m-1
//	    r = m-1
//	    cols = a.indices[a.indptr[r]:a.indptr[r+1]]
//	    j = int(cols[0])
//	    print('{file: "%s", nnz: %d, sum: %r, absSum: %r, trace: %r, rows: [3]int{%d, %d, %d}, rowSums: [3]float64{%r, %r, %r}, last: [3]float64{%d, %d, %r}},' % (
//	        f, a.nnz, float(a.sum()), float(abs(a).sum()), float(d.sum()), rows[0], rows[1], rows[2], float(rs[rows[0]]), float(rs[rows[1]]), float(rs[rows[2]]), r, j, float(a[r, j])))
//
// For each matrix, the full matrix (symmetric files expanded) in CSR form:
// stored entries (nnz), the sum of all entries, the sum of their absolute
// values, the trace, three rows and their sums, and the first stored entry
// (row, column, value) of the last row, all 0-based.
var sharedValues = []struct {
	file               string
	nnz                int
	sum, absSum, trace float64
	rows               [3]int
	rowSums            [3]float64
	last               [3]float64 // row, column, value
}{
	{file: "bcsstk01.mtx", nnz: 400, sum: 46625043418.15753, absSum: 48615456508.54721, trace: 32433076216.79132, rows: [3]int{0, 24, 47}, rowSums: [3]float64{6166666.666661469, 861111.11111473, 476722217.36889696}, last: [3]float64{47, 12, 275828.470683}},
	{file: "nos4.mtx", nnz: 594, sum: 1.357770879999998, absSum: 72.6773984, trace: 33.79764672000001, rows: [3]int{0, 50, 99}, rowSums: [3]float64{3.999999997894577e-09, 3.999999997894577e-09, 0.0}, last: [3]float64{99, 89, -0.2}},
	{file: "bcsstm05.mtx", nnz: 153, sum: 47.5473594666768, absSum: 47.5473594666768, trace: 47.5473594666768, rows: [3]int{0, 76, 152}, rowSums: [3]float64{0.162135379237, 0.28247516899, 0.841141247803}, last: [3]float64{152, 152, 0.841141247803}},
	{file: "west0479.mtx", nnz: 1910, sum: -1750540.0748997675, absSum: 1902029.139758184, trace: 63.69856246999999, rows: [3]int{0, 239, 478}, rowSums: [3]float64{1.0, -0.794766636, 1.83890061119}, last: [3]float64{478, 90, 1.0}},
	{file: "well1033.mtx", nnz: 4732, sum: 537.0853381819485, absSum: 881.6746471255228, trace: 0.241823701335, rows: [3]int{0, 516, 1032}, rowSums: [3]float64{-0.1903731529, 0.53717846168, 0.33119539351000005}, last: [3]float64{1032, 0, 0.1889822365}},
	{file: "plat362.mtx", nnz: 5786, sum: 5.70238996136366, absSum: 198.8094507006533, trace: 66.46077628886385, rows: [3]int{0, 181, 361}, rowSums: [3]float64{-0.0007138962373790941, 0.003403049851062861, 0.09350337652013908}, last: [3]float64{361, 122, 0.007804081515006958}},
	{file: "Chem97ZtZ.mtx", nnz: 7361, sum: 180461.58515999996, absSum: 180461.58515999996, trace: 118417.58516, rows: [3]int{0, 1270, 2540}, rowSums: [3]float64{30.419696000000002, 116.419696, 1233.0238}, last: [3]float64{2540, 2376, 9.0}},
	{file: "orsirr_1.mtx", nnz: 6858, sum: -10626.004746799634, absSum: 60166044.162053205, trace: -30088335.083400004, rows: [3]int{0, 515, 1029}, rowSums: [3]float64{-5.0, -19.99997141999613, -24.99999996999395}, last: [3]float64{1029, 993, 83333.3333}},
	{file: "cavity14.mtx.gz", nnz: 76367, sum: 672.6979992281443, absSum: 43996.375975576346, trace: 10472.466666665483, rows: [3]int{0, 1298, 2596}, rowSums: [3]float64{0.5357222412551117, 1.0116605451074088, 0.02592592592592277}, last: [3]float64{2596, 2406, -0.0111111111111089}},
	{file: "bcsstk14.mtx", nnz: 63454, sum: 1651045840980.5952, absSum: 2045193708996.4805, trace: 1146943460831.9614, rows: [3]int{0, 903, 1805}, rowSums: [3]float64{-872459.3038886737, 7218227268.845565, 800896149.0252956}, last: [3]float64{1805, 1782, 124987.6919693}},
	{file: "blckhole.mtx", nnz: 14872, sum: 14872.0, absSum: 14872.0, trace: 2132.0, rows: [3]int{0, 1066, 2131}, rowSums: [3]float64{6.0, 7.0, 6.0}, last: [3]float64{2131, 2085, 1.0}},
}

// TestSharedValues checks values, not only counts, against sharedValues.
// A single entry must be bit-identical: the file's decimal text has one
// correctly rounded float64 (IEEE 754 §5.12.2; Go's strconv.ParseFloat and
// the C library's strtod behind NumPy both round correctly), and Python's
// repr prints the shortest decimal that reads back to it. Sums are added in
// another order here than in NumPy (pairwise), so they may differ by the
// rounding of a sum of k terms, at most γ_k·Σ|terms| with γ_k = k·u/(1 − k·u)
// (Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., §4.2),
// allowed twice over (both sides round). A doubled diagonal, a lost mirror
// entry of a symmetric file or a sign dropped from a skew file moves a row
// sum or the trace by far more.
func TestSharedValues(t *testing.T) {
	dir := shared.Matrices(t)
	gamma := func(k int) float64 { u := 0x1p-53; return float64(k) * u / (1 - float64(k)*u) }
	for _, want := range sharedValues {
		t.Run(want.file, func(t *testing.T) {
			a, _, err := ReadMatrixFile(filepath.Join(dir, want.file), nil)
			if err != nil {
				t.Fatal(err)
			}
			if a.NNZ() != want.nnz {
				t.Errorf("%d stored entries, SciPy %d", a.NNZ(), want.nnz)
			}
			var sum, abs, trace float64
			for i := range a.Rows {
				for k := a.RowPtr[i]; k < a.RowPtr[i+1]; k++ {
					v := a.Val[k]
					sum += v
					abs += math.Abs(v)
					if int(a.ColIdx[k]) == i {
						trace += v
					}
				}
			}
			tol := 2 * gamma(a.NNZ()) * want.absSum
			for _, c := range []struct {
				name      string
				got, want float64
			}{{"sum", sum, want.sum}, {"sum of |a_ij|", abs, want.absSum}, {"trace", trace, want.trace}} {
				if math.Abs(c.got-c.want) > tol {
					t.Errorf("%s %.17g, SciPy %.17g (tolerance %.2g)", c.name, c.got, c.want, tol)
				}
			}
			for k, i := range want.rows {
				var s, sa float64
				for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
					s += a.Val[p]
					sa += math.Abs(a.Val[p])
				}
				if tol := 2 * gamma(a.RowPtr[i+1]-a.RowPtr[i]) * sa; math.Abs(s-want.rowSums[k]) > tol {
					t.Errorf("row %d sums to %.17g, SciPy %.17g (tolerance %.2g)", i, s, want.rowSums[k], tol)
				}
			}
			i, j := int(want.last[0]), int(want.last[1])
			if got := a.At(i, j); math.Float64bits(got) != math.Float64bits(want.last[2]) {
				t.Errorf("a(%d,%d) = %.17g, SciPy %.17g", i, j, got, want.last[2])
			}
		})
	}
}
