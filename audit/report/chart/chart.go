package chart

import (
	"bytes"
	"cmp"
	"fmt"
	"html"
	"image/color"
	"math"
	"regexp"
	"slices"
	"sort"
	"strings"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/planar"
	xfont "golang.org/x/image/font"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/study"
)

// Colours of the Okabe–Ito palette (Okabe & Ito 2008, "Color Universal
// Design") and three greys, chosen so that readers with the common
// colour-vision deficiencies can still tell the groups apart: every pair a
// chart contrasts keeps a CIEDE2000 difference of at least minDeltaE2000
// under simulated protanopia, deuteranopia and tritanopia (cvd_test.go).
var (
	okBlack     = color.NRGBA{0x00, 0x00, 0x00, 0xff}
	okOrange    = color.NRGBA{0xe6, 0x9f, 0x00, 0xff}
	okSkyBlue   = color.NRGBA{0x56, 0xb4, 0xe9, 0xff}
	okGreen     = color.NRGBA{0x00, 0x9e, 0x73, 0xff}
	okBlue      = color.NRGBA{0x00, 0x72, 0xb2, 0xff}
	okVermilion = color.NRGBA{0xd5, 0x5e, 0x00, 0xff}
	okYellow    = color.NRGBA{0xf0, 0xe4, 0x42, 0xff}
	okPurple    = color.NRGBA{0xcc, 0x79, 0xa7, 0xff}
	okGrey      = color.NRGBA{0xcc, 0xcc, 0xcc, 0xff} // light neutral, outside the palette
	okDarkGrey  = color.NRGBA{0x55, 0x55, 0x55, 0xff} // dark neutral, outside the palette
	okBand      = color.NRGBA{0x56, 0xb4, 0xe9, 0x90} // sky blue, translucent
)

// statusColour is the map fill of each unit role.
func statusColour(s study.UnitStatus) color.Color {
	switch s {
	case study.StatusTreated:
		return okVermilion
	case study.StatusControl:
		return okBlue
	case study.StatusDropped:
		return okYellow
	case study.StatusExcluded:
		return okDarkGrey
	}
	return okGrey
}

// statusLabel is the legend text of each unit role.
func statusLabel(s study.UnitStatus) string {
	switch s {
	case study.StatusTreated:
		return "import area (treated)"
	case study.StatusControl:
		return "matched comparison area"
	case study.StatusDropped:
		return "import area left out (no match)"
	case study.StatusExcluded:
		return "excluded (other or light import)"
	}
	return "unused untouched area"
}

// chartFont is the text face of every chart: Liberation Sans, which gonum/plot
// embeds for measuring text and which is metric-compatible with Arial and
// Helvetica, so the browser's fallback keeps the layout.
func chartFont(size vg.Length) font.Font {
	return font.Font{Typeface: "Liberation", Variant: "Sans", Size: size}
}

// newPlot returns a plot with the report's fonts and a light grid style.
func newPlot(title string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = chartFont(12)
	p.Title.Padding = vg.Points(6)
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = chartFont(10)
		a.Tick.Label.Font = chartFont(9)
		a.Color = color.NRGBA{0x55, 0x55, 0x55, 0xff}
		a.Tick.Color = a.Color
	}
	p.Legend.TextStyle.Font = chartFont(9)
	p.Legend.Top = true
	return p
}

// fontFamily matches the font-family that gonum/plot's SVG canvas writes.
var fontFamily = regexp.MustCompile(`font-family:([^;"]+)`)

// SVG draws p at w×h points and returns SVG markup fit to be inlined in
// HTML: no XML declaration or generator comment, a viewBox that scales, a
// role and title for screen readers, and a local font stack, so text renders
// without loading any font.
func SVG(p *plot.Plot, w, h vg.Length, label string) ([]byte, error) {
	wt, err := p.WriterTo(w, h, "svg")
	if err != nil {
		return nil, fmt.Errorf("chart: %q: %w", label, err)
	}
	var buf bytes.Buffer
	if _, err := wt.WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("chart: %q: %w", label, err)
	}
	return tidySVG(buf.Bytes(), label), nil
}

func tidySVG(b []byte, label string) []byte {
	s := string(b)
	if i := strings.Index(s, "<svg"); i >= 0 {
		s = s[i:]
	}
	s = fontFamily.ReplaceAllString(s, "font-family:'Liberation Sans',Arial,Helvetica,sans-serif")
	// Width and height become CSS-scalable; the viewBox keeps the proportions.
	title := "<title>" + html.EscapeString(label) + "</title>"
	s = strings.Replace(s, "<svg ", `<svg role="img" aria-label="`+html.EscapeString(label)+`" class="chart" `, 1)
	if i := strings.Index(s, ">"); i >= 0 {
		s = s[:i+1] + "\n" + title + s[i+1:]
	}
	return []byte(strings.TrimSpace(s) + "\n")
}

// chartEstimator picks the estimator whose event study a layer's chart
// shows: the headline (did.Headline), so the chart tells the summary's
// story; a report without headline rows shows no event-study chart.
func chartEstimator(rows []did.EventStudyRow, layer string) string {
	for _, r := range rows {
		if r.Layer == layer && r.Estimator == did.Headline {
			return did.Headline
		}
	}
	return ""
}

// EventStudy draws the event study of one layer: the estimate for each
// month relative to the import's arrival, its 95% band, the zero line, a
// vertical line where the import arrives (event time 0) and the reference
// month marked. ok is false when the audit has no event-study rows for the
// layer.
func EventStudy(rows []did.EventStudyRow, layer string, render Renderer) (svg []byte, ok bool, err error) {
	est := chartEstimator(rows, layer)
	if est == "" {
		return nil, false, nil
	}
	var sel []did.EventStudyRow
	for _, r := range rows {
		if r.Layer == layer && r.Estimator == est {
			sel = append(sel, r)
		}
	}
	sort.Slice(sel, func(i, j int) bool { return sel[i].EventTime < sel[j].EventTime })
	p := newPlot(fmt.Sprintf("%s edits around the import (%s)", capital(strings.ReplaceAll(layer, "_", " ")), est))
	p.X.Label.Text = "months since the import reached the area"
	// Relative rows (the Poisson event study) are drawn in percent.
	scale := 1.0
	p.Y.Label.Text = "difference in edits per area-month"
	if len(sel) > 0 && sel[0].Scale == did.ScaleRelative {
		scale = 100
		p.Y.Label.Text = "change against the comparison areas, %"
	}
	for i := range sel {
		sel[i].Estimate *= scale
		sel[i].CI95[0] *= scale
		sel[i].CI95[1] *= scale
	}

	pts := make(plotter.XYs, len(sel))
	band := make(plotter.XYs, 0, 2*len(sel))
	var refs plotter.XYs
	lo, hi := 0.0, 0.0
	for i, r := range sel {
		pts[i] = plotter.XY{X: float64(r.EventTime), Y: r.Estimate}
		band = append(band, plotter.XY{X: float64(r.EventTime), Y: r.CI95[0]})
		if r.CI95 == [2]float64{0, 0} && r.Estimate == 0 {
			refs = append(refs, pts[i])
		}
		lo, hi = math.Min(lo, r.CI95[0]), math.Max(hi, r.CI95[1])
		lo, hi = math.Min(lo, r.Estimate), math.Max(hi, r.Estimate)
	}
	for i := len(sel) - 1; i >= 0; i-- {
		band = append(band, plotter.XY{X: float64(sel[i].EventTime), Y: sel[i].CI95[1]})
	}
	poly, err := plotter.NewPolygon(band)
	if err != nil {
		return nil, false, err
	}
	poly.Color = okBand
	poly.LineStyle.Width = 0
	p.Add(poly)
	p.Legend.Add("95% interval", poly)

	xmin, xmax := pts[0].X, pts[len(pts)-1].X
	zero, _ := plotter.NewLine(plotter.XYs{{X: xmin - 0.5, Y: 0}, {X: xmax + 0.5, Y: 0}})
	zero.Color = okBlack
	zero.Width = vg.Points(0.8)
	p.Add(zero)
	pad := 0.05 * (hi - lo)
	if pad == 0 {
		pad = 1
	}
	arrive, _ := plotter.NewLine(plotter.XYs{{X: -0.5, Y: lo - pad}, {X: -0.5, Y: hi + pad}})
	arrive.Color = okVermilion
	arrive.Width = vg.Points(1.2)
	arrive.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
	p.Add(arrive)
	p.Legend.Add("import arrives", arrive)

	line, dots, err := plotter.NewLinePoints(pts)
	if err != nil {
		return nil, false, err
	}
	line.Color = okBlue
	line.Width = vg.Points(1.4)
	dots.Color = okBlue
	dots.Shape = draw.CircleGlyph{}
	dots.Radius = vg.Points(2.2)
	p.Add(line, dots)
	p.Legend.Add("estimate", line, dots)
	if len(refs) > 0 {
		ref, _ := plotter.NewScatter(refs)
		ref.Shape = draw.RingGlyph{}
		ref.Radius = vg.Points(5)
		ref.Color = okBlack
		p.Add(ref)
		p.Legend.Add("reference month (fixed at 0)", ref)
	}
	p.Legend.Left = true
	p.X.Min, p.X.Max = xmin-0.5, xmax+0.5
	p.Y.Min, p.Y.Max = lo-pad, hi+pad+0.35*(hi-lo+2*pad) // room for the legend
	svg, err = render(p, 16*vg.Centimeter, 9*vg.Centimeter, "Event study of "+layer+" edits ("+est+")")
	return svg, err == nil, err
}

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

// Shapes are the unit geometries a map draws. *spatial.Units meets it.
type Shapes interface {
	Len() int
	ID(i int) string
	Geometry(i int) orb.Geometry
}

// kmPerDegree is the length of one degree of a great circle on the sphere of
// radius orb.EarthRadius (6,378,137 m), in kilometres.
const kmPerDegree = orb.EarthRadius * math.Pi / 180 / 1000

// projection is an equirectangular projection centred on latitude lat0:
// x = longitude·cos(lat0), y = latitude, both in degrees of arc, so that one
// unit is kmPerDegree in either direction near lat0.
type projection struct{ cos float64 }

func newProjection(lat0 float64) projection {
	return projection{cos: math.Cos(lat0 * math.Pi / 180)}
}

func (pr projection) xy(p orb.Point) plotter.XY { return plotter.XY{X: p[0] * pr.cos, Y: p[1]} }

// niceLength returns the largest 1, 2 or 5 × 10^k not above x (x > 0).
func niceLength(x float64) float64 {
	if x <= 0 || math.IsInf(x, 0) || math.IsNaN(x) {
		return 0
	}
	e := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{5, 2, 1} {
		if m*e <= x {
			return m * e
		}
	}
	return e
}

// scaleBar draws a bar of Km kilometres at the lower left of the map.
type scaleBar struct {
	X, Y float64 // left end, data coordinates
	Km   float64
}

func (s scaleBar) Plot(c draw.Canvas, plt *plot.Plot) {
	tx, ty := plt.Transforms(&c)
	x0, y0 := tx(s.X), ty(s.Y)
	x1 := tx(s.X + s.Km/kmPerDegree)
	ls := draw.LineStyle{Color: okBlack, Width: vg.Points(2)}
	c.StrokeLine2(ls, x0, y0, x1, y0)
	for _, x := range []vg.Length{x0, x1} {
		c.StrokeLine2(draw.LineStyle{Color: okBlack, Width: vg.Points(1)}, x, y0-vg.Points(3), x, y0+vg.Points(3))
	}
	ts := draw.TextStyle{Color: okBlack, Font: chartFont(9), Handler: plt.Title.TextStyle.Handler, XAlign: draw.XCenter}
	ts.Font = chartFont(9)
	c.FillText(ts, vg.Point{X: (x0 + x1) / 2, Y: y0 + vg.Points(5)}, kmText(s.Km))
}

func kmText(km float64) string {
	if km < 1 {
		return fmt.Sprintf("%.0f m", km*1000)
	}
	return fmt.Sprintf("%g km", km)
}

// Map draws the units coloured by their role in the study, with a legend
// and a scale bar in kilometres, in an equirectangular projection scaled by
// the cosine of the mid latitude. ok is false when there is nothing to draw.
func Map(shapes Shapes, list []study.UnitInfo, render Renderer) (svg []byte, ok bool, err error) {
	if shapes == nil || shapes.Len() == 0 {
		return nil, false, nil
	}
	status := make(map[string]study.UnitStatus, len(list))
	names := make(map[string]string, len(list))
	for _, u := range list {
		status[u.ID] = u.Status
		names[u.ID] = u.Name
	}
	var b orb.Bound
	first := true
	for i := range shapes.Len() {
		g := shapes.Geometry(i)
		if g == nil {
			continue
		}
		if first {
			b, first = g.Bound(), false
		} else {
			b = b.Union(g.Bound())
		}
	}
	if first {
		return nil, false, nil
	}
	pr := newProjection((b.Min[1] + b.Max[1]) / 2)
	p := newPlot("Areas in the study")
	p.HideAxes()
	seen := map[study.UnitStatus]bool{}
	// Import areas are drawn last, so that overlapping units never hide them.
	rank := map[study.UnitStatus]int{study.StatusCandidate: 0, study.StatusExcluded: 1, study.StatusDropped: 2, study.StatusControl: 3, study.StatusTreated: 4}
	order := make([]int, shapes.Len())
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool {
		return rank[status[shapes.ID(order[a])]] < rank[status[shapes.ID(order[b])]]
	})
	for _, i := range order {
		s := status[shapes.ID(i)]
		for _, rings := range polygonRings(shapes.Geometry(i)) {
			xys := make([]plotter.XYer, len(rings))
			for r, ring := range rings {
				xy := make(plotter.XYs, len(ring))
				for k, pt := range ring {
					xy[k] = pr.xy(pt)
				}
				xys[r] = xy
			}
			poly, err := plotter.NewPolygon(xys...)
			if err != nil {
				return nil, false, fmt.Errorf("chart: map of unit %q: %w", shapes.ID(i), err)
			}
			poly.Color = statusColour(s)
			poly.LineStyle = draw.LineStyle{Color: color.White, Width: vg.Points(0.6)}
			p.Add(poly)
			seen[s] = true
		}
	}
	// Import areas are outlined on top of every fill, so that their edges
	// show whatever their neighbours' colours.
	var outlines []plot.Plotter
	var labels mapLabels
	for _, i := range order {
		id := shapes.ID(i)
		s := status[id]
		if s == study.StatusTreated {
			for _, rings := range polygonRings(shapes.Geometry(i)) {
				xy := make(plotter.XYs, len(rings[0]))
				for k, pt := range rings[0] {
					xy[k] = pr.xy(pt)
				}
				line, err := plotter.NewLine(xy)
				if err != nil {
					return nil, false, fmt.Errorf("chart: map of unit %q: %w", id, err)
				}
				line.LineStyle = importOutline
				outlines = append(outlines, line)
			}
		}
		if s == study.StatusTreated || s == study.StatusControl {
			if c, ok := labelPoint(shapes.Geometry(i)); ok {
				labels = append(labels, mapLabel{At: pr.xy(c), Text: cmp.Or(names[id], id), Treated: s == study.StatusTreated})
			}
		}
	}
	p.Add(outlines...)
	if len(labels) > maxMapLabels { // too many to read: import areas only
		labels = slices.DeleteFunc(labels, func(l mapLabel) bool { return !l.Treated })
	}
	if len(labels) <= maxMapLabels {
		p.Add(labels)
	}
	for _, s := range []study.UnitStatus{study.StatusTreated, study.StatusControl, study.StatusCandidate, study.StatusExcluded, study.StatusDropped} {
		if seen[s] {
			th, _ := plotter.NewPolygon(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 0}, {X: 1, Y: 1}, {X: 0, Y: 1}})
			th.Color = statusColour(s)
			th.LineStyle.Width = 0
			if s == study.StatusTreated {
				th.LineStyle = importOutline
			}
			p.Legend.Add(statusLabel(s), th)
		}
	}
	lo, hi := pr.xy(b.Min), pr.xy(b.Max)
	w, h := hi.X-lo.X, hi.Y-lo.Y
	if w <= 0 || h <= 0 {
		return nil, false, nil
	}
	// Room on the right for the legend and below for the scale bar.
	p.X.Min, p.X.Max = lo.X-0.02*w, hi.X+0.55*w
	p.Y.Min, p.Y.Max = lo.Y-0.12*h, hi.Y+0.02*h
	km := niceLength(w * kmPerDegree / 4)
	p.Add(scaleBar{X: lo.X, Y: lo.Y - 0.08*h, Km: km})
	width := 16 * vg.Centimeter
	aspect := (p.Y.Max - p.Y.Min) / (p.X.Max - p.X.Min)
	height := vg.Length(math.Min(math.Max(aspect, 0.3), 1.6)) * width
	svg, err = render(p, width, height+vg.Centimeter, "Map of the study areas by role")
	return svg, err == nil, err
}

// importOutline is the edge drawn around every import area on the map.
var importOutline = draw.LineStyle{Color: okBlack, Width: vg.Points(1.6)}

// maxMapLabels is the most unit names a map shows: beyond it only import
// areas are named, and beyond it again none (the names are in units.geojson).
const maxMapLabels = 40

// mapLabel is a unit's name at its centroid, on a white box so that it reads
// on any fill.
type mapLabel struct {
	At      plotter.XY
	Text    string
	Treated bool // import areas' names are bold
}

type mapLabels []mapLabel

// Plot draws import areas' names first, then the others; a name that would
// overlap one already drawn is left out (every name is in units.geojson).
func (ls mapLabels) Plot(c draw.Canvas, plt *plot.Plot) {
	tx, ty := plt.Transforms(&c)
	var placed []vg.Rectangle
	ordered := slices.Clone(ls)
	slices.SortStableFunc(ordered, func(a, b mapLabel) int {
		switch {
		case a.Treated == b.Treated:
			return 0
		case a.Treated:
			return -1
		}
		return 1
	})
	for _, l := range ordered {
		ts := draw.TextStyle{Color: okBlack, Font: chartFont(9), Handler: plt.Title.TextStyle.Handler, XAlign: draw.XCenter, YAlign: draw.YCenter}
		if l.Treated {
			ts.Font.Weight = xfont.WeightBold
		}
		pt := vg.Point{X: tx(l.At.X), Y: ty(l.At.Y)}
		w, h := ts.Width(l.Text), ts.Height(l.Text)
		pad := vg.Points(1.5)
		box := vg.Rectangle{Min: vg.Point{X: pt.X - w/2 - pad, Y: pt.Y - h/2 - pad}, Max: vg.Point{X: pt.X + w/2 + pad, Y: pt.Y + h/2 + pad}}
		if slices.ContainsFunc(placed, func(r vg.Rectangle) bool { return overlaps(r, box) }) {
			continue
		}
		placed = append(placed, box)
		c.SetColor(color.NRGBA{0xff, 0xff, 0xff, 0xd8})
		c.Fill(box.Path())
		c.FillText(ts, pt, l.Text)
	}
}

func overlaps(a, b vg.Rectangle) bool {
	return a.Min.X < b.Max.X && b.Min.X < a.Max.X && a.Min.Y < b.Max.Y && b.Min.Y < a.Max.Y
}

// labelPoint is where a unit's name goes: the area centroid of its
// largest polygon (orb/planar).
func labelPoint(g orb.Geometry) (orb.Point, bool) {
	var best orb.Polygon
	bestArea := -1.0
	for _, rings := range polygonRings(g) {
		poly := orb.Polygon(rings)
		if a := math.Abs(planar.Area(poly)); a > bestArea {
			best, bestArea = poly, a
		}
	}
	if best == nil || bestArea <= 0 {
		return orb.Point{}, false
	}
	c, _ := planar.CentroidArea(best)
	return c, true
}

// polygonRings returns the rings of each polygon of a polygonal geometry,
// the outer ring first. Inner rings are turned to wind against the outer ring
// whatever the file did (RFC 7946 only recommends it), so that the SVG's
// nonzero fill leaves the holes empty.
func polygonRings(g orb.Geometry) [][]orb.Ring {
	one := func(p orb.Polygon) []orb.Ring {
		if len(p) == 0 {
			return nil
		}
		out := []orb.Ring{p[0]}
		o := p[0].Orientation()
		for _, in := range p[1:] {
			if in.Orientation() == o {
				in = slices.Clone(in)
				in.Reverse()
			}
			out = append(out, in)
		}
		return out
	}
	switch g := g.(type) {
	case orb.Polygon:
		if r := one(g); r != nil {
			return [][]orb.Ring{r}
		}
	case orb.MultiPolygon:
		var out [][]orb.Ring
		for _, p := range g {
			if r := one(p); r != nil {
				out = append(out, r)
			}
		}
		return out
	case orb.Bound:
		return [][]orb.Ring{{g.ToRing()}}
	case orb.Ring:
		return [][]orb.Ring{{g}}
	}
	return nil
}

func capital(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}
