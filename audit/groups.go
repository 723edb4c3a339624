package audit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/layers"
)

// Computed traits a split may be by (SplitSpec.Trait), besides a unit
// property.
const (
	TraitIntensity = "intensity" // the import's share of a unit's features: under 25%, 25-50%, 50% and over
	TraitActivity  = "activity"  // terciles of pre-period activity (mean monthly events) among the treated units
)

// ErrSplit is the sentinel under errors about a split that cannot be made.
var ErrSplit = errors.New("audit: bad split")

// SplitSpec declares one split before any estimate is seen: a computed trait
// (TraitIntensity, TraitActivity) or a unit property whose values Property
// gives by unit id (from the units file).
type SplitSpec struct {
	Trait    string
	Property map[string]string // unit id → value; nil for a computed trait
}

// AddSplits estimates the headline per group of each declared split, for
// the four layers, with the interaction test that the groups differ, and
// adjusts those tests across every split (did.EstimateByGroups); the result
// goes into r.Splits. Groups are fixed by the specs alone, before any
// estimate: a property's distinct values, the intensity bands, the activity
// terciles.
func AddSplits(ctx context.Context, r *Report, specs []SplitSpec, eo did.Options) error {
	if r.Study == nil || r.Study.Panel == nil {
		return fmt.Errorf("%w: the report carries no study panel", ErrSplit)
	}
	if len(specs) == 0 {
		return nil
	}
	p := r.Study.Panel
	var gs []did.Grouping
	for _, s := range specs {
		g, err := grouping(s, p.Units)
		if err != nil {
			return err
		}
		gs = append(gs, g)
	}
	if eo.Draws == 0 {
		eo = did.DefaultOptions()
		eo.Window = r.Estimation.Window
		eo.Draws, eo.Seed = r.Estimation.Draws, r.Estimation.Seed
	}
	var outcomes []string
	for _, l := range layers.Layers {
		if slices.Contains(p.Outcomes, l.String()) {
			outcomes = append(outcomes, l.String())
		}
	}
	res, err := did.EstimateByGroups(ctx, p, gs, outcomes, eo)
	if err != nil {
		return fmt.Errorf("%w: %w", ErrSplit, err)
	}
	r.Splits = res
	return nil
}

// grouping turns a spec into the group of each panel unit.
func grouping(s SplitSpec, units []panel.Unit) (did.Grouping, error) {
	g := did.Grouping{Trait: s.Trait, Of: make([]int, len(units))}
	treated := func(i int) bool { return units[i].FirstTreated >= 0 && units[i].Weight > 0 }
	for i := range g.Of {
		g.Of[i] = -1
	}
	switch {
	case s.Property != nil:
		vals := map[string]bool{}
		for i, u := range units {
			if v := strings.TrimSpace(s.Property[u.ID]); treated(i) && v != "" {
				vals[v] = true
			}
		}
		for v := range vals {
			g.Groups = append(g.Groups, v)
		}
		sort.Strings(g.Groups)
		for i, u := range units {
			if treated(i) {
				g.Of[i] = slices.Index(g.Groups, strings.TrimSpace(s.Property[u.ID]))
			}
		}
	case s.Trait == TraitIntensity:
		if !slices.ContainsFunc(units, func(u panel.Unit) bool { return u.Intensity > 0 }) {
			return g, fmt.Errorf("%w: %s: no treated unit has an intensity; it is the share of an import's objects, known only for an import's audit", ErrSplit, s.Trait)
		}
		g.Groups = []string{"under 25%", "25-50%", "50% and over"}
		for i, u := range units {
			if !treated(i) {
				continue
			}
			x := u.Intensity
			switch {
			case x <= 0:
			case x < 0.25:
				g.Of[i] = 0
			case x < 0.5:
				g.Of[i] = 1
			default:
				g.Of[i] = 2
			}
		}
	case s.Trait == TraitActivity:
		// terciles of the first matching trait (log1p mean monthly events
		// before the treatment) among the treated units
		var xs []float64
		for i, u := range units {
			if treated(i) && len(u.Covariates) > 0 {
				xs = append(xs, u.Covariates[0])
			}
		}
		if len(xs) < 3 {
			return g, fmt.Errorf("%w: %s: %d treated units, fewer than 3 terciles", ErrSplit, s.Trait, len(xs))
		}
		sort.Float64s(xs)
		c1, c2 := xs[int(math.Ceil(float64(len(xs))/3))-1], xs[int(math.Ceil(2*float64(len(xs))/3))-1]
		g.Groups = []string{"least active third", "middle third", "most active third"}
		for i, u := range units {
			if !treated(i) || len(u.Covariates) == 0 {
				continue
			}
			switch x := u.Covariates[0]; {
			case x <= c1:
				g.Of[i] = 0
			case x <= c2:
				g.Of[i] = 1
			default:
				g.Of[i] = 2
			}
		}
	default:
		return g, fmt.Errorf("%w: unknown trait %q (a units-file property needs its values; computed traits: %s, %s)", ErrSplit, s.Trait, TraitIntensity, TraitActivity)
	}
	if len(g.Groups) < 2 {
		return g, fmt.Errorf("%w: %s: the treated units take %d value(s); a split needs at least 2 groups", ErrSplit, s.Trait, len(g.Groups))
	}
	return g, nil
}

// SplitLines says each split in plain words, one line per split: each
// group's effect with its interval, and whether the groups differ, with the
// number of splits and Holm's adjustment named.
func SplitLines(r *Report) []string {
	if r.Splits == nil {
		return nil
	}
	var out []string
	for _, sp := range r.Splits.Rows {
		var parts []string
		for _, g := range sp.Groups {
			switch {
			case strings.HasPrefix(g.Note, "not estimated"):
				parts = append(parts, fmt.Sprintf("%s (%d areas) %s", g.Group, g.TreatedUnits, g.Note))
			case g.NoInterval:
				parts = append(parts, fmt.Sprintf("%s (%d areas) %+.0f%%, no reliable interval (randomization p = %.2g)", g.Group, g.TreatedUnits, 100*g.RelativeEffect, g.PValue))
			default:
				parts = append(parts, fmt.Sprintf("%s (%d areas) %+.0f%% [%+.0f%%, %+.0f%%]", g.Group, g.TreatedUnits, 100*g.RelativeEffect, 100*g.CI95[0], 100*g.CI95[1]))
			}
		}
		line := fmt.Sprintf("%s by %s: %s", sp.Layer, sp.Trait, strings.Join(parts, "; "))
		switch {
		case sp.DiffP != nil && *sp.DiffPHolm < 0.05:
			line += fmt.Sprintf(". The groups differ (interaction test p = %.2g, %.2g after Holm's adjustment across %d tested splits of %d declared).", *sp.DiffP, *sp.DiffPHolm, r.Splits.Tested, r.Splits.Declared)
		case sp.DiffP != nil:
			line += fmt.Sprintf(". No reliable difference between the groups (interaction test p = %.2g, %.2g after Holm's adjustment across %d tested splits of %d declared).", *sp.DiffP, *sp.DiffPHolm, r.Splits.Tested, r.Splits.Declared)
		default:
			line += ". " + strings.ToUpper(sp.Note[:1]) + sp.Note[1:] + "."
		}
		out = append(out, line)
	}
	return out
}
