package chart

import (
	"fmt"
	"image/color"
	"math"
	"strings"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"github.com/loadwake/loadwake/audit/did"
)

// Forest draws the splits of one trait with render: a row per layer and
// group with the group's relative effect (a diamond) and its 95% interval (a
// bar; a hollow diamond and no bar where no interval is reliable), and a
// dotted line at no change. ok is false when the splits have no groups.
func Forest(trait string, splits []did.Split, render Renderer) ([]byte, bool, error) {
	var names []string
	var est, hollow plotter.XYs
	var bars []plotter.XYs
	n := 0
	for _, sp := range splits {
		n += len(sp.Groups)
	}
	if n == 0 {
		return nil, false, nil
	}
	lim := 0.2
	y := float64(n - 1)
	for _, sp := range splits {
		for _, g := range sp.Groups {
			names = append(names, fmt.Sprintf("%s: %s (%d)", strings.ReplaceAll(sp.Layer, "_", " "), g.Group, g.TreatedUnits))
			x := 100 * g.RelativeEffect
			if g.NoInterval {
				hollow = append(hollow, plotter.XY{X: x, Y: y})
			} else {
				est = append(est, plotter.XY{X: x, Y: y})
				bars = append(bars, plotter.XYs{{X: 100 * g.CI95[0], Y: y}, {X: 100 * g.CI95[1], Y: y}})
				lim = math.Max(lim, math.Max(math.Abs(g.CI95[0]), math.Abs(g.CI95[1])))
			}
			lim = math.Max(lim, math.Abs(g.RelativeEffect))
			y--
		}
	}
	lim = 100 * math.Min(lim*1.1, 3)
	p := newPlot("Effect by " + trait)
	p.X.Label.Text = "relative effect (%)"
	zero, _ := plotter.NewLine(plotter.XYs{{X: 0, Y: -0.5}, {X: 0, Y: float64(n) - 0.5}})
	zero.Color = okDarkGrey
	zero.Dashes = []vg.Length{vg.Points(1), vg.Points(2)}
	p.Add(zero)
	for _, b := range bars {
		l, _ := plotter.NewLine(b)
		l.Color = okVermilion
		l.Width = vg.Points(2.5)
		p.Add(l)
	}
	for _, m := range []struct {
		pts    plotter.XYs
		shape  draw.GlyphDrawer
		radius float64
		colour color.Color
		label  string
	}{
		{est, draw.PyramidGlyph{}, 4.5, okBlack, "effect with 95% interval"},
		{hollow, draw.RingGlyph{}, 4, okPurple, "effect, no reliable interval"},
	} {
		if len(m.pts) == 0 {
			continue
		}
		s, _ := plotter.NewScatter(m.pts)
		s.Shape, s.Radius, s.Color = m.shape, vg.Points(m.radius), m.colour
		p.Add(s)
		p.Legend.Add(m.label, s)
	}
	rev := make([]string, len(names))
	for i, s := range names {
		rev[len(names)-1-i] = s
	}
	p.NominalY(rev...)
	p.Y.Min, p.Y.Max = -0.5, float64(n)-0.5+1
	p.X.Min, p.X.Max = -lim, lim
	h := vg.Length(3+0.7*float64(n)) * vg.Centimeter
	svg, err := render(p, 16*vg.Centimeter, h, "Effect by "+trait)
	return svg, err == nil, err
}
