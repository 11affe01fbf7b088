package sparse

import (
	"fmt"
	"math"
)

// Report describes a matrix's structure and numerics, to judge before a
// solve whether a method can work on it (conjugate gradients needs a
// symmetric positive definite matrix; Jacobi needs a positive diagonal).
// Indices are 0-based; people read them 1-based, so printers add one. The
// JSON names are snake_case for `residua inspect --json`.
//
// Non-finite values (NaN, ±Inf) are counted in NonFinite and left out of
// every other floating-point figure, so that the report always encodes as
// JSON; a matrix with any is not reported symmetric.
type Report struct {
	Rows    int   `json:"rows"`
	Cols    int   `json:"cols"`
	Entries int   `json:"stored_entries"` // stored entries (after any symmetric expansion)
	Bytes   int64 `json:"csr_bytes"`      // memory of the CSR arrays, see CSR.Bytes

	NonFinite int     `json:"non_finite"` // entries that are NaN or ±Inf
	MaxAbs    float64 `json:"max_abs"`    // max |a(i,j)|, the norm the symmetry tolerance scales

	// Symmetry. Symmetric is true for a square matrix with
	// |a(i,j) − a(j,i)| ≤ SymmetryTol·MaxAbs for every pair (a missing entry
	// is zero). Asymmetry is max |a(i,j) − a(j,i)| / MaxAbs. WorstPair is the
	// pair that gives it, named by its stored entry a(i,j) (the first in row
	// order among equals), or nil when every pair is exactly equal or the
	// matrix is not square.
	Square           bool          `json:"square"`
	Symmetric        bool          `json:"symmetric"`
	SymmetryTol      float64       `json:"symmetry_tolerance"`
	Asymmetry        float64       `json:"asymmetry"`
	PatternSymmetric bool          `json:"pattern_symmetric"` // (i,j) stored exactly when (j,i) is
	WorstPair        *WorstPair    `json:"worst_pair,omitempty"`
	Diagonal         DiagonalStats `json:"diagonal"`

	// Diagonal dominance: row i is weakly dominant if
	// |a(i,i)| ≥ Σ_{j≠i} |a(i,j)|, strictly if >. Fractions of all rows.
	WeaklyDominant   float64 `json:"weakly_dominant_fraction"`
	StrictlyDominant float64 `json:"strictly_dominant_fraction"`

	// Bandwidth: the largest i − j over stored entries below the diagonal
	// (LowerBandwidth), the largest j − i above it (UpperBandwidth), and the
	// larger of the two (Bandwidth). Profile is the envelope size
	// Σ_i (i − f_i) with f_i the first column stored in row i if it is left
	// of the diagonal (George and Liu, Computer Solution of Large Sparse
	// Positive Definite Systems, 1981, ch. 4; the lower envelope, which is
	// the whole one for a symmetric pattern).
	LowerBandwidth int   `json:"lower_bandwidth"`
	UpperBandwidth int   `json:"upper_bandwidth"`
	Bandwidth      int   `json:"bandwidth"`
	Profile        int64 `json:"profile"`

	RowLength RowLengthStats `json:"row_length"`

	// Gershgorin interval: every eigenvalue λ of a square matrix has
	// GershgorinLow ≤ Re λ ≤ GershgorinHigh, the extremes of
	// a(i,i) ∓ Σ_{j≠i} |a(i,j)| over the rows (Golub and Van Loan, Matrix
	// Computations, 4th ed., §7.2.1). Zero for a rectangular matrix. A
	// positive GershgorinLow with a symmetric matrix proves it is positive
	// definite.
	GershgorinLow  float64 `json:"gershgorin_low"`
	GershgorinHigh float64 `json:"gershgorin_high"`
}

// WorstPair is the pair of transposed entries that differ the most.
type WorstPair struct {
	Row int     `json:"row"` // i, 0-based
	Col int     `json:"col"` // j, 0-based
	Aij float64 `json:"a_ij"`
	Aji float64 `json:"a_ji"`
}

// DiagonalStats describes the diagonal a(i,i), 0 ≤ i < min(Rows, Cols);
// a missing diagonal entry counts as zero in Min, Max and Zero.
type DiagonalStats struct {
	Min      float64 `json:"min"`
	Max      float64 `json:"max"`
	Zero     int     `json:"zero"`     // zero, stored or missing
	Negative int     `json:"negative"` // below zero
	Missing  int     `json:"missing"`  // not stored at all
	Positive bool    `json:"positive"` // every diagonal entry > 0
}

// RowLengthStats describes the number of stored entries per row. Std is the
// population standard deviation.
type RowLengthStats struct {
	Min   int     `json:"min"`
	Max   int     `json:"max"`
	Mean  float64 `json:"mean"`
	Std   float64 `json:"std"`
	Empty int     `json:"empty"` // rows with no stored entry
}

// SymmetryTolerance is the symmetry tolerance relative to max|a(i,j)| that
// residua applies everywhere it calls a matrix symmetric (inspect's default,
// the check before conjugate gradients, the server's upload report):
// |a(i,j) − a(j,i)| ≤ 1e-12·max|a| accepts a matrix such as AᵀA formed in
// floating point (common practice: a few hundred ulps).
const SymmetryTolerance = 1e-12

// Analyze returns the Report of a. symTol is the symmetry tolerance
// relative to max|a(i,j)|: 0 asks for exact equality, and something like
// 1e-12 (common practice: a few hundred ulps) accepts a matrix such as AᵀA
// formed in floating point. It reads a in two sweeps (one for the
// symmetry, with a binary search for each transposed entry) and allocates
// nothing proportional to its size. Panics if symTol is negative or NaN.
func Analyze(a *CSR, symTol float64) Report {
	if !(symTol >= 0) {
		panic(fmt.Sprintf("sparse: Analyze: symmetry tolerance %v is not ≥ 0", symTol))
	}
	r := Report{
		Rows: a.Rows, Cols: a.Cols, Entries: a.NNZ(), Bytes: a.Bytes(),
		Square: a.Rows == a.Cols, SymmetryTol: symTol,
	}
	nd := min(a.Rows, a.Cols)
	r.Diagonal.Positive = nd > 0
	weak, strict := 0, 0
	var sumLen, sumLen2 float64
	r.RowLength.Min = math.MaxInt
	if a.Rows == 0 {
		r.RowLength.Min = 0
	}
	first := true
	for i := 0; i < a.Rows; i++ {
		lo, hi := a.RowPtr[i], a.RowPtr[i+1]
		n := hi - lo
		r.RowLength.Min = min(r.RowLength.Min, n)
		r.RowLength.Max = max(r.RowLength.Max, n)
		sumLen += float64(n)
		sumLen2 += float64(n) * float64(n)
		if n == 0 {
			r.RowLength.Empty++
		}
		diag, off := 0.0, 0.0
		hasDiag := false
		for p := lo; p < hi; p++ {
			j, v := int(a.ColIdx[p]), a.Val[p]
			if math.IsNaN(v) || math.IsInf(v, 0) {
				r.NonFinite++
				continue
			}
			r.MaxAbs = max(r.MaxAbs, math.Abs(v))
			switch {
			case j == i:
				diag, hasDiag = v, true
			case j < i:
				off += math.Abs(v)
				r.LowerBandwidth = max(r.LowerBandwidth, i-j)
			default:
				off += math.Abs(v)
				r.UpperBandwidth = max(r.UpperBandwidth, j-i)
			}
		}
		if lo < hi && int(a.ColIdx[lo]) < i {
			r.Profile += int64(i - int(a.ColIdx[lo]))
		}
		if ad := math.Abs(diag); ad >= off {
			weak++
			if ad > off {
				strict++
			}
		}
		if i < nd {
			if !hasDiag && a.find(i, i) < 0 {
				r.Diagonal.Missing++
			}
			if first {
				r.Diagonal.Min, r.Diagonal.Max = diag, diag
				first = false
			}
			r.Diagonal.Min = min(r.Diagonal.Min, diag)
			r.Diagonal.Max = max(r.Diagonal.Max, diag)
			switch {
			case diag == 0:
				r.Diagonal.Zero++
			case diag < 0:
				r.Diagonal.Negative++
			}
			if !(diag > 0) {
				r.Diagonal.Positive = false
			}
		}
		if r.Square {
			lowG, highG := diag-off, diag+off
			if i == 0 {
				r.GershgorinLow, r.GershgorinHigh = lowG, highG
			}
			r.GershgorinLow = min(r.GershgorinLow, lowG)
			r.GershgorinHigh = max(r.GershgorinHigh, highG)
		}
	}
	r.Bandwidth = max(r.LowerBandwidth, r.UpperBandwidth)
	if a.Rows > 0 {
		m := sumLen / float64(a.Rows)
		r.RowLength.Mean = m
		r.RowLength.Std = math.Sqrt(max(0, sumLen2/float64(a.Rows)-m*m))
		r.WeaklyDominant = float64(weak) / float64(a.Rows)
		r.StrictlyDominant = float64(strict) / float64(a.Rows)
	}
	if r.Square {
		a.symmetry(&r)
	}
	return r
}

// symmetry fills the symmetry fields of r (square a only): for each stored
// a(i,j) it finds a(j,i) by binary search in row j.
func (a *CSR) symmetry(r *Report) {
	r.PatternSymmetric = true
	worst := 0.0
	for i := 0; i < a.Rows; i++ {
		for p := a.RowPtr[i]; p < a.RowPtr[i+1]; p++ {
			j := int(a.ColIdx[p])
			if j == i {
				continue
			}
			aij, aji := a.Val[p], 0.0
			if q := a.find(j, i); q >= 0 {
				aji = a.Val[q]
			} else {
				r.PatternSymmetric = false
			}
			d := math.Abs(aij - aji)
			if math.IsNaN(d) || math.IsInf(d, 0) {
				continue // counted in NonFinite
			}
			if d > worst {
				worst = d
				r.WorstPair = &WorstPair{Row: i, Col: j, Aij: aij, Aji: aji}
			}
		}
	}
	if r.MaxAbs > 0 {
		r.Asymmetry = worst / r.MaxAbs
	}
	r.Symmetric = r.NonFinite == 0 && worst <= r.SymmetryTol*r.MaxAbs
}
