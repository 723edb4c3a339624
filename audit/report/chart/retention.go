package chart

import (
	"fmt"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"github.com/loadwake/loadwake/audit/retention"
)

// Retention draws the Kaplan–Meier curves of the four groups: the share
// of newcomers still editing by months since their first edit, import areas
// in vermilion, comparison areas in blue, after the import solid, before
// dashed. ok is false without curves.
func Retention(r *retention.Result, render Renderer) (svg []byte, ok bool, err error) {
	if r == nil || len(r.Curves) == 0 {
		return nil, false, nil
	}
	p := newPlot("Newcomers still editing")
	p.X.Label.Text = "months since the first edit"
	p.Y.Label.Text = "share still editing (Kaplan–Meier)"
	p.Y.Min, p.Y.Max = 0, 1.25 // room for the legend
	p.X.Min = 0
	type key struct{ areas, period string }
	lines := map[key]plotter.XYs{}
	var order []key
	for _, c := range r.Curves {
		k := key{c.Areas, c.Period}
		if _, seen := lines[k]; !seen {
			order = append(order, k)
		}
		lines[k] = append(lines[k], plotter.XY{X: float64(c.Month), Y: c.Surv})
	}
	for _, k := range order {
		l, err := plotter.NewLine(lines[k])
		if err != nil {
			return nil, false, fmt.Errorf("chart: retention: %w", err)
		}
		l.StepStyle = plotter.PostStep
		l.Width = vg.Points(1.8)
		l.Color = okBlue
		if k.areas == "import" {
			l.Color = okVermilion
		}
		if k.period == "before" {
			l.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
		}
		p.Add(l)
		p.Legend.Add(capital(k.areas)+" areas, started "+k.period+" the import", l)
	}
	svg, err = render(p, 16*vg.Centimeter, 10*vg.Centimeter, "Share of newcomers still editing by months since their first edit")
	return svg, err == nil, err
}
