package chart

import (
	"image/color"
	"math"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/match"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// Colours of the balance chart: the alike zone (opaque, so that it reads the
// same on any background) and the arrows by where they end.
var (
	balanceZone     = color.NRGBA{0x9c, 0xc9, 0xb4, 0xff} // sage green
	balanceAlike    = okBlue
	balanceDiffers  = okVermilion
	balanceStartBar = okDarkGrey
)

// Balance draws how matching moved each covariate: one arrow per trait
// from its standardized mean difference before matching (a short bar) to
// the difference after (the arrowhead), over a shaded zone where the groups
// count as alike (within ±0.1, Austin 2009's rule of thumb). Arrows that end
// inside the zone are blue, those still outside it vermilion. ok is false
// when there are no balance rows.
func Balance(rows []audit.BalanceJSON, render Renderer) (svg []byte, ok bool, err error) {
	if len(rows) == 0 {
		return nil, false, nil
	}
	p := newPlot("How matching moved each trait")
	p.X.Label.Text = "difference in standard deviations (import areas minus comparison)"
	names := make([]string, len(rows))
	arrows := make([]balanceArrow, len(rows))
	lim := 0.25
	for i, r := range rows {
		y := float64(len(rows) - 1 - i)
		names[len(rows)-1-i] = r.Covariate
		a := balanceArrow{Y: y, From: clampSMD(r.SMDBefore), To: clampSMD(r.SMDAfter)}
		a.Colour = balanceAlike
		if math.Abs(a.To) > match.BalanceThreshold {
			a.Colour = balanceDiffers
		}
		arrows[i] = a
		lim = math.Max(lim, math.Max(math.Abs(a.From), math.Abs(a.To)))
	}
	lim *= 1.1
	top := float64(len(rows)) - 0.5 + 1.4 // room for the legend
	zone, err := plotter.NewPolygon(plotter.XYs{{X: -match.BalanceThreshold, Y: -0.5}, {X: match.BalanceThreshold, Y: -0.5},
		{X: match.BalanceThreshold, Y: top}, {X: -match.BalanceThreshold, Y: top}})
	if err != nil {
		return nil, false, err
	}
	zone.Color = balanceZone
	zone.LineStyle.Width = 0
	p.Add(zone)
	p.Legend.Add("alike: within ±0.1", zone)
	zero, _ := plotter.NewLine(plotter.XYs{{X: 0, Y: -0.5}, {X: 0, Y: top}})
	zero.Color = okBlack
	zero.Width = vg.Points(0.6)
	p.Add(zero)
	for _, a := range arrows {
		p.Add(a)
	}
	p.Legend.Add("before matching → after, now alike", balanceArrow{Colour: balanceAlike})
	p.Legend.Add("before matching → after, still apart", balanceArrow{Colour: balanceDiffers})
	p.NominalY(names...)
	p.Y.Min, p.Y.Max = -0.5, top
	p.X.Min, p.X.Max = -lim, lim
	h := vg.Length(3.2+0.8*float64(len(rows))) * vg.Centimeter
	svg, err = render(p, 16*vg.Centimeter, h, "How matching moved each trait: standardized mean differences before and after matching")
	return svg, err == nil, err
}

// balanceArrow is one trait's move from its difference before matching
// (From, a short upright bar) to after (To, an arrowhead) at row Y.
type balanceArrow struct {
	Y, From, To float64
	Colour      color.Color
}

// Plot draws the arrow; one that barely moves is drawn as its head alone.
func (a balanceArrow) Plot(c draw.Canvas, plt *plot.Plot) {
	tx, ty := plt.Transforms(&c)
	x0, x1, y := tx(a.From), tx(a.To), ty(a.Y)
	drawArrow(&c, x0, x1, y, a.Colour)
}

// Thumbnail draws the arrow in the legend.
func (a balanceArrow) Thumbnail(c *draw.Canvas) {
	y := (c.Min.Y + c.Max.Y) / 2
	drawArrow(c, c.Min.X, c.Max.X, y, a.Colour)
}

// drawArrow draws a start bar at x0 and an arrow to x1 at height y.
func drawArrow(c *draw.Canvas, x0, x1, y vg.Length, col color.Color) {
	head, half := vg.Points(7), vg.Points(4.5)
	c.StrokeLine2(draw.LineStyle{Color: balanceStartBar, Width: vg.Points(2)}, x0, y-vg.Points(5), x0, y+vg.Points(5))
	dir := vg.Length(1)
	if x1 < x0 {
		dir = -1
	}
	if math.Abs(float64(x1-x0)) > float64(head) {
		c.StrokeLine2(draw.LineStyle{Color: col, Width: vg.Points(2.2)}, x0, y, x1-dir*head, y)
	}
	var tri vg.Path
	tri.Move(vg.Point{X: x1, Y: y})
	tri.Line(vg.Point{X: x1 - dir*head, Y: y + half})
	tri.Line(vg.Point{X: x1 - dir*head, Y: y - half})
	tri.Close()
	c.SetColor(col)
	c.Fill(tri)
}

// clampSMD keeps an infinite or NaN SMD (a covariate constant in one group)
// drawable at the chart's edge.
func clampSMD(x float64) float64 {
	switch {
	case math.IsNaN(x):
		return 0
	case x > 5:
		return 5
	case x < -5:
		return -5
	}
	return x
}
