package report

import (
	"fmt"
	"io"
	"slices"
	"strings"

	"github.com/paulmach/orb/geojson"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

// WriteUnitsGeoJSON writes every unit as an RFC 7946 Feature with the
// properties id, status (treated, control, unmatched, dropped, excluded),
// reason, intensity, first_month (null when the import never reached it),
// weight, import_features and, per layer, ESTIMATOR_relative_LAYER for the
// headline estimator (ppml_twfe_relative_attribute, ...) and for cs-att
// (cs_att_relative_attribute, ...): the import's relative effect in that layer
// (the same for every unit; null when not estimated), so a map can label
// import areas with it.
func WriteUnitsGeoJSON(w io.Writer, shapes Shapes, r *audit.Report) error {
	if shapes == nil {
		return fmt.Errorf("%w: no units", ErrInput)
	}
	info := map[string]study.UnitInfo{}
	if r != nil {
		for _, u := range r.UnitList {
			info[u.ID] = u
		}
	}
	ests := []string{headlineEstimator, "cs-att"}
	prop := func(est, layer string) string { return strings.ReplaceAll(est, "-", "_") + "_relative_" + layer }
	effects := map[string]any{}
	for _, est := range ests {
		for _, l := range layers.Layers {
			effects[prop(est, l.String())] = nil
		}
	}
	if r != nil {
		for _, e := range r.Effects {
			if _, ok := layers.ParseLayer(e.Layer); ok && slices.Contains(ests, e.Estimator) && e.RelativeEffect != nil {
				effects[prop(e.Estimator, e.Layer)] = *e.RelativeEffect
			}
		}
	}
	fc := geojson.NewFeatureCollection()
	for i := range shapes.Len() {
		id := shapes.ID(i)
		g := shapes.Geometry(i)
		if g == nil {
			return fmt.Errorf("%w: unit %q has no geometry", ErrInput, id)
		}
		f := geojson.NewFeature(g)
		u, ok := info[id]
		if !ok {
			u = study.UnitInfo{ID: id, Status: study.StatusCandidate}
		}
		f.Properties["id"] = id
		f.Properties["status"] = u.Status.String()
		if u.Reason != "" {
			f.Properties["reason"] = u.Reason
		}
		f.Properties["intensity"] = u.Intensity
		if u.FirstMonth != "" {
			f.Properties["first_month"] = u.FirstMonth
		} else {
			f.Properties["first_month"] = nil
		}
		f.Properties["weight"] = u.Weight
		f.Properties["import_features"] = u.ImportFeatures
		for k, v := range effects {
			f.Properties[k] = v
		}
		fc.Append(f)
	}
	b, err := fc.MarshalJSON()
	if err != nil {
		return err
	}
	if _, err := w.Write(append(b, '\n')); err != nil {
		return err
	}
	return nil
}
