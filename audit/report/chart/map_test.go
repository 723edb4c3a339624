package chart

import (
	"bytes"
	"strings"
	"testing"

	"github.com/paulmach/orb"

	"github.com/loadwake/loadwake/audit/study"
)

// gridShapes are n×1 square units "u0".."u(n-1)", 0.1° wide.
type gridShapes int

func (g gridShapes) Len() int          { return int(g) }
func (g gridShapes) ID(i int) string   { return "u" + string(rune('0'+i)) }
func (g gridShapes) Name(i int) string { return "" }
func (g gridShapes) Geometry(i int) orb.Geometry {
	x := 0.1 * float64(i)
	return orb.Polygon{{{x, 0}, {x + 0.1, 0}, {x + 0.1, 0.1}, {x, 0.1}, {x, 0}}}
}

// TestMapNamesAndOutlines: import areas are outlined and named (bold);
// comparison areas are named, by id when they have no name; unused areas
// are not; a name that would overlap another is left out.
func TestMapNamesAndOutlines(t *testing.T) {
	list := []study.UnitInfo{
		{ID: "u0", Name: "Harrowfell", Status: study.StatusTreated},
		{ID: "u1", Status: study.StatusControl},
		{ID: "u2", Name: "Quillmere", Status: study.StatusCandidate},
		{ID: "u3", Name: "Ostbury", Status: study.StatusTreated},
	}
	svg, ok, err := Map(gridShapes(4), list, SVG)
	if err != nil || !ok {
		t.Fatal(ok, err)
	}
	s := string(svg)
	for _, want := range []string{">Harrowfell<", ">u1<", ">Ostbury<", "font-weight:bold"} {
		if !strings.Contains(s, want) {
			t.Errorf("map lacks %q", want)
		}
	}
	if strings.Contains(s, "Quillmere") {
		t.Error("an unused area is named")
	}
	// Two import areas, one outline each, plus the legend's swatch.
	if n := strings.Count(s, "stroke-width:1.6"); n != 3 {
		t.Errorf("%d outlined shapes, want 3", n)
	}

	// Long names on narrow units collide: the import area keeps its name.
	long := []study.UnitInfo{{ID: "u2", Status: study.StatusControl, Name: "Westernmost Comparison District"},
		{ID: "u3", Status: study.StatusTreated, Name: "Middlemost Import District"}}
	svg, _, err = Map(gridShapes(8), long, SVG)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(svg, []byte("Middlemost Import District")) || bytes.Contains(svg, []byte("Westernmost")) {
		t.Errorf("collision: want the import area's name alone")
	}
}
