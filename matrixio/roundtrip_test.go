package matrixio

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/residua/residua/sparse"
)

// awkward returns a value that tests the exactness of the writer: subnormals,
// the extremes of float64 (IEEE 754 binary64: largest finite, smallest
// normal and subnormal), negative zero, integers beyond 2^53, and ordinary
// random values.
func awkward(rng *rand.Rand) float64 {
	switch rng.IntN(12) {
	case 0:
		return math.SmallestNonzeroFloat64 * float64(1+rng.IntN(1000))
	case 1:
		return -math.MaxFloat64
	case 2:
		return math.MaxFloat64
	case 3:
		return math.Copysign(0, -1)
	case 4:
		return 0x1p-1022 // smallest normal
	case 5:
		return math.Nextafter(1, 2)
	case 6:
		return float64(1<<53 + 2*rng.IntN(1000))
	case 7:
		return math.Float64frombits(rng.Uint64() &^ (0x7ff << 52)) // random subnormal or zero
	case 8:
		return 1 / 3.0
	default:
		return math.Ldexp(rng.NormFloat64(), rng.IntN(2000)-1000)
	}
}

// randomCSR builds an m×n matrix with about density·m·n awkward entries;
// symmetric ones mirror each value exactly.
func randomCSR(t *testing.T, rng *rand.Rand, m, n int, density float64, sym sparse.Symmetry) *sparse.CSR {
	t.Helper()
	var ii, jj []int32
	var vv []float64
	for r := 0; r < m; r++ {
		for c := 0; c < n; c++ {
			if sym != sparse.General && c > r {
				break
			}
			if sym == sparse.SkewSymmetric && c == r {
				continue
			}
			if rng.Float64() < density {
				ii, jj, vv = append(ii, int32(r)), append(jj, int32(c)), append(vv, awkward(rng))
			}
		}
	}
	a, _, err := sparse.FromTriplets(m, n, ii, jj, vv, sparse.BuildOptions{Symmetry: sym})
	if err != nil {
		t.Fatal(err)
	}
	return a
}

// Write→read must give back the same bits, for general, symmetric and
// skew-symmetric storage: strconv.FormatFloat(v, 'g', -1, 64) is the
// shortest decimal that strconv.ParseFloat maps back to v (Go's strconv
// documentation), and the fast path of parseReal must agree with it.
func TestRandomRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(2026, 12))
	for trial := 0; trial < 60; trial++ {
		sym := []sparse.Symmetry{sparse.General, sparse.Symmetric, sparse.SkewSymmetric}[trial%3]
		m := 1 + rng.IntN(40)
		n := m
		if sym == sparse.General {
			n = 1 + rng.IntN(40)
		}
		a := randomCSR(t, rng, m, n, rng.Float64(), sym)
		name := fmt.Sprintf("%v-%d×%d-%d", sym, m, n, trial)
		var buf bytes.Buffer
		if err := WriteMatrix(&buf, a, sym); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		b, info, err := ReadMatrix(&buf, nil)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		sameCSR(t, name, b, a)
		if info.Header.Symmetry != sym.String() {
			t.Errorf("%s: header says %s", name, info.Header.Symmetry)
		}
		x := make([]float64, m)
		for i := range x {
			x[i] = awkward(rng)
		}
		buf.Reset()
		if err := WriteVector(&buf, x); err != nil {
			t.Fatal(err)
		}
		y, _, err := ReadVector(&buf, nil)
		if err != nil {
			t.Fatal(err)
		}
		sameVec(t, name+" vector", y, x)
	}
}

// parseReal must return exactly what strconv.ParseFloat returns (the
// correctly rounded double, per Go's strconv documentation) on every decimal
// form, fast path or not.
func TestParseRealMatchesStrconv(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	fixed := []string{"0", "-0", "+0", "0.0", "1", "-1", "1.5", ".5", "5.", "1e0", "1E+22", "1e23", "9007199254740993",
		"123456789012345678901234567890", "0.1", "0.30000000000000004", "2.2250738585072014e-308",
		"4.9e-324", "1e-400", "1.7976931348623157e308", "0.000001", "123.456e-5", "-7.0000000000000000001"}
	hd := &header{rows: 1, cols: 1, field: fieldReal}
	check := func(s string) {
		want, werr := parseFloatStd(s)
		got, gerr := parseReal([]byte(s))
		if (werr != nil) != (gerr != nil) || math.Float64bits(got) != math.Float64bits(want) {
			t.Fatalf("parseReal(%q) = %v (%v), strconv says %v (%v)", s, got, gerr, want, werr)
		}
		// The line fast path either declines or agrees.
		if _, _, v, _, ok := fastEntry(hd, []byte("1 1 "+s+"\n"), 0); ok && (werr != nil || math.Float64bits(v) != math.Float64bits(want)) {
			t.Fatalf("fastEntry of %q = %v, strconv says %v (%v)", s, v, want, werr)
		}
	}
	for _, s := range fixed {
		check(s)
	}
	for k := 0; k < 200000; k++ {
		var s string
		switch k % 4 {
		case 0:
			s = fmt.Sprintf("%.*e", rng.IntN(20), rng.NormFloat64()*math.Pow(10, float64(rng.IntN(40)-20)))
		case 1:
			s = fmt.Sprintf("%.*f", rng.IntN(18), rng.NormFloat64()*math.Pow(10, float64(rng.IntN(12)-6)))
		case 2:
			s = fmt.Sprint(math.Float64frombits(rng.Uint64() &^ (1 << 62))) // finite, any exponent
		default:
			s = fmt.Sprintf("%d", rng.Int64()>>rng.IntN(64))
		}
		check(s)
	}
	// D exponents (Fortran) read as E exponents.
	if v, err := parseReal([]byte("-1.25D+02")); err != nil || v != -125 {
		t.Errorf("-1.25D+02 = %v, %v", v, err)
	}
}

func parseFloatStd(s string) (float64, error) { return strconv.ParseFloat(s, 64) }

// Integer files hold any int64 (the format paper's "integer" field); values
// beyond 2^53 round to the nearest double, as float64(int64) does in Go.
func TestIntegerField(t *testing.T) {
	text := "%%MatrixMarket matrix coordinate integer general\n4 1 4\n1 1 -9223372036854775808\n2 1 9223372036854775807\n3 1 9007199254740993\n4 1 -0\n"
	a, _, err := ReadMatrix(strings.NewReader(text), nil)
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{float64(math.MinInt64), float64(math.MaxInt64), float64(int64(9007199254740993))}
	for k, w := range want {
		if a.Val[k] != w {
			t.Errorf("value %d = %v, want %v", k, a.Val[k], w)
		}
	}
	// An integer has no negative zero: "-0" in an integer field is 0.
	if a.Val[3] != 0 || math.Signbit(a.Val[3]) {
		t.Errorf("integer -0 read as %v (sign bit %v)", a.Val[3], math.Signbit(a.Val[3]))
	}
	b, _, err := ReadMatrix(strings.NewReader("%%MatrixMarket matrix coordinate integer general\n1 1 1\n1  1  -0\n"), nil)
	if err != nil || math.Signbit(b.Val[0]) {
		t.Errorf("integer -0 on the general path: %v, %v", b.Val, err)
	}
}

// WriteMatrix refuses what it cannot write exactly, and writes nothing then.
func TestWriteRefuses(t *testing.T) {
	a, _, err := sparse.FromTriplets(2, 2, []int32{0, 1}, []int32{1, 0}, []float64{1, 2}, sparse.BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteMatrix(&buf, a, sparse.Symmetric); !errors.Is(err, ErrNotSymmetric) || buf.Len() != 0 {
		t.Errorf("non-symmetric as symmetric: %v, %d bytes written", err, buf.Len())
	}
	if err := WriteMatrix(&buf, a, sparse.SkewSymmetric); !errors.Is(err, ErrNotSymmetric) || buf.Len() != 0 {
		t.Errorf("non-skew as skew: %v, %d bytes written", err, buf.Len())
	}
	a.Val[0] = math.NaN()
	if err := WriteMatrix(&buf, a, sparse.General); !errors.Is(err, ErrNotFinite) || buf.Len() != 0 {
		t.Errorf("NaN: %v, %d bytes written", err, buf.Len())
	}
	if err := WriteVector(&buf, []float64{1, math.Inf(1)}); !errors.Is(err, ErrNotFinite) || buf.Len() != 0 {
		t.Errorf("Inf vector: %v, %d bytes written", err, buf.Len())
	}
}

// The file writers leave either the old file or the whole new one: a write
// that fails midway (here: a NaN found before anything is written, and a
// matrix that is not symmetric) leaves the previous file untouched and no
// temporary file behind. A .gz path is compressed and reads back.
func TestWriteFileAtomic(t *testing.T) {
	dir := t.TempDir()
	rng := rand.New(rand.NewPCG(5, 6))
	a := randomCSR(t, rng, 30, 30, 0.2, sparse.Symmetric)
	for _, name := range []string{"a.mtx", "a.mtx.gz"} {
		path := filepath.Join(dir, name)
		if err := WriteMatrixFile(path, a, sparse.Symmetric); err != nil {
			t.Fatal(err)
		}
		before, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		b, _, err := ReadMatrixFile(path, nil)
		if err != nil {
			t.Fatal(err)
		}
		sameCSR(t, name, b, a)
		bad := randomCSR(t, rng, 30, 30, 0.2, sparse.General)
		if err := WriteMatrixFile(path, bad, sparse.Symmetric); err == nil {
			t.Fatal("wrote a non-symmetric matrix as symmetric")
		}
		after, err := os.ReadFile(path)
		if err != nil || !bytes.Equal(after, before) {
			t.Errorf("%s changed by a failed write (%v)", name, err)
		}
	}
	x := []float64{1, -0.5, math.SmallestNonzeroFloat64}
	vp := filepath.Join(dir, "x.mtx")
	if err := WriteVectorFile(vp, x); err != nil {
		t.Fatal(err)
	}
	y, _, err := ReadVectorFile(vp, nil)
	if err != nil {
		t.Fatal(err)
	}
	sameVec(t, "vector file", y, x)
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if strings.Contains(e.Name(), ".tmp-") {
			t.Errorf("temporary file %s left behind", e.Name())
		}
	}
}

// The 5×5 example of the format paper (Boisvert, Pozo, Remington, NIST
// 1996, §3; text from memory): read it, then write it and check the exact
// text: entries row by row, shortest decimals.
func TestPaperExample(t *testing.T) {
	const text = `%%MatrixMarket matrix coordinate real general
%=================================================================================
%
% This ASCII file represents a sparse MxN matrix with L
% nonzeros in the following Matrix Market format:
%
%=================================================================================
5  5  8
    1     1   1.000e+00
    2     2   1.050e+01
    3     3   1.500e-02
    1     4   6.000e+00
    4     2   2.505e+02
    4     4  -2.800e+02
    4     5   3.332e+01
    5     5   1.200e+01
`
	a, info, err := ReadMatrix(strings.NewReader(text), nil)
	if err != nil {
		t.Fatal(err)
	}
	if info.Entries != 8 || len(info.Comments) != 6 {
		t.Errorf("%d entries, %d comments", info.Entries, len(info.Comments))
	}
	var buf bytes.Buffer
	if err := WriteMatrix(&buf, a, sparse.General); err != nil {
		t.Fatal(err)
	}
	const want = `%%MatrixMarket matrix coordinate real general
5 5 8
1 1 1
1 4 6
2 2 10.5
3 3 0.015
4 2 250.5
4 4 -280
4 5 33.32
5 5 12
`
	if buf.String() != want {
		t.Errorf("wrote\n%s\nwant\n%s", buf.String(), want)
	}
}

// Integer-valued data are written with the integer field and plain integer
// tokens (the paper's "integer" field), up to 2^53 in magnitude; negative
// zero forces the real field, where it can be written.
func TestWriteIntegers(t *testing.T) {
	a, _, err := sparse.FromTriplets(2, 2, []int32{0, 1}, []int32{0, 1}, []float64{123456789, -1 << 53}, sparse.BuildOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteMatrix(&buf, a, sparse.General); err != nil {
		t.Fatal(err)
	}
	want := "%%MatrixMarket matrix coordinate integer general\n2 2 2\n1 1 123456789\n2 2 -9007199254740992\n"
	if buf.String() != want {
		t.Errorf("wrote %q, want %q", buf.String(), want)
	}
	buf.Reset()
	if err := WriteVector(&buf, []float64{3, math.Copysign(0, -1)}); err != nil {
		t.Fatal(err)
	}
	if want := "%%MatrixMarket matrix array real general\n2 1\n3\n-0\n"; buf.String() != want {
		t.Errorf("wrote %q, want %q", buf.String(), want)
	}
}
