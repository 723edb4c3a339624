package report

import (
	"fmt"
	"image/color"
	"math"
	"strings"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
)

// The headline by area traits (audit.AddSplits): one forest chart per trait,
// a row per layer and group with the group's relative effect (a diamond)
// and its 95% interval (a bar; a hollow diamond and no bar where no interval
// is reliable), and the split's readings in plain words among the notes.

// splitNotes are the report's plain-words lines of the splits, led by what
// guards against fishing.
func splitNotes(r *audit.Report) []string {
	lines := audit.SplitLines(r)
	if len(lines) == 0 {
		return nil
	}
	head := fmt.Sprintf("Effects by area traits: %d splits were declared before estimation (%d tested for a difference); each difference p-value is adjusted by Holm's method across the tested splits, so a split found by trying many is not taken for a finding. Groups with fewer than 4 areas get no interval.",
		r.Splits.Declared, r.Splits.Tested)
	return append([]string{head}, lines...)
}

// forestCharts draws one forest chart per trait of r's splits.
func forestCharts(r *audit.Report) ([]Chart, error) {
	if r.Splits == nil {
		return nil, nil
	}
	var traits []string
	by := map[string][]did.Split{}
	for _, sp := range r.Splits.Rows {
		if _, ok := by[sp.Trait]; !ok {
			traits = append(traits, sp.Trait)
		}
		by[sp.Trait] = append(by[sp.Trait], sp)
	}
	var out []Chart
	for _, t := range traits {
		svg, ok, err := forestChart(t, by[t], renderSVG)
		if err != nil {
			return nil, err
		}
		if ok {
			out = append(out, Chart{Name: "by-" + fileSafe(t), SVG: svg,
				Caption: fmt.Sprintf("The headline (%s) in each group of areas by %s, per layer: diamonds are the relative effects, bars their 95%% intervals (none where a group has too few areas); the dotted line is no change. Whether the groups differ is said in the notes, with p-values adjusted across every split.", did.Headline, t)})
		}
	}
	return out, nil
}

func fileSafe(s string) string {
	return strings.Map(func(r rune) rune {
		if r >= 'a' && r <= 'z' || r >= '0' && r <= '9' || r == '-' || r == '_' {
			return r
		}
		if r >= 'A' && r <= 'Z' {
			return r + 32
		}
		return '-'
	}, s)
}

// forestPNG draws the forest chart of the chart name by-TRAIT as a PNG.
func forestPNG(r *audit.Report, name string, render renderFunc) ([]byte, bool, error) {
	if r.Splits == nil {
		return nil, false, nil
	}
	var trait string
	var splits []did.Split
	for _, sp := range r.Splits.Rows {
		if "by-"+fileSafe(sp.Trait) == name {
			trait = sp.Trait
			splits = append(splits, sp)
		}
	}
	if len(splits) == 0 {
		return nil, false, nil
	}
	return forestChart(trait, splits, render)
}

// forestChart draws the splits of one trait with render.
func forestChart(trait string, splits []did.Split, render renderFunc) ([]byte, bool, error) {
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
