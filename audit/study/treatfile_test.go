package study

import (
	"errors"
	"strings"
	"testing"
	"time"
)

func month(y int, m time.Month) time.Time { return time.Date(y, m, 1, 0, 0, 0, 0, time.UTC) }

// TestReadAssignment reads the treatment file shapes (CSV one row per unit,
// CSV one row per unit and month, GeoJSON) and refuses bad ones with the
// file and line: events that switch off, units listed twice, bad months,
// missing columns, broken JSON. Invented unit ids and months.
func TestReadAssignment(t *testing.T) {
	geo := `{"type": "FeatureCollection", "name": "imagery release",
 "features": [
  {"type": "Feature", "properties": {"id": "d1", "start": "2031-04-17"}, "geometry": null},
  {"type": "Feature", "properties": {"id": 7, "start": "2031-06"}, "geometry": null},
  {"type": "Feature", "properties": {"id": "d3", "start": null}, "geometry": null}
 ]}`
	ok := []struct {
		name, file, text string
		opts             ReadOptions
		event            string
		want             map[string]time.Time
	}{
		{"wide csv", "waves.csv", "# invented\nunit,start,event\nd1,2031-04,party series\nd2,2031-06-30,party series\nd3,,party series\n",
			ReadOptions{}, "party series", map[string]time.Time{"d1": month(2031, 4), "d2": month(2031, 6)}},
		{"long csv", "months.csv", "Unit_ID,Month,Treated\nd1,2031-03,0\nd1,2031-05,1\nd1,2031-04,1\nd2,2031-03,no\nd2,2031-04,no\n",
			ReadOptions{}, "months", map[string]time.Time{"d1": month(2031, 4)}},
		{"unit column and event flag", "w.csv", "district,first_month\nx9,2032-01\n",
			ReadOptions{UnitColumn: "district", Event: "chapter founded"}, "chapter founded", map[string]time.Time{"x9": month(2032, 1)}},
		{"geojson", "r.geojson", geo, ReadOptions{}, "imagery release", map[string]time.Time{"d1": month(2031, 4), "7": month(2031, 6)}},
	}
	for _, c := range ok {
		t.Run(c.name, func(t *testing.T) {
			a, err := ReadAssignment(strings.NewReader(c.text), c.file, c.opts)
			if err != nil {
				t.Fatal(err)
			}
			if a.Event != c.event || a.Source != c.file {
				t.Errorf("event %q from %q, want %q from %q", a.Event, a.Source, c.event, c.file)
			}
			got := map[string]time.Time{}
			for _, s := range a.Starts {
				got[s.Unit] = s.Month
				if !strings.HasPrefix(s.Pos, c.file+":") {
					t.Errorf("unit %s position %q", s.Unit, s.Pos)
				}
			}
			if len(got) != len(c.want) {
				t.Fatalf("starts %v, want %v", got, c.want)
			}
			for u, m := range c.want {
				if !got[u].Equal(m) {
					t.Errorf("unit %s starts %v, want %v", u, got[u], m)
				}
			}
		})
	}
	bad := []struct {
		name, file, text, want string
	}{
		{"end column", "e.csv", "unit,start,end\nd1,2031-04,\nd2,2031-04,2031-08\n", "e.csv:3: unit \"d2\" has an end"},
		{"switches off", "l.csv", "unit,month,treated\nd1,2031-04,1\nd1,2031-05,1\nd1,2031-06,0\n", "l.csv:4: unit \"d1\" is untreated in 2031-06"},
		{"listed twice", "t.csv", "unit,start\nd1,2031-04\nd1,2031-05\n", "t.csv:3: unit \"d1\" is listed twice (first at t.csv:2)"},
		{"bad month", "m.csv", "unit,start\nd1,April 2031\n", "m.csv:2: unit \"d1\": \"April 2031\" is not a month"},
		{"no start column", "h.csv", "unit,when\nd1,2031-04\n", "h.csv:1: no start column"},
		{"no unit column", "u.csv", "name,start\nd1,2031-04\n", "u.csv:1: no unit column"},
		{"nobody treated", "n.csv", "unit,start\nd1,\n", "n.csv names no treated unit"},
		{"empty file", "z.csv", "", "z.csv is empty"},
		{"bad quote", "q.csv", "unit,start\n\"d1,2031-04\n", "q.csv:2:"},
		{"month twice", "d.csv", "unit,month,treated\nd1,2031-04,1\nd1,2031-04,0\n", "month 2031-04 is given twice"},
		{"two events", "v.csv", "unit,start,event\nd1,2031-04,a\nd2,2031-04,b\n", "v.csv:3: event \"b\" differs"},
		{"geojson end", "g.geojson", `{"type":"FeatureCollection","features":[` + "\n" + `{"properties":{"id":"a","start":"2031-01","end":"2031-05"}}]}`, "g.geojson:2: feature 1 (unit \"a\") has an end"},
		{"geojson syntax", "s.geojson", "{\"type\":\"FeatureCollection\",\n\"features\": [}", "s.geojson:2: not valid JSON"},
		{"geojson no id", "i.geojson", `{"type":"FeatureCollection","features":[{"properties":{"start":"2031-01"}}]}`, "feature 1 has no unit id"},
		{"not a collection", "f.geojson", `{"type":"Feature"}`, "want a GeoJSON FeatureCollection"},
	}
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			_, err := ReadAssignment(strings.NewReader(c.text), c.file, ReadOptions{})
			if !errors.Is(err, ErrAssignment) || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want one containing %q", err, c.want)
			}
		})
	}
}

// FuzzReadAssignment: no input makes the reader panic; what it accepts is a
// valid assignment.
func FuzzReadAssignment(f *testing.F) {
	f.Add([]byte("unit,start\nd1,2031-04\n"))
	f.Add([]byte("unit,month,treated\nd1,2031-04,1\nd1,2031-05,0\n"))
	f.Add([]byte(`{"type":"FeatureCollection","features":[{"properties":{"id":"a","start":"2031-01"}}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		a, err := ReadAssignment(strings.NewReader(string(data)), "fuzz", ReadOptions{})
		if err == nil {
			if verr := a.Validate(); verr != nil {
				t.Fatalf("accepted an invalid assignment: %v", verr)
			}
		}
	})
}
