package chart

import (
	"cmp"
	"fmt"
	"image/color"
	"math"
	"slices"
	"sort"

	xfont "golang.org/x/image/font"

	"github.com/loadwake/loadwake/audit/study"
	"github.com/paulmach/orb"
	"github.com/paulmach/orb/planar"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

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
