package wire

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond/amg"
	pb "github.com/residua/residua/proto/residua/v1"
	"github.com/residua/residua/solve"
	"github.com/residua/residua/sparse"
	"github.com/residua/residua/sparse/stencil"
)

// TestPackLayout checks the wire form of vectors against IEEE 754
// binary64: 1.0 is 0x3FF0000000000000 and −2.0 is 0xC000000000000000,
// sent least significant byte first.
func TestPackLayout(t *testing.T) {
	got := Pack([]float64{1, -2})
	want := []byte{0, 0, 0, 0, 0, 0, 0xf0, 0x3f, 0, 0, 0, 0, 0, 0, 0, 0xc0}
	if !slices.Equal(got, want) {
		t.Fatalf("Pack = % x, want % x", got, want)
	}
	x := []float64{math.Pi, math.Copysign(0, -1), math.SmallestNonzeroFloat64, math.MaxFloat64}
	back, err := Unpack(Pack(x))
	if err != nil || !slices.EqualFunc(back, x, func(a, b float64) bool { return math.Float64bits(a) == math.Float64bits(b) }) {
		t.Fatalf("round trip %v, %v", back, err)
	}
	if _, err := Unpack(make([]byte, 9)); err == nil {
		t.Fatalf("Unpack of 9 bytes succeeded")
	}
}

// frontEndOnly are the Summary fields a front end fills and the wire does
// not carry (see Result).
var frontEndOnly = map[string]bool{
	"RHS": true, "Server": true, "JobID": true, "MatrixUploaded": true, "ReadSeconds": true, "UploadSeconds": true,
	"ErrorVsOnes": true, "SolutionFile": true, "HistoryFile": true, "PlotFile": true, "SolutionNote": true,
	"CheckpointFile": true,
}

// fillAll sets every exported field of v to a distinct non-zero value.
func fillAll(v reflect.Value, seed *int) {
	for i := 0; i < v.NumField(); i++ {
		f := v.Field(i)
		*seed++
		switch f.Kind() {
		case reflect.String:
			f.SetString("s" + string(rune('a'+*seed%26)))
		case reflect.Int, reflect.Int64:
			f.SetInt(int64(*seed))
		case reflect.Float64:
			f.SetFloat(float64(*seed) + 0.5)
		case reflect.Bool:
			f.SetBool(true)
		case reflect.Pointer:
			p := reflect.New(f.Type().Elem())
			switch p.Elem().Kind() {
			case reflect.Float64:
				p.Elem().SetFloat(float64(*seed) + 0.25)
			case reflect.Int64, reflect.Int:
				p.Elem().SetInt(int64(*seed))
			case reflect.Bool:
				p.Elem().SetBool(true)
			}
			f.Set(p)
		case reflect.Slice:
			f.Set(reflect.ValueOf([]int{*seed, *seed + 1}))
		}
	}
}

// Every field of a Summary that the server knows survives Result and
// Summary, and nothing else is carried: a field added to Summary and
// forgotten in the conversion fails here.
func TestSummaryRoundTrip(t *testing.T) {
	t.Parallel()
	var s solve.Summary
	seed := 0
	fillAll(reflect.ValueOf(&s).Elem(), &seed)
	back := Summary(Result(&s))
	sv, bv := reflect.ValueOf(s), reflect.ValueOf(back)
	for i := 0; i < sv.NumField(); i++ {
		name := sv.Type().Field(i).Name
		got, want := bv.Field(i).Interface(), sv.Field(i).Interface()
		if frontEndOnly[name] {
			if !bv.Field(i).IsZero() {
				t.Errorf("%s = %v crossed the wire, which does not carry it", name, got)
			}
			continue
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: sent %v, received %v", name, want, got)
		}
	}
	// A result without settings (a peer may send one) converts.
	_ = Summary(&pb.SolveResult{})
	// A result without the optional figures leaves the keys out.
	empty := Summary(&pb.SolveResult{Settings: &pb.Settings{}})
	if empty.ResidualNorm != nil || empty.RelTol != nil || empty.LambdaMin != nil || empty.Shift != nil {
		t.Errorf("absent optional fields came back set: %+v", empty)
	}
}

func TestProgressRoundTrip(t *testing.T) {
	t.Parallel()
	p := krylov.Progress{Iteration: 12345, Elapsed: 98765432101 * time.Nanosecond, ResidualNorm: math.Pi, RelResidual: math.E, NormalResidualNorm: 1e-300}
	if got := Row(Progress(3, p)); got != p {
		t.Errorf("round trip %+v, want %+v", got, p)
	}
	if Progress(3, p).GetRhs() != 3 {
		t.Error("rhs lost")
	}
}

func TestRequestRoundTrip(t *testing.T) {
	t.Parallel()
	for _, r := range []solve.Request{
		{Method: solve.CG, Preconditioner: "ic0", RelTol: 1e-6, AbsTol: 2, MaxIter: 7, TimeLimit: time.Minute, RefreshEvery: 9},
		{LeastSquares: true, Method: solve.CGLS, Preconditioner: "colscale", ATol: 1e-5, BTol: 1e-4, Damp: 0.5, MaxIter: 3},
		{LeastSquares: true, Method: solve.Auto},
	} {
		var m pb.SolveRequest
		FillRequest(&m, r)
		got, err := Request(&m)
		if err != nil || got != r {
			t.Errorf("round trip %+v → %+v, %v", r, got, err)
		}
	}
	if _, err := Request(&pb.SolveRequest{Method: "lsq"}); !errors.Is(err, solve.ErrInvalid) {
		t.Errorf("method lsq: %v, want a refusal", err)
	}
}

// Chunks of a vector rebuild it bitwise; a dropped, reordered, truncated or
// altered chunk is detected (issue 17's truncated-solution survivor).
func TestChunksAndAssembler(t *testing.T) {
	t.Parallel()
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, 1_000_003)
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	x[17] = math.Copysign(0, -1)
	type chunk struct {
		off  int
		data []byte
		last bool
		sum  string
	}
	var chunks []chunk
	if err := ChunkVector(x, 1<<17, func(off int, data []byte, last bool, sum string) error {
		chunks = append(chunks, chunk{off, data, last, sum})
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	if chunks[len(chunks)-1].sum != VectorSum(x) {
		t.Error("last chunk's checksum is not VectorSum")
	}
	assemble := func(cs []chunk) ([]float64, error) {
		var a Assembler
		for _, c := range cs {
			if _, err := a.Add(int64(len(x)), int64(c.off), c.data, c.last, c.sum); err != nil {
				return nil, err
			}
		}
		if a.Vector() == nil {
			return nil, ErrTruncated
		}
		return a.Vector(), nil
	}
	got, err := assemble(chunks)
	if err != nil || len(got) != len(x) {
		t.Fatal(err)
	}
	for i := range x {
		if math.Float64bits(got[i]) != math.Float64bits(x[i]) {
			t.Fatalf("entry %d: %v, want %v", i, got[i], x[i])
		}
	}
	// The last chunk flagged early, after the first one: entries missing.
	early := []chunk{chunks[0]}
	early[0].last, early[0].sum = true, chunks[len(chunks)-1].sum
	// The same, with a checksum that matches what was sent: a sender that
	// lost the tail before checksumming (issue 17's first survivor). Only
	// the announced length can tell, so the receiver must count.
	consistent := []chunk{chunks[0]}
	consistent[0].last, consistent[0].sum = true, VectorSum(x[:len(chunks[0].data)/8])
	tampered := append([]chunk(nil), chunks...)
	data := append([]byte(nil), tampered[2].data...)
	data[5] ^= 1
	tampered[2].data = data
	for name, cs := range map[string][]chunk{
		"truncated":  early,
		"short":      consistent,
		"reordered":  append([]chunk{chunks[1], chunks[0]}, chunks[2:]...),
		"dropped":    append(append([]chunk(nil), chunks[:3]...), chunks[4:]...),
		"unfinished": chunks[:len(chunks)-1],
		"altered":    tampered,
	} {
		if _, err := assemble(cs); !errors.Is(err, ErrTruncated) {
			t.Errorf("%s: %v, want ErrTruncated", name, err)
		}
	}
}

// EncodeCSR and DecodeCSR round trip bitwise, in chunks of any size.
func TestCSRRoundTrip(t *testing.T) {
	t.Parallel()
	a := stencil.Poisson3D(12)
	a.Val[5] = math.SmallestNonzeroFloat64
	var buf bytes.Buffer
	if err := EncodeCSR(a, 1000, func(b []byte) error { buf.Write(b); return nil }); err != nil {
		t.Fatal(err)
	}
	if int64(buf.Len()) != CSRBytes(int64(a.Rows), int64(a.NNZ())) {
		t.Fatalf("%d bytes, want %d", buf.Len(), CSRBytes(int64(a.Rows), int64(a.NNZ())))
	}
	raw := buf.Bytes()
	b, err := DecodeCSR(bytes.NewReader(raw), a.Rows, a.Cols, a.NNZ())
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(a.RowPtr, b.RowPtr) || !reflect.DeepEqual(a.ColIdx, b.ColIdx) || !reflect.DeepEqual(a.Val, b.Val) || MatrixID(a) != MatrixID(b) {
		t.Fatal("decoded matrix differs")
	}
	rowPtrAt := func(i int) int64 { return int64(8 * i) }
	colAt := func(k int) int64 { return int64(8*(a.Rows+1) + 4*k) }
	valAt := func(k int) int64 { return int64(8*(a.Rows+1)+4*a.NNZ()) + int64(8*k) }
	for _, c := range []struct {
		name   string
		at     int64 // where to write
		bytes  []byte
		offset int64 // the offset the error must name
		reason error
	}{
		{"decreasing row pointer", rowPtrAt(3), le64(1), rowPtrAt(3), ErrRowPointer},
		{"column out of range", colAt(10), le32(uint32(a.Cols)), colAt(10), ErrColumn},
		{"columns not increasing", colAt(1), le32(0), colAt(1), ErrColumn},
		{"NaN value", valAt(7), le64(math.Float64bits(math.NaN())), valAt(7), ErrValue},
	} {
		bad := append([]byte(nil), raw...)
		copy(bad[c.at:], c.bytes)
		_, err := DecodeCSR(bytes.NewReader(bad), a.Rows, a.Cols, a.NNZ())
		var re *RawError
		if !errors.As(err, &re) || re.Offset != c.offset || !errors.Is(err, c.reason) {
			t.Errorf("%s: %v, want a RawError at byte %d", c.name, err, c.offset)
		}
	}
	_, err = DecodeCSR(bytes.NewReader(raw[:len(raw)-3]), a.Rows, a.Cols, a.NNZ())
	var re *RawError
	if !errors.As(err, &re) || !errors.Is(err, io.ErrUnexpectedEOF) || re.Offset != int64(len(raw)-3) {
		t.Errorf("truncated: %v", err)
	}
}

// MatrixID is SHA-256 over the layout the .proto documents for Matrix.id:
// the tag "residua csr v1\n", rows and cols as int64, the row pointers as
// int64, the column indices as int32 and the values as float64, all
// little-endian. Built here byte by byte with encoding/binary.
func TestMatrixID(t *testing.T) {
	t.Parallel()
	a, err := sparse.NewCSR(2, 3, []int{0, 2, 3}, []int32{0, 2, 1}, []float64{1.5, -2, 1e-300})
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	b.WriteString("residua csr v1\n")
	for _, v := range []int64{2, 3, 0, 2, 3} {
		binary.Write(&b, binary.LittleEndian, v)
	}
	binary.Write(&b, binary.LittleEndian, []int32{0, 2, 1})
	binary.Write(&b, binary.LittleEndian, []float64{1.5, -2, 1e-300})
	sum := sha256.Sum256(b.Bytes())
	if got, want := MatrixID(a), hex.EncodeToString(sum[:]); got != want {
		t.Errorf("MatrixID = %s, want %s", got, want)
	}
}

func le64(v uint64) []byte { return binary.LittleEndian.AppendUint64(nil, v) }
func le32(v uint32) []byte { return binary.LittleEndian.AppendUint32(nil, v) }

// The multigrid set-up report and the AMG options cross the wire whole.
func TestMultigridRoundTrip(t *testing.T) {
	t.Parallel()
	rep := &amg.Report{Smoother: amg.Chebyshev, Degree: 2, Theta: 0.08, K: 6, Coarsest: "cholesky",
		OperatorComplexity: 1.6, GridComplexity: 1.1, SetupSeconds: 2, SetupSpMVs: 40, ApplySpMVs: 7.7, Bytes: 1 << 20,
		Levels: []amg.Level{{Rows: 1000, NNZ: 6400, Theta: 0.08, Omega: 0.6, LambdaMax: 1.9}, {Rows: 40, NNZ: 900}}}
	back := Summary(Result(&solve.Summary{Multigrid: rep}))
	if !reflect.DeepEqual(back.Multigrid, rep) {
		t.Errorf("multigrid report: sent %+v, received %+v", rep, back.Multigrid)
	}
	req := solve.Request{Preconditioner: "amg", AMG: solve.AMGOptions{Theta: 0.2, Smoother: "l1jacobi", Degree: 3, BlockSize: 3}}
	var m pb.SolveRequest
	FillRequest(&m, req)
	got, err := Request(&m)
	if err != nil || got.AMG != req.AMG {
		t.Errorf("AMG options: sent %+v, received %+v (%v)", req.AMG, got.AMG, err)
	}
}
