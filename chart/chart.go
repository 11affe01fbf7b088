package chart

import (
	"errors"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"github.com/residua/residua/internal/atomicfile"
	"github.com/residua/residua/krylov"
)

// ErrNoData: there is nothing to draw (no series, or no row with a finite
// relative residual).
var ErrNoData = errors.New("chart: no finite residual to draw")

// Series is one convergence history to draw.
type Series struct {
	// Label names the series in the legend (e.g. the preconditioner, or
	// the history file's name). May be empty for a single series.
	Label string
	Rows  []krylov.Progress
}

// Options control a picture. The zero value works.
type Options struct {
	// Title replaces the title built from Matrix, Preconditioner and the
	// iteration count. "-" means no title.
	Title string
	// Matrix and Preconditioner name the problem in the built title; the
	// preconditioner only appears when there is one series.
	Matrix, Preconditioner string
	// Tolerance is the relative residual the solve aims for, drawn as a
	// dashed line. Zero or negative: no line.
	Tolerance float64
	// Width and Height of the picture. Default 7.5 × 4.5 inches, which is
	// 720 × 432 pixels in PNG (96 dots per inch).
	Width, Height vg.Length
	// MaxPoints caps the points drawn per series. Default 2000.
	MaxPoints int
}

// Colours of our own choosing, distinct for the colour-blind in the first
// three (blue, orange, bluish green), then by line dashes as well.
var palette = []color.RGBA{
	{R: 0x1d, G: 0x4e, B: 0x89, A: 0xff},
	{R: 0xd9, G: 0x73, B: 0x1a, A: 0xff},
	{R: 0x1b, G: 0x8a, B: 0x6b, A: 0xff},
	{R: 0x8e, G: 0x3b, B: 0x73, A: 0xff},
	{R: 0x55, G: 0x55, B: 0x55, A: 0xff},
}

var dashes = [][]vg.Length{nil, {vg.Points(6), vg.Points(2)}, {vg.Points(2), vg.Points(2)}, {vg.Points(8), vg.Points(2), vg.Points(2), vg.Points(2)}}

var toleranceColour = color.RGBA{R: 0xb0, G: 0x20, B: 0x20, A: 0xff}

// Write draws the series to the file at path, as SVG or PNG according to
// its extension. The picture goes to a temporary file in the same folder
// first and is renamed into place.
func Write(path string, opt Options, series ...Series) (err error) {
	var format string
	switch strings.ToLower(filepath.Ext(path)) {
	case ".svg":
		format = "svg"
	case ".png":
		format = "png"
	default:
		return fmt.Errorf("chart: %s: unknown picture type %q (want .svg or .png)", path, filepath.Ext(path))
	}
	p, err := build(opt, series)
	if err != nil {
		return err
	}
	err = atomicfile.Write(path, func(w io.Writer) error { return render(w, p, opt, format) })
	var pe *os.PathError
	if errors.As(err, &pe) {
		return fmt.Errorf("chart: %w", err)
	}
	return err
}

// SVG draws the series as an SVG document to w.
func SVG(w io.Writer, opt Options, series ...Series) error {
	p, err := build(opt, series)
	if err != nil {
		return err
	}
	return render(w, p, opt, "svg")
}

// PNG draws the series as a PNG image to w.
func PNG(w io.Writer, opt Options, series ...Series) error {
	p, err := build(opt, series)
	if err != nil {
		return err
	}
	return render(w, p, opt, "png")
}

func render(w io.Writer, p *plot.Plot, opt Options, format string) error {
	width, height := opt.Width, opt.Height
	if width <= 0 {
		width = 7.5 * vg.Inch
	}
	if height <= 0 {
		height = 4.5 * vg.Inch
	}
	wt, err := p.WriterTo(width, height, format)
	if err != nil {
		return fmt.Errorf("chart: %w", err)
	}
	if _, err := wt.WriteTo(w); err != nil {
		return fmt.Errorf("chart: %w", err)
	}
	return nil
}

// point is one drawable point before clamping.
type point struct {
	x, y float64
}

func build(opt Options, series []Series) (*plot.Plot, error) {
	maxPoints := opt.MaxPoints
	if maxPoints <= 0 {
		maxPoints = 2000
	}
	// Gather the points and find the smallest positive and the largest
	// finite value over all series (and the tolerance), which set the range.
	pts := make([][]point, len(series))
	lo, hi := math.Inf(1), 0.0
	maxIter := 0
	zeros, bad := 0, 0
	for i, s := range series {
		for _, r := range s.Rows {
			v := r.RelResidual
			switch {
			case math.IsNaN(v) || math.IsInf(v, 0) || v < 0:
				bad++
				continue
			case v == 0:
				zeros++
			default:
				lo = math.Min(lo, v)
				hi = math.Max(hi, v)
			}
			pts[i] = append(pts[i], point{float64(r.Iteration), v})
			maxIter = max(maxIter, r.Iteration)
		}
	}
	if hi == 0 && zeros == 0 {
		return nil, ErrNoData
	}
	if opt.Tolerance > 0 && !math.IsInf(opt.Tolerance, 0) {
		lo = math.Min(lo, opt.Tolerance)
		hi = math.Max(hi, opt.Tolerance)
	}
	if math.IsInf(lo, 1) { // only zeros
		lo, hi = 1, 1
	}
	// Whole decades around the data; the floor for zeros one decade lower.
	yMin := math.Pow(10, math.Floor(math.Log10(lo)))
	yMax := math.Pow(10, math.Ceil(math.Log10(hi)))
	floor := yMin
	if zeros > 0 {
		floor = yMin / 10
		yMin = floor
	}
	if yMax <= yMin {
		yMax = yMin * 10
	}

	p := plot.New()
	p.BackgroundColor = color.White
	p.Title.Text = title(opt, series, maxIter)
	p.Title.TextStyle.Font.Size = 13
	p.Title.Padding = vg.Points(8)
	p.X.Label.Text = "iteration"
	var notes []string
	if zeros > 0 {
		notes = append(notes, fmt.Sprintf("%s drawn at %s (log axis)", plural(zeros, "zero residual"), tickLabel(floor)))
	}
	if bad > 0 {
		notes = append(notes, fmt.Sprintf("%s left out", plural(bad, "NaN or infinite residual")))
	}
	if len(notes) > 0 {
		p.X.Label.Text += " — " + strings.Join(notes, "; ")
	}
	p.Y.Label.Text = "relative residual ‖r‖/‖b‖"
	p.Y.Scale = plot.LogScale{}
	p.Y.Tick.Marker = decadeTicks{}
	p.Y.Min, p.Y.Max = yMin, yMax
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font.Size = 11
		a.Tick.Label.Font.Size = 10
	}

	grid := plotter.NewGrid()
	grid.Vertical.Color = color.Gray{Y: 0xe4}
	grid.Horizontal.Color = color.Gray{Y: 0xe4}
	p.Add(grid)

	if opt.Tolerance > 0 && !math.IsInf(opt.Tolerance, 0) {
		tol, err := plotter.NewLine(plotter.XYs{{X: 0, Y: opt.Tolerance}, {X: float64(max(maxIter, 1)), Y: opt.Tolerance}})
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		tol.Color = toleranceColour
		tol.Width = vg.Points(1)
		tol.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(tol)
		p.Legend.Add("tolerance "+tickLabel(opt.Tolerance), tol)
	}

	for i, s := range series {
		if len(pts[i]) == 0 {
			continue
		}
		thinned := thin(pts[i], maxPoints)
		xys := make(plotter.XYs, len(thinned))
		for j, q := range thinned {
			y := q.y
			if y == 0 {
				y = floor
			}
			xys[j] = plotter.XY{X: q.x, Y: y}
		}
		line, err := plotter.NewLine(xys)
		if err != nil {
			return nil, fmt.Errorf("chart: %w", err)
		}
		line.Color = palette[i%len(palette)]
		line.Width = vg.Points(1.6)
		line.Dashes = dashes[(i/len(palette))%len(dashes)]
		p.Add(line)
		if len(series) > 1 || s.Label != "" {
			last := series[i].Rows[len(series[i].Rows)-1].Iteration
			label := s.Label
			if label == "" {
				label = fmt.Sprintf("history %d", i+1)
			}
			p.Legend.Add(fmt.Sprintf("%s: %s", label, plural(last, "iteration")), line)
		}
	}
	p.X.Tick.Marker = iterationTicks{}
	p.Y.Min, p.Y.Max = yMin, yMax // Add widened them to the raw data
	p.X.Min = 0
	p.X.Max = float64(max(maxIter, 1))
	p.Legend.Top = true
	p.Legend.TextStyle.Font.Size = 10
	p.Legend.Padding = vg.Points(2)
	p.Legend.ThumbnailWidth = vg.Points(24)
	return p, nil
}

func title(opt Options, series []Series, maxIter int) string {
	if opt.Title == "-" {
		return ""
	}
	if opt.Title != "" {
		return opt.Title
	}
	var parts []string
	if opt.Matrix != "" {
		parts = append(parts, opt.Matrix)
	}
	if len(series) == 1 {
		if opt.Preconditioner != "" {
			parts = append(parts, "preconditioner "+opt.Preconditioner)
		}
		parts = append(parts, plural(maxIter, "iteration"))
	} else {
		parts = append(parts, fmt.Sprintf("%d histories", len(series)))
	}
	return strings.Join(parts, " · ")
}

func plural(n int, what string) string {
	if n == 1 {
		return "1 " + what
	}
	return fmt.Sprintf("%d %ss", n, what)
}

// thin keeps at most about max points of pts (sorted by recording order),
// splitting them into max/2 buckets of consecutive points and keeping each
// bucket's smallest and largest value in their original order, plus the
// last point, so that the envelope of a jagged curve survives.
func thin(pts []point, max int) []point {
	if len(pts) <= max || max < 4 {
		return pts
	}
	buckets := max / 2
	out := make([]point, 0, max+1)
	for b := 0; b < buckets; b++ {
		lo := b * len(pts) / buckets
		hi := (b + 1) * len(pts) / buckets
		iMin, iMax := lo, lo
		for i := lo; i < hi; i++ {
			if pts[i].y < pts[iMin].y {
				iMin = i
			}
			if pts[i].y > pts[iMax].y {
				iMax = i
			}
		}
		if iMin > iMax {
			iMin, iMax = iMax, iMin
		}
		out = append(out, pts[iMin])
		if iMax != iMin {
			out = append(out, pts[iMax])
		}
	}
	if last := pts[len(pts)-1]; out[len(out)-1] != last {
		out = append(out, last)
	}
	return out
}

// decadeTicks labels whole decades, every k-th one when there are many so
// that at most eight labels share the axis, with unlabelled minor ticks at
// the other decades.
type decadeTicks struct{}

func (decadeTicks) Ticks(min, max float64) []plot.Tick {
	if min <= 0 || max <= 0 || !(min < max) {
		return nil
	}
	d0 := int(math.Floor(math.Log10(min) + 1e-9))
	d1 := int(math.Ceil(math.Log10(max) - 1e-9))
	step := (d1 - d0 + 7) / 8
	if step < 1 {
		step = 1
	}
	var ticks []plot.Tick
	for d := d0; d <= d1; d++ {
		v := math.Pow(10, float64(d))
		t := plot.Tick{Value: v}
		if (d-d1)%step == 0 {
			t.Label = tickLabel(v)
		}
		ticks = append(ticks, t)
	}
	return ticks
}

// tickLabel writes v as 1e-08-style text with the mantissa dropped when it
// is 1.
func tickLabel(v float64) string {
	s := fmt.Sprintf("%.0e", v)
	if m := fmt.Sprintf("%.1e", v); !strings.HasPrefix(m, s[:1]+".0") {
		s = m
	}
	return s
}

// iterationTicks are gonum's default ticks with whole-number labels, since
// iterations are counts ("250", not "250.00").
type iterationTicks struct{}

func (iterationTicks) Ticks(min, max float64) []plot.Tick {
	ticks := plot.DefaultTicks{}.Ticks(min, max)
	for i := range ticks {
		if ticks[i].Label != "" {
			ticks[i].Label = strconv.FormatFloat(math.Round(ticks[i].Value), 'f', -1, 64)
		}
	}
	return ticks
}
