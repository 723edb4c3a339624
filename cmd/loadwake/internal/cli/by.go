package cli

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/paulmach/orb/geojson"
	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
)

// AddByFlag adds --by, the splits by area trait declared up front, to audit
// and report.
func AddByFlag(cmd *cobra.Command, by *[]string) {
	cmd.Flags().StringSliceVar(by, "by", nil, "split the headline by area `TRAIT`s declared up front: intensity, activity (pre-period terciles) or a property of the --units file (repeat or comma-separate; p-values of the difference tests are Holm-adjusted across all splits)")
}

// splitSpecs turns --by into the declared splits, reading property values
// from the units file.
func splitSpecs(by []string, s *StudyFlags) ([]audit.SplitSpec, error) {
	var out []audit.SplitSpec
	seen := map[string]bool{}
	for _, t := range by {
		t = strings.TrimSpace(t)
		if t == "" || seen[t] {
			return nil, Usagef("--by %q: give each trait once, non-empty", t)
		}
		seen[t] = true
		if t == audit.TraitIntensity || t == audit.TraitActivity {
			out = append(out, audit.SplitSpec{Trait: t})
			continue
		}
		if !strings.HasSuffix(strings.ToLower(s.Units), "json") {
			return nil, Usagef("--by %s: a property split needs a GeoJSON --units file (computed traits: intensity, activity)", t)
		}
		vals, err := unitProperty(s.Units, s.UnitID, t)
		if err != nil {
			return nil, err
		}
		out = append(out, audit.SplitSpec{Trait: t, Property: vals})
	}
	return out, nil
}

// unitProperty reads property prop of every feature of the units file, by
// the id in property idProp.
func unitProperty(path, idProp, prop string) (map[string]string, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("units file: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(f)
	if err != nil {
		return nil, fmt.Errorf("units file %s: %w", path, err)
	}
	fc, err := geojson.UnmarshalFeatureCollection(data)
	if err != nil {
		return nil, fmt.Errorf("%w: units file %s: %v", audit.ErrSplit, path, err)
	}
	out := map[string]string{}
	for i, ft := range fc.Features {
		id, ok := ft.Properties[idProp]
		if !ok {
			id = ft.ID
		}
		if v, ok := ft.Properties[prop]; ok && v != nil && id != nil {
			out[propText(id)] = propText(v)
		} else if ok && id == nil {
			return nil, fmt.Errorf("%w: units file %s: feature %d has %s but no id (%s)", audit.ErrSplit, path, i+1, prop, idProp)
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%w: --by %s: no feature of %s has the property %q", audit.ErrSplit, prop, path, prop)
	}
	return out, nil
}

func propText(v any) string {
	switch x := v.(type) {
	case string:
		return x
	case float64:
		b, _ := json.Marshal(x)
		return string(b)
	}
	return fmt.Sprint(v)
}

// RunSplits adds the splits --by declares to rep (audit.AddSplits with the
// estimator flags' options) and prints one line per split to out; an empty
// by does nothing.
func RunSplits(cmd *cobra.Command, rep *audit.Report, by []string, s *StudyFlags, e *EstimatorFlags, out io.Writer) error {
	if len(by) == 0 {
		return nil
	}
	specs, err := splitSpecs(by, s)
	if err != nil {
		return err
	}
	if err := audit.AddSplits(cmd.Context(), rep, specs, e.Options(s)); err != nil {
		return err
	}
	for _, line := range audit.SplitLines(rep) {
		fmt.Fprintln(out, "split:", line)
	}
	return nil
}
