package panel_test

import (
	"bytes"
	"errors"
	"reflect"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/panel/paneltest"
)

func TestPanelCSVRoundTrip(t *testing.T) {
	w := paneltest.World{PerCohort: 3, Cohorts: []int{4, 6}, Controls: 4, Months: 10, Delta: 0.3, Outcomes: 2}
	p := w.Panel(11)
	p.Units[2].Cluster = "east"
	p.Units[3].Cluster = "east"
	p.Units[7].Weight = 0.25
	var buf bytes.Buffer
	if err := panel.WriteCSV(&buf, p); err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(buf.String(), "unit,month,first_treated,weight,cluster,layer0,layer1\nt0,2031-01,2031-05,1,t0,") {
		t.Errorf("unexpected start:\n%.120s", buf.String())
	}
	got, err := panel.ReadCSV(&buf, "panel.csv", panel.Columns{Unit: "unit", Time: "month", FirstTreated: "first_treated",
		Cluster: "cluster", Weight: "weight", Outcomes: []string{"layer0", "layer1"}})
	if err != nil {
		t.Fatal(err)
	}
	for i := range p.Units {
		if p.Units[i].Cluster == "" {
			p.Units[i].Cluster = p.Units[i].ID
		}
	}
	if !got.Start.Equal(p.Start) || got.Months != p.Months || !reflect.DeepEqual(got.Units, p.Units) || !reflect.DeepEqual(got.Y, p.Y) {
		t.Errorf("round trip differs:\n got %+v\nwant %+v", got.Units, p.Units)
	}
}

func TestReadPanelCSVErrors(t *testing.T) {
	cols := panel.Columns{Unit: "u", Time: "m", FirstTreated: "g", Outcomes: []string{"y"}}
	covCols := cols
	covCols.Covariates = []string{"x"}
	cases := []struct {
		name, in, want string
	}{
		{"missing column", "u,m,y\na,2030-01,1\n", `p.csv:1: column "g": no such column`},
		{"bad month", "u,m,g,y\na,2030-01,,1\na,2030-13,,1\n", `p.csv:3: column "m": month "2030-13"`},
		{"negative count", "u,m,g,y\na,2030-01,,1\na,2030-02,,-2\n", `p.csv:3: column "y": count "-2"`},
		{"text count", "u,m,g,y\na,2030-01,,x\n", `p.csv:2: column "y": count "x"`},
		{"duplicate", "u,m,g,y\na,2030-01,,1\na,2030-01,,2\n", `p.csv:3: column "m": unit "a", month 2030-01 already given on line 2`},
		{"changing treatment", "u,m,g,y\na,2030-01,2030-02,1\na,2030-02,,2\n", `p.csv:3: column "g": unit "a" has first-treated`},
		{"gap", "u,m,g,y\na,2030-01,,1\na,2030-02,,1\nb,2030-01,,1\n", `p.csv:4: column "m": unit "b" has no row for month 2030-02`},
		{"treated before start", "u,m,g,y\na,2030-01,2029-12,1\na,2030-02,2029-12,1\n", `p.csv:2: column "g": unit "a" first treated 2029-12, before`},
		{"ragged csv", "u,m,g,y\na,2030-01,,1,9\n", `p.csv:2: record on line 2: wrong number of fields`},
		{"empty", "", "p.csv: empty file"},
		{"changing covariate", "u,m,g,y,x\na,2030-01,,1,0.5\na,2030-02,,1,0.7\n", `p.csv:3: unit "a" has covariates [0.7] here but [0.5] on line 2`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cc := cols
			if strings.HasPrefix(c.in, "u,m,g,y,x\n") {
				cc = covCols
			}
			_, err := panel.ReadCSV(strings.NewReader(c.in), "p.csv", cc)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want %q", err, c.want)
			}
			if !errors.Is(err, panel.ErrInvalid) {
				t.Errorf("%v does not unwrap to ErrInvalid", err)
			}
		})
	}
}

func TestReadPanelCSVCovariates(t *testing.T) {
	in := "u,m,g,y,x\na,2030-01,2030-02,1,0.5\na,2030-02,2030-02,3,0.5\nb,2030-01,,2,1.5\nb,2030-02,,2,1.5\n"
	p, err := panel.ReadCSV(strings.NewReader(in), "p.csv", panel.Columns{Unit: "u", Time: "m", FirstTreated: "g", Outcomes: []string{"y"}, Covariates: []string{"x"}})
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(p.Units[1].Covariates, []float64{1.5}) || p.Units[0].FirstTreated != 1 || p.Units[1].FirstTreated != -1 {
		t.Errorf("units %+v", p.Units)
	}
}

// TestPanelCSVRoundTripCovariates writes a panel whose units carry
// covariates (one named, one not), recognises the header as an export with
// ExportDefaults and reads it back with the columns it gives: units, weights,
// clusters, covariates and counts come back unchanged.
func TestPanelCSVRoundTripCovariates(t *testing.T) {
	w := paneltest.World{PerCohort: 2, Cohorts: []int{4}, Controls: 3, Months: 8, Delta: 0.2, Outcomes: 1}
	p := w.Panel(3)
	p.CovariateNames = []string{"log1p pre geometry"}
	for i := range p.Units {
		p.Units[i].Cluster = p.Units[i].ID
		p.Units[i].Covariates = []float64{float64(i) / 3, 1.5 - float64(i)}
	}
	var buf bytes.Buffer
	if err := panel.WriteCSV(&buf, p); err != nil {
		t.Fatal(err)
	}
	header, _, _ := strings.Cut(buf.String(), "\n")
	if want := "unit,month,first_treated,weight,cluster,layer0,covariate:log1p pre geometry,covariate:2"; header != want {
		t.Fatalf("header %q, want %q", header, want)
	}
	cols, ok := panel.ExportDefaults(strings.Split(header, ","))
	if !ok {
		t.Fatal("ExportDefaults does not recognise WriteCSV's header")
	}
	if !reflect.DeepEqual(cols.Outcomes, []string{"layer0"}) || len(cols.Covariates) != 2 {
		t.Fatalf("columns %+v", cols)
	}
	got, err := panel.ReadCSV(&buf, "panel.csv", cols)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got.Units, p.Units) || !reflect.DeepEqual(got.Y, p.Y) {
		t.Errorf("round trip differs:\n got %+v\nwant %+v", got.Units, p.Units)
	}
	if _, ok := panel.ExportDefaults([]string{"area", "month", "start", "edits"}); ok {
		t.Error("a user's own header taken for an export")
	}
}
