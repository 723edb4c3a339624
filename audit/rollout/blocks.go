package rollout

import (
	"encoding/json"
	"fmt"
	"os"
	"strconv"
)

// ReadBlocks reads the block of every unit from the GeoJSON units file
// path: the value of property prop, keyed by the unit's id (property
// idProp, or the feature's own id when idProp is "id" and the property is
// missing, as the units reader does). A unit without the property is an
// error naming the feature.
func ReadBlocks(path, idProp, prop string) (map[string]string, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("rollout: read blocks: %w", err)
	}
	var fc struct {
		Features []struct {
			ID         any            `json:"id"`
			Properties map[string]any `json:"properties"`
		} `json:"features"`
	}
	if err := json.Unmarshal(data, &fc); err != nil {
		return nil, fmt.Errorf("rollout: read blocks from %s: %w", path, err)
	}
	str := func(v any) (string, bool) {
		switch x := v.(type) {
		case string:
			return x, x != ""
		case float64:
			return strconv.FormatFloat(x, 'f', -1, 64), true
		}
		return "", false
	}
	out := make(map[string]string, len(fc.Features))
	for i, f := range fc.Features {
		id, ok := str(f.Properties[idProp])
		if !ok && idProp == "id" {
			id, ok = str(f.ID)
		}
		if !ok {
			return nil, fmt.Errorf("%w: %s: feature %d has no id property %q", ErrPlan, path, i, idProp)
		}
		b, ok := str(f.Properties[prop])
		if !ok {
			return nil, fmt.Errorf("%w: %s: feature %d (unit %s) has no block property %q", ErrPlan, path, i, id, prop)
		}
		out[id] = b
	}
	return out, nil
}
