package chart

import (
	"math"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geo"
)

// TestScaleBar checks the map's kilometre scale against orb/geo (v0.14,
// haversine on the sphere of radius orb.EarthRadius) and against the length of
// one degree of the equator, 111.32 km (WGS 84 semi-major axis 6,378,137 m
// × π/180; common practice).
func TestScaleBar(t *testing.T) {
	if math.Abs(kmPerDegree-111.3195) > 0.001 {
		t.Errorf("kmPerDegree = %.4f, want 111.3195", kmPerDegree)
	}
	// Near 47.7°N (the demo region), one projected unit east is
	// 1/cos(lat) degrees of longitude: its great-circle length must match the
	// scale within 0.01% (the equirectangular error over 0.1°).
	lat := 47.7
	pr := newProjection(lat)
	d := geo.Distance(orb.Point{-86.7, lat}, orb.Point{-86.7 + 0.1/pr.cos, lat}) / 1000
	if math.Abs(d-0.1*kmPerDegree)/d > 1e-4 {
		t.Errorf("0.1 projected units = %.5f km by orb/geo, %.5f km by the scale bar", d, 0.1*kmPerDegree)
	}
	for _, c := range []struct{ in, want float64 }{{0.7, 0.5}, {1, 1}, {1.9, 1}, {2.4, 2}, {7.5, 5}, {12, 10}, {0.031, 0.02}} {
		if got := niceLength(c.in); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("niceLength(%g) = %g, want %g", c.in, got, c.want)
		}
	}
	if niceLength(0) != 0 || niceLength(math.NaN()) != 0 {
		t.Error("niceLength of 0 or NaN should be 0")
	}
}

// TestPalette pins the chart colours to the Okabe–Ito palette (Okabe & Ito
// 2008, "Color Universal Design"; hex values as published there).
func TestPalette(t *testing.T) {
	hex := func(c interface{ RGBA() (r, g, b, a uint32) }) string {
		r, g, b, _ := c.RGBA()
		return strings.ToUpper(strings.TrimPrefix(
			string([]byte{hexd(r >> 12), hexd(r >> 8 & 15), hexd(g >> 12), hexd(g >> 8 & 15), hexd(b >> 12), hexd(b >> 8 & 15)}), ""))
	}
	for _, c := range []struct {
		name string
		got  string
		want string
	}{
		{"orange", hex(okOrange), "E69F00"}, {"sky blue", hex(okSkyBlue), "56B4E9"}, {"bluish green", hex(okGreen), "009E73"},
		{"blue", hex(okBlue), "0072B2"}, {"vermilion", hex(okVermilion), "D55E00"}, {"reddish purple", hex(okPurple), "CC79A7"},
	} {
		if c.got != c.want {
			t.Errorf("%s = #%s, want #%s", c.name, c.got, c.want)
		}
	}
	// Each unit role has its own colour.
	seen := map[string]study.UnitStatus{}
	for _, s := range []study.UnitStatus{study.StatusCandidate, study.StatusControl, study.StatusTreated, study.StatusDropped, study.StatusExcluded} {
		h := hex(statusColour(s))
		if o, dup := seen[h]; dup {
			t.Errorf("%s and %s share colour #%s", s, o, h)
		}
		seen[h] = s
	}
}

func hexd(v uint32) byte { return "0123456789ABCDEF"[v&15] }

// TestPolygonRings: the hole of RFC 7946 appendix A.3 winds against its outer
// ring, whichever way the file wrote it.
func TestPolygonRings(t *testing.T) {
	outer := orb.Ring{{100, 0}, {101, 0}, {101, 1}, {100, 1}, {100, 0}}                    // counter-clockwise
	hole := orb.Ring{{100.2, 0.2}, {100.8, 0.2}, {100.8, 0.8}, {100.2, 0.8}, {100.2, 0.2}} // also counter-clockwise
	for _, g := range []orb.Geometry{orb.Polygon{outer, hole}, orb.MultiPolygon{{outer, hole}}} {
		rs := polygonRings(g)
		if len(rs) != 1 || len(rs[0]) != 2 {
			t.Fatalf("%T: rings %v", g, rs)
		}
		if rs[0][0].Orientation() == rs[0][1].Orientation() {
			t.Errorf("%T: the hole winds like the outer ring", g)
		}
	}
	if hole.Orientation() != outer.Orientation() {
		t.Error("the input hole was modified")
	}
}

func TestChartsNeedData(t *testing.T) {
	if _, ok, err := EventStudy(nil, "geometry", SVG); ok || err != nil {
		t.Errorf("event study of no rows: ok %v err %v", ok, err)
	}
	if _, ok, err := Balance(nil, SVG); ok || err != nil {
		t.Errorf("balance of no rows: ok %v err %v", ok, err)
	}
	if _, ok, err := Map(nil, nil, SVG); ok || err != nil {
		t.Errorf("map of no units: ok %v err %v", ok, err)
	}
	// An infinite SMD (a covariate constant in one group) still draws.
	if _, ok, err := Balance([]audit.BalanceJSON{{Covariate: "c", SMDBefore: math.Inf(1), SMDAfter: math.NaN()}}, SVG); !ok || err != nil {
		t.Errorf("balance with Inf/NaN: ok %v err %v", ok, err)
	}
}
