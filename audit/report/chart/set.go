package chart

import (
	"fmt"
	"strings"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/layers"
)

// Chart is one rendered chart.
type Chart struct {
	Name    string // file-safe name, e.g. "event-study-attribute"
	Caption string // what the chart shows, in plain words
	SVG     []byte // inline SVG markup
}

// All draws the charts of an audit as SVG, each with its name and caption:
// one event study per layer that has event-study rows, the balance chart
// when there are balance rows, the retention chart when there are curves,
// the map when shapes is not nil and a forest chart per trait of the splits.
// layerWords names a layer's edits in the event-study captions.
func All(r *audit.Report, shapes Shapes, layerWords func(layer string) string) ([]Chart, error) {
	var out []Chart
	for _, l := range layers.Layers {
		svg, ok, err := EventStudy(r.EventStudy, l.String(), SVG)
		if err != nil {
			return nil, err
		}
		if ok {
			out = append(out, Chart{Name: "event-study-" + l.String(), SVG: svg,
				Caption: fmt.Sprintf("Each dot is the estimated change in %s in import areas against their comparison areas, in percent, by month relative to the import's arrival (dashed line), from the same Poisson model as the headline (%s). The shaded band is the 95%% interval (none when the import areas are too few for a reliable one). Before the line, dots near zero mean both groups moved alike; after it, they show the change that followed.", layerWords(l.String()), did.Headline)})
		}
	}
	if svg, ok, err := Balance(r.Balance, SVG); err != nil {
		return nil, err
	} else if ok {
		out = append(out, Chart{Name: "balance", SVG: svg,
			Caption: "How far the import areas differed from the comparison areas before the import, for each trait used in matching, in standard deviations (the SMD). Each arrow starts at the difference against all untouched areas (grey bar) and ends at the difference against the matched comparison areas; arrows ending in the shaded zone (within ±0.1) count as alike, vermilion arrows ending outside it did not get there."})
	}
	if svg, ok, err := Retention(r.Retention, SVG); err != nil {
		return nil, err
	} else if ok {
		out = append(out, Chart{Name: RetentionName, SVG: svg, Caption: retentionCaption})
	}
	if shapes != nil {
		svg, ok, err := Map(shapes, r.UnitList, SVG)
		if err != nil {
			return nil, err
		}
		if ok {
			out = append(out, Chart{Name: "map", SVG: svg,
				Caption: "The study areas by role, with the import areas outlined in black and named in bold, and the comparison areas named where there is room (every name is in units.geojson). Import areas are compared with the matched comparison areas only; unused, excluded and left-out areas do not enter the estimates. The bar gives the scale."})
		}
	}
	forest, err := forestCharts(r)
	if err != nil {
		return nil, err
	}
	return append(out, forest...), nil
}

// Draw draws the chart of r with the given name (a Chart.Name from All)
// with render; ok is false when r has no such chart. shapes may be nil.
func Draw(r *audit.Report, shapes Shapes, name string, render Renderer) ([]byte, bool, error) {
	switch {
	case name == "balance":
		return Balance(r.Balance, render)
	case name == "map":
		return Map(shapes, r.UnitList, render)
	case name == RetentionName:
		return Retention(r.Retention, render)
	case strings.HasPrefix(name, "by-"):
		return forestPNG(r, name, render)
	case strings.HasPrefix(name, "event-study-"):
		return EventStudy(r.EventStudy, strings.TrimPrefix(name, "event-study-"), render)
	}
	return nil, false, nil
}

// RetentionName is the retention chart's file name under charts/.
const RetentionName = "newcomer-retention"

// retentionCaption says what the retention chart shows.
const retentionCaption = "The share of newcomers still editing, by months since their first edit (Kaplan–Meier: an account counts as stopped at its last edit once 6 months pass without another before the data end, and accounts the data cannot yet follow are counted as far as they go): import areas in vermilion, comparison areas in blue; solid lines for newcomers who started after the import, dashed for before. If the import changed nothing, the gap between solid and dashed lines is about the same in both colours. The table's shares count instead whether an edit came on or after the day 12 (3, 6, 24) months on, among newcomers first seen at least that long before the data end; for accounts that edit rarely the two can differ."

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
		svg, ok, err := Forest(t, by[t], SVG)
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

// forestPNG draws the forest chart of the chart name by-TRAIT with render.
func forestPNG(r *audit.Report, name string, render Renderer) ([]byte, bool, error) {
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
	return Forest(trait, splits, render)
}
