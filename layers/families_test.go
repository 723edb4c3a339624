package layers

import (
	"context"
	"os"
	"sort"
	"testing"

	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmpbf"
)

// TestDelawareHighwayKeyFamilies puts every key of the highway ways of a real
// extract (osm module testdata delaware-latest.osm.pbf, a Geofabrik extract,
// OSM data © OpenStreetMap contributors, ODbL) into a key family of the
// default rules, and checks the ten most frequent keys, their counts and their
// families.
//
// Counts checked with an independent tool, Debian's osmium-tool 1.15.0:
//
//	osmium tags-filter -R -o hw.osm.pbf delaware-latest.osm.pbf w/highway
//	osmium tags-count hw.osm.pbf -t w | sort -rn | head
//
// which printed the figures in want below (52585 ways carry highway).
func TestDelawareHighwayKeyFamilies(t *testing.T) {
	if testing.Short() {
		t.Skip("reads a 7.8 MB extract")
	}
	f, err := os.Open(osmTestdata(t, "testdata/delaware-latest.osm.pbf"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := osmpbf.New(context.Background(), f, 2)
	defer sc.Close()
	sc.SkipNodes, sc.SkipRelations = true, true
	counts := map[string]int{}
	ways := 0
	for sc.Scan() {
		w, ok := sc.Object().(*osm.Way)
		if !ok || !w.Tags.HasTag("highway") {
			continue
		}
		ways++
		for _, tg := range w.Tags {
			counts[tg.Key]++
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	if ways != 52585 {
		t.Errorf("%d highway ways, osmium tags-filter found 52585", ways)
	}
	r := rules.Default()
	keys := make([]string, 0, len(counts))
	byFamily := map[string]int{}
	for k := range counts {
		keys = append(keys, k)
		fam, _ := r.Family(k)
		if fam == "" {
			t.Errorf("key %q: empty family", k)
		}
		byFamily[fam]++
	}
	sort.Slice(keys, func(i, j int) bool {
		if counts[keys[i]] != counts[keys[j]] {
			return counts[keys[i]] > counts[keys[j]]
		}
		return keys[i] < keys[j]
	})
	want := []struct {
		key    string
		count  int // osmium tags-count
		family string
		prov   bool
	}{
		{"highway", 52585, "other", false}, // class key, in no family
		{"name", 29853, "names", false},
		{"tiger:county", 28147, "provenance", true},
		{"tiger:cfcc", 28043, "provenance", true},
		{"tiger:name_base", 23549, "provenance", true},
		{"tiger:name_type", 22488, "provenance", true},
		{"tiger:reviewed", 20403, "provenance", true},
		{"source", 19502, "provenance", true},
		{"tiger:zip_left", 15765, "provenance", true},
		{"tiger:zip_right", 14253, "provenance", true},
	}
	for i, w := range want {
		if i >= len(keys) {
			t.Fatalf("only %d keys", len(keys))
		}
		k := keys[i]
		fam, prov := r.Family(k)
		if k != w.key || counts[k] != w.count || fam != w.family || prov != w.prov {
			t.Errorf("#%d: %s ×%d family %s (provenance %v); want %s ×%d %s (%v)",
				i+1, k, counts[k], fam, prov, w.key, w.count, w.family, w.prov)
		}
	}
	t.Logf("%d distinct keys on %d highway ways; keys per family: %v", len(keys), ways, byFamily)
}
