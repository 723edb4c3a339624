package power

import (
	"bytes"
	"fmt"
	"image/color"
	"math"
	"os"
	"path/filepath"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// curveColours are the lines of a power chart: dark, saturated hues that
// stay apart for the common colour-vision deficiencies (blue, vermilion,
// bluish green, reddish purple, then black).
var curveColours = []color.NRGBA{
	{0x00, 0x5a, 0x9c, 0xff}, {0xc8, 0x4a, 0x00, 0xff}, {0x00, 0x7d, 0x5f, 0xff}, {0x9a, 0x3c, 0x80, 0xff}, {0x22, 0x22, 0x22, 0xff},
}

// powerChart draws the power curves of the curves given, one line each
// labelled by label, against the planted effect in percent, with the target
// power as a dashed rule and each point's Wilson interval as a bar.
func powerChart(title string, curves []Curve, label func(Curve) string, target float64) (*plot.Plot, error) {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = font.Font{Typeface: "Liberation", Variant: "Sans", Size: 11}
	p.X.Label.Text = "planted change in follow-on edits (%)"
	p.Y.Label.Text = "chance the evaluation detects it"
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = font.Font{Typeface: "Liberation", Variant: "Sans", Size: 9}
		a.Tick.Label.Font = font.Font{Typeface: "Liberation", Variant: "Sans", Size: 8}
	}
	p.Legend.TextStyle.Font = font.Font{Typeface: "Liberation", Variant: "Sans", Size: 8}
	p.Legend.Top, p.Legend.Left = false, false
	p.Y.Min, p.Y.Max = 0, 1.04
	p.Add(plotter.NewGrid())
	lo, hi := math.Inf(1), math.Inf(-1)
	for i, c := range curves {
		pts := make(plotter.XYs, len(c.Points))
		errs := make(plotter.YErrors, len(c.Points))
		for k, pt := range c.Points {
			pts[k] = plotter.XY{X: 100 * pt.Effect, Y: pt.Power}
			errs[k].Low, errs[k].High = pt.Power-pt.Wilson95[0], pt.Wilson95[1]-pt.Power
			lo, hi = math.Min(lo, pts[k].X), math.Max(hi, pts[k].X)
		}
		col := curveColours[i%len(curveColours)]
		line, marks, err := plotter.NewLinePoints(pts)
		if err != nil {
			return nil, fmt.Errorf("power: chart %q: %w", title, err)
		}
		line.Color, line.Width = col, vg.Points(1.6)
		line.Dashes = [][]vg.Length{nil, {vg.Points(5), vg.Points(2)}, {vg.Points(1.5), vg.Points(2)}, {vg.Points(6), vg.Points(2), vg.Points(1.5), vg.Points(2)}}[i%4]
		marks.Color, marks.Shape = col, []draw.GlyphDrawer{draw.CircleGlyph{}, draw.SquareGlyph{}, draw.TriangleGlyph{}, draw.PlusGlyph{}}[i%4]
		bars, err := plotter.NewYErrorBars(struct {
			plotter.XYer
			plotter.YErrorer
		}{pts, errs})
		if err != nil {
			return nil, fmt.Errorf("power: chart %q: %w", title, err)
		}
		bars.Color = color.NRGBA{col.R, col.G, col.B, 0x70}
		p.Add(bars, line, marks)
		p.Legend.Add(label(c), line, marks)
	}
	rule := plotter.NewFunction(func(float64) float64 { return target })
	rule.Color, rule.Dashes, rule.Width = color.NRGBA{0x66, 0x66, 0x66, 0xff}, []vg.Length{vg.Points(2), vg.Points(3)}, vg.Points(0.8)
	rule.XMin, rule.XMax = lo, hi
	p.Add(rule)
	p.Legend.Add(fmt.Sprintf("%.0f%% power", 100*target), rule)
	return p, nil
}

// WriteCharts writes the power charts into dir, each as SVG and PNG:
// power-plan (every layer under the first design) and power-OUTCOME (the
// outcome under every design that simulated it). It returns the paths.
func (r *Result) WriteCharts(dir, outcome string) ([]string, error) {
	if len(r.Designs) == 0 {
		return nil, nil
	}
	plan := r.Designs[0].Name
	var first, byDesign []Curve
	for _, c := range r.Curves {
		if c.Design == plan {
			first = append(first, c)
		}
		if c.Layer == outcome {
			byDesign = append(byDesign, c)
		}
	}
	type chart struct {
		name  string
		plot  func() (*plot.Plot, error)
		count int
	}
	charts := []chart{
		{"power-plan", func() (*plot.Plot, error) {
			return powerChart("Power of the planned evaluation, by layer", first, func(c Curve) string { return c.Layer }, r.Target)
		}, len(first)},
		{"power-" + outcome, func() (*plot.Plot, error) {
			return powerChart("Power for "+outcome+" edits: the plan and alternatives", byDesign, func(c Curve) string { return c.Design }, r.Target)
		}, len(byDesign)},
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("power: create %s: %w", dir, err)
	}
	var paths []string
	for _, ch := range charts {
		if ch.count == 0 {
			continue
		}
		p, err := ch.plot()
		if err != nil {
			return nil, err
		}
		w, h := 16*vg.Centimeter, 10*vg.Centimeter
		var svg bytes.Buffer
		wt, err := p.WriterTo(w, h, "svg")
		if err != nil {
			return nil, fmt.Errorf("power: chart %s: %w", ch.name, err)
		}
		if _, err := wt.WriteTo(&svg); err != nil {
			return nil, fmt.Errorf("power: chart %s: %w", ch.name, err)
		}
		c := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(144))
		p.Draw(draw.New(c))
		var png bytes.Buffer
		if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(&png); err != nil {
			return nil, fmt.Errorf("power: chart %s as PNG: %w", ch.name, err)
		}
		for _, f := range []struct {
			ext string
			b   []byte
		}{{".svg", svg.Bytes()}, {".png", png.Bytes()}} {
			path := filepath.Join(dir, ch.name+f.ext)
			if err := os.WriteFile(path, f.b, 0o644); err != nil {
				return nil, fmt.Errorf("power: write chart: %w", err)
			}
			paths = append(paths, path)
		}
	}
	return paths, nil
}
