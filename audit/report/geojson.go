package report

import (
	"fmt"
	"io"
	"math"

	"github.com/paulmach/orb/geojson"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

// unitFiguresLabel says what a unit's observed and expected figures are.
const unitFiguresLabel = "descriptive, not an effect estimate: observed edits in the months after the import reached this area, and the edits expected from its own months before times the growth its comparison areas saw"

// WriteUnitsGeoJSON writes every unit as an RFC 7946 Feature with the
// properties id, status (treated, control, unmatched, dropped, excluded),
// reason, intensity, first_month (null when the import never reached it),
// weight, import_features and, per layer, observed_LAYER and expected_LAYER
// (observed_attribute, ...): for an import area, its edits in the months
// after the import reached it against its own edits before times the growth
// its comparison areas saw (audit.UnitFigure; null for other areas). These
// are descriptive figures of one area, labelled so by the figures property,
// not the import's effect there: the pooled effect is the report's headline.
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
	figures := map[string]map[string]any{} // unit → property → value
	if r != nil {
		for _, f := range r.UnitFigures {
			if _, ok := layers.ParseLayer(f.Layer); !ok {
				continue
			}
			if figures[f.Unit] == nil {
				figures[f.Unit] = map[string]any{}
			}
			figures[f.Unit]["observed_"+f.Layer] = f.Observed
			figures[f.Unit]["expected_"+f.Layer] = math.Round(100*f.Expected) / 100
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
		if n, ok := shapes.(interface{ Name(int) string }); ok && n.Name(i) != "" {
			f.Properties["name"] = n.Name(i) // the unit's name (admin:LEVEL units, GeoJSON name properties)
		}
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
		for _, l := range layers.Layers {
			f.Properties["observed_"+l.String()] = figures[id]["observed_"+l.String()]
			f.Properties["expected_"+l.String()] = figures[id]["expected_"+l.String()]
		}
		if figures[id] != nil {
			f.Properties["figures"] = unitFiguresLabel
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
