package report

import (
	"fmt"
	"strings"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/report/chart"
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
		svg, ok, err := chart.Forest(t, by[t], chart.SVG)
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
func forestPNG(r *audit.Report, name string, render chart.Renderer) ([]byte, bool, error) {
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
	return chart.Forest(trait, splits, render)
}
