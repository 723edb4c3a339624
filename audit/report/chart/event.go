package chart

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/loadwake/loadwake/audit/did"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

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
