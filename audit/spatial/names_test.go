package spatial

import "testing"

// TestUnitNameProperty reads unit names from the property NameProperty
// names, "name" by default; a missing or non-string value gives no name.
func TestUnitNameProperty(t *testing.T) {
	data := []byte(`{"type":"FeatureCollection","features":[
{"type":"Feature","properties":{"id":"a","name":"Harrowfell","label":"North"},"geometry":{"type":"Polygon","coordinates":[[[0,0],[1,0],[1,1],[0,1],[0,0]]]}},
{"type":"Feature","properties":{"id":"b","label":7},"geometry":{"type":"Polygon","coordinates":[[[1,0],[2,0],[2,1],[1,1],[1,0]]]}}]}`)
	tests := []struct {
		name, prop string
		want       [2]string
	}{
		{"default name", "", [2]string{"Harrowfell", ""}},
		{"own property", "label", [2]string{"North", ""}},
		{"absent property", "nom", [2]string{"", ""}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			u, err := FromGeoJSON("units.geojson", data, Options{NameProperty: tt.prop})
			if err != nil {
				t.Fatal(err)
			}
			if got := [2]string{u.Name(0), u.Name(1)}; got != tt.want {
				t.Errorf("names %q, want %q", got, tt.want)
			}
		})
	}
}
