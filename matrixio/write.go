package matrixio

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"

	"github.com/residua/residua/sparse"
)

// ErrNotSymmetric is returned by WriteMatrix when asked to write one triangle
// of a matrix that is not exactly (bit for bit) symmetric or skew-symmetric:
// the other triangle could not be restored from the file.
var ErrNotSymmetric = errors.New("matrixio: matrix is not exactly symmetric")

// WriteMatrix writes a as a Matrix Market coordinate file (Boisvert, Pozo,
// Remington, NIST, 1996), with field "integer" when every value is an
// integer of magnitude at most 2^53 (and none is negative zero), else
// "real". With sym General every stored entry is
// written; with Symmetric only the lower triangle and the diagonal, with the
// size line counting just those; with SkewSymmetric the strictly lower
// triangle (and any zero diagonal entries, so that the pattern survives).
// Entries go out row by row in column order. Each value is the shortest
// decimal that reads back to the same float64 (strconv 'g', -1), integral
// values as plain integers, so write→read is exact.
//
// WriteMatrix returns an error, having written nothing, if a holds NaN or an
// infinity (the format has no place for them), or if sym asks for one
// triangle of a matrix that is not square and exactly symmetric
// (ErrNotSymmetric). It panics if a is nil.
func WriteMatrix(w io.Writer, a *sparse.CSR, sym sparse.Symmetry) error {
	if a == nil {
		panic("matrixio: WriteMatrix of a nil matrix")
	}
	for p, v := range a.Val {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			r := sort.Search(a.Rows, func(r int) bool { return a.RowPtr[r+1] > p })
			return fmt.Errorf("matrixio: cannot write a(%d,%d) = %v: %w", r+1, a.ColIdx[p]+1, v, ErrNotFinite)
		}
	}
	count := a.NNZ()
	if sym != sparse.General {
		n, err := checkSymmetric(a, sym)
		if err != nil {
			return err
		}
		count = n
	}
	bw, ok := w.(*bufio.Writer)
	if !ok {
		bw = bufio.NewWriterSize(w, 1<<16)
	}
	field := "real "
	if allIntegral(a.Val) {
		field = "integer "
	}
	buf := make([]byte, 0, 128)
	buf = append(buf, "%%MatrixMarket matrix coordinate "...)
	buf = append(buf, field...)
	buf = append(buf, sym.String()...)
	buf = append(buf, '\n')
	buf = strconv.AppendInt(buf, int64(a.Rows), 10)
	buf = append(buf, ' ')
	buf = strconv.AppendInt(buf, int64(a.Cols), 10)
	buf = append(buf, ' ')
	buf = strconv.AppendInt(buf, int64(count), 10)
	buf = append(buf, '\n')
	if _, err := bw.Write(buf); err != nil {
		return err
	}
	for r := 0; r < a.Rows; r++ {
		for p := a.RowPtr[r]; p < a.RowPtr[r+1]; p++ {
			c := int(a.ColIdx[p])
			if sym != sparse.General && (c > r || (c == r && sym == sparse.SkewSymmetric && a.Val[p] != 0)) {
				continue
			}
			buf = strconv.AppendInt(buf[:0], int64(r+1), 10)
			buf = append(buf, ' ')
			buf = strconv.AppendInt(buf, int64(c+1), 10)
			buf = append(buf, ' ')
			buf = appendValue(buf, a.Val[p])
			buf = append(buf, '\n')
			if _, err := bw.Write(buf); err != nil {
				return err
			}
		}
	}
	return bw.Flush()
}

// checkSymmetric checks that a equals its transpose (sym Symmetric) or minus
// its transpose (SkewSymmetric) bit for bit, and returns the number of
// entries in the lower triangle with the diagonal.
func checkSymmetric(a *sparse.CSR, sym sparse.Symmetry) (int, error) {
	if a.Rows != a.Cols {
		return 0, fmt.Errorf("%w: %d×%d is not square", ErrNotSymmetric, a.Rows, a.Cols)
	}
	lower, upper := 0, 0
	for r := 0; r < a.Rows; r++ {
		for p := a.RowPtr[r]; p < a.RowPtr[r+1]; p++ {
			c := int(a.ColIdx[p])
			v := a.Val[p]
			switch {
			case c < r:
				lower++
			case c == r:
				lower++
				if sym == sparse.SkewSymmetric && v != 0 {
					return 0, fmt.Errorf("%w: skew-symmetric matrix with a(%d,%d) = %v on the diagonal", ErrNotSymmetric, r+1, r+1, v)
				}
			default:
				upper++
				want := v
				if sym == sparse.SkewSymmetric {
					want = -v
				}
				lo, hi := a.RowPtr[c], a.RowPtr[c+1]
				q := lo + sort.Search(hi-lo, func(k int) bool { return int(a.ColIdx[lo+k]) >= r })
				if q == hi || int(a.ColIdx[q]) != r {
					return 0, fmt.Errorf("%w: a(%d,%d) = %v but a(%d,%d) is not stored", ErrNotSymmetric, r+1, c+1, v, c+1, r+1)
				}
				if math.Float64bits(a.Val[q]) != math.Float64bits(want) {
					return 0, fmt.Errorf("%w: a(%d,%d) = %v but a(%d,%d) = %v", ErrNotSymmetric, r+1, c+1, v, c+1, r+1, a.Val[q])
				}
			}
		}
	}
	diag := lower
	for r := 0; r < a.Rows; r++ {
		lo, hi := a.RowPtr[r], a.RowPtr[r+1]
		q := lo + sort.Search(hi-lo, func(k int) bool { return int(a.ColIdx[lo+k]) >= r })
		if q < hi && int(a.ColIdx[q]) == r {
			diag--
		}
	}
	// diag now counts the strictly lower entries; each upper entry matched one.
	if diag != upper {
		return 0, fmt.Errorf("%w: %d entries below the diagonal but %d above", ErrNotSymmetric, diag, upper)
	}
	return lower, nil
}

// WriteVector writes x as a Matrix Market array general file of len(x)×1
// (field "integer" or "real" as for WriteMatrix), one value per line in the
// shortest form that reads back exactly.
// It returns an error, having written nothing, if x holds NaN or an infinity.
func WriteVector(w io.Writer, x []float64) error {
	return WriteColumns(w, [][]float64{x})
}

// WriteColumns writes the k columns cols, of n entries each, as one
// Matrix Market array general file of n×k: column after column, as the
// array format orders its values (Boisvert, Pozo and Remington, The Matrix
// Market Exchange Formats, NIST, 1996, §2), one value per line, field
// "integer" when every value is one and "real" otherwise, each value in
// the shortest form that reads back exactly. It returns an error, having
// written nothing, if a value is NaN or an infinity. It panics if the
// columns differ in length or there are none.
func WriteColumns(w io.Writer, cols [][]float64) error {
	if len(cols) == 0 {
		panic("matrixio: WriteColumns with no columns")
	}
	n, integral := len(cols[0]), true
	for j, c := range cols {
		if len(c) != n {
			panic(fmt.Sprintf("matrixio: WriteColumns: column %d has %d entries, column 1 has %d", j+1, len(c), n))
		}
		for i, v := range c {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				if len(cols) == 1 {
					return fmt.Errorf("matrixio: cannot write x(%d) = %v: %w", i+1, v, ErrNotFinite)
				}
				return fmt.Errorf("matrixio: cannot write x(%d,%d) = %v: %w", i+1, j+1, v, ErrNotFinite)
			}
		}
		integral = integral && allIntegral(c)
	}
	bw, ok := w.(*bufio.Writer)
	if !ok {
		bw = bufio.NewWriterSize(w, 1<<16)
	}
	buf := make([]byte, 0, 64)
	if integral {
		buf = append(buf, "%%MatrixMarket matrix array integer general\n"...)
	} else {
		buf = append(buf, "%%MatrixMarket matrix array real general\n"...)
	}
	buf = strconv.AppendInt(buf, int64(n), 10)
	buf = append(buf, ' ')
	buf = strconv.AppendInt(buf, int64(len(cols)), 10)
	buf = append(buf, '\n')
	if _, err := bw.Write(buf); err != nil {
		return err
	}
	for _, c := range cols {
		for _, v := range c {
			buf = appendValue(buf[:0], v)
			buf = append(buf, '\n')
			if _, err := bw.Write(buf); err != nil {
				return err
			}
		}
	}
	return bw.Flush()
}

// exactInt reports whether v is an integer that float64 and int64 both hold
// exactly (|v| ≤ 2^53) and is not negative zero, which an integer field
// cannot express.
func exactInt(v float64) bool {
	return v == math.Trunc(v) && math.Abs(v) <= 1<<53 && !(v == 0 && math.Signbit(v))
}

// allIntegral reports whether every value can be written in an integer
// field and read back to the same bits.
func allIntegral(vals []float64) bool {
	for _, v := range vals {
		if !exactInt(v) {
			return false
		}
	}
	return true
}

// appendValue writes v as an integer when it is one (exactInt), else as the
// shortest decimal that reads back to the same float64 (strconv 'g', -1).
func appendValue(buf []byte, v float64) []byte {
	if exactInt(v) {
		return strconv.AppendInt(buf, int64(v), 10)
	}
	return strconv.AppendFloat(buf, v, 'g', -1, 64)
}
