package chart

import (
	"bytes"
	"encoding/xml"
	"errors"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/residua/residua/krylov"
)

// curve returns a made-up convergence history (demo data, not a solve):
// a geometric decrease by factor rho per iteration with a ripple, as CG
// residuals look, from 1 down past 1e-9.
func curve(n int, rho float64) []krylov.Progress {
	rows := make([]krylov.Progress, n+1)
	for k := range rows {
		v := math.Pow(rho, float64(k)) * (1 + 0.5*math.Sin(float64(k)/3))
		rows[k] = krylov.Progress{Iteration: k, Elapsed: time.Duration(k) * time.Millisecond, ResidualNorm: 3 * v, RelResidual: v}
	}
	return rows
}

// artifactDir is where pictures go for a person to look at: $RESIDUA_ARTIFACTS
// when set, else the test's temporary folder.
func artifactDir(t *testing.T) string {
	if d := os.Getenv("RESIDUA_ARTIFACTS"); d != "" {
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		return d
	}
	return t.TempDir()
}

// PNG output must decode with the standard library's PNG decoder (the PNG
// specification, ISO/IEC 15948) at the documented default size: 7.5 × 4.5
// inches at 96 dots per inch is 720 × 432 pixels.
func TestWritePNG(t *testing.T) {
	path := filepath.Join(artifactDir(t), "chart-compare.png")
	err := Write(path, Options{Matrix: "heat-sink block", Tolerance: 1e-8},
		Series{Label: "jacobi", Rows: curve(400, 0.95)},
		Series{Label: "ic0", Rows: curve(180, 0.89)},
		Series{Label: "none", Rows: curve(900, 0.977)})
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() != 720 || b.Dy() != 432 {
		t.Errorf("PNG is %v, want 720×432", b)
	}
}

// SVG output must be well-formed XML (XML 1.0, parsed by encoding/xml)
// whose root is an svg element, and must hold the title and legend text.
func TestSVG(t *testing.T) {
	var buf bytes.Buffer
	err := SVG(&buf, Options{Matrix: "made-up truss", Preconditioner: "jacobi", Tolerance: 1e-8}, Series{Rows: curve(300, 0.93)})
	if err != nil {
		t.Fatal(err)
	}
	root := parseSVG(t, buf.Bytes())
	if root != "svg" {
		t.Errorf("root element %q, want svg", root)
	}
	for _, want := range []string{"made-up truss · preconditioner jacobi · 300 iterations", "tolerance 1e-08", "relative residual"} {
		if !bytes.Contains(buf.Bytes(), []byte(want)) {
			t.Errorf("SVG lacks %q", want)
		}
	}
	if err := os.WriteFile(filepath.Join(artifactDir(t), "chart-single.svg"), buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

// parseSVG checks that b is well-formed XML and returns the root's name.
func parseSVG(t *testing.T, b []byte) string {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(b))
	root := ""
	for {
		tok, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("SVG is not well-formed XML: %v", err)
		}
		if se, ok := tok.(xml.StartElement); ok && root == "" {
			root = se.Name.Local
		}
	}
	return root
}

// An exact solution gives a zero residual, which a log axis cannot show:
// the chart clamps it and says so; NaN rows are left out and counted.
func TestZeroAndNaNResiduals(t *testing.T) {
	rows := curve(20, 0.5)
	rows = append(rows, krylov.Progress{Iteration: 21, RelResidual: 0}, krylov.Progress{Iteration: 22, RelResidual: math.NaN()})
	var buf bytes.Buffer
	if err := SVG(&buf, Options{Tolerance: 1e-8}, Series{Rows: rows}); err != nil {
		t.Fatal(err)
	}
	parseSVG(t, buf.Bytes())
	// The smallest positive value is 0.5^20·(1+0.5·sin(20/3)) ≈ 1.2e-6, the
	// tolerance 1e-8, so the lowest decade is 1e-08 and the floor 1e-09.
	for _, want := range []string{"1 zero residual drawn at 1e-09 (log axis)", "1 NaN or infinite residual left out"} {
		if !bytes.Contains(buf.Bytes(), []byte(want)) {
			t.Errorf("SVG lacks the note %q", want)
		}
	}
	if err := SVG(io.Discard, Options{}, Series{Rows: []krylov.Progress{{RelResidual: 0}}}); err != nil {
		t.Errorf("a history of one zero residual: %v", err)
	}
}

func TestErrors(t *testing.T) {
	if err := SVG(io.Discard, Options{}); !errors.Is(err, ErrNoData) {
		t.Errorf("no series: %v, want ErrNoData", err)
	}
	if err := SVG(io.Discard, Options{}, Series{Rows: []krylov.Progress{{RelResidual: math.Inf(1)}}}); !errors.Is(err, ErrNoData) {
		t.Errorf("only Inf: %v, want ErrNoData", err)
	}
	dir := t.TempDir()
	if err := Write(filepath.Join(dir, "x.gif"), Options{}, Series{Rows: curve(5, 0.5)}); err == nil || !strings.Contains(err.Error(), ".gif") {
		t.Errorf("unknown extension: %v", err)
	}
	if err := Write(filepath.Join(dir, "x.svg"), Options{}); !errors.Is(err, ErrNoData) {
		t.Errorf("no data: %v", err)
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 0 {
		t.Errorf("failed writes left %v behind", ents)
	}
}

// Thinning keeps every bucket's extremes, so the smallest and the largest
// value of the whole curve and its last point always survive.
func TestThin(t *testing.T) {
	pts := make([]point, 100000)
	for i := range pts {
		pts[i] = point{float64(i), 1 + math.Sin(float64(i))}
	}
	pts[777].y = -5
	pts[54321].y = 9
	got := thin(pts, 2000)
	if len(got) > 2001 {
		t.Fatalf("%d points, want at most 2001", len(got))
	}
	var sawMin, sawMax bool
	for i, q := range got {
		if i > 0 && q.x <= got[i-1].x {
			t.Fatalf("points out of order at %d", i)
		}
		sawMin = sawMin || q.y == -5
		sawMax = sawMax || q.y == 9
	}
	if !sawMin || !sawMax || got[len(got)-1] != pts[len(pts)-1] {
		t.Errorf("extremes kept %v %v, last %v", sawMin, sawMax, got[len(got)-1])
	}
}

func TestDecadeTicks(t *testing.T) {
	ticks := decadeTicks{}.Ticks(1e-16, 1e2)
	labelled := 0
	for _, tk := range ticks {
		if tk.Label != "" {
			labelled++
		}
	}
	if len(ticks) != 19 || labelled > 8 || ticks[len(ticks)-1].Label != "1e+02" {
		t.Errorf("%d ticks, %d labelled, last %q", len(ticks), labelled, ticks[len(ticks)-1].Label)
	}
}
