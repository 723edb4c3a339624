package sim_test

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geojson"
	"github.com/paulmach/orb/planar"
	"github.com/paulmach/osm"
)

var outputs = []string{sim.HistoryFile, sim.ChangesetsFile, sim.DistrictsFile, sim.TruthFile}

func TestGenerateReproducible(t *testing.T) {
	cfg := smallConfig()
	cfg.Seed = 7
	a, _ := generate(t, cfg)
	b, _ := generate(t, cfg)
	for _, name := range outputs {
		if !bytes.Equal(readFile(t, a, name), readFile(t, b, name)) {
			t.Errorf("%s differs between two runs with seed 7", name)
		}
	}
	cfg.Seed = 8
	c, _ := generate(t, cfg)
	for _, name := range []string{sim.HistoryFile, sim.ChangesetsFile, sim.TruthFile} {
		if bytes.Equal(readFile(t, a, name), readFile(t, c, name)) {
			t.Errorf("%s is the same for seeds 7 and 8", name)
		}
	}
}

type nodeVersion struct {
	at      time.Time
	visible bool
}

// TestGenerateConsistent checks the files as the osm module's XML reader sees
// them against the rules of the OSM data model (OSM wiki, "OSM XML" and
// "API v0.6"): versions numbered from 1 in steps of 1, time moving forward per
// object, ways referring only to nodes visible at the way's time, changesets
// holding the changes they declare and no more than 10,000.
func TestGenerateConsistent(t *testing.T) {
	cfg := smallConfig()
	dir, tr := generate(t, cfg)
	objs := readOSM(t, filepath.Join(dir, sim.HistoryFile))
	css := readOSM(t, filepath.Join(dir, sim.ChangesetsFile))

	changesets := map[osm.ChangesetID]*osm.Changeset{}
	var lastCS osm.ChangesetID
	for _, o := range css {
		c, ok := o.(*osm.Changeset)
		if !ok {
			t.Fatalf("changesets file holds %T", o)
		}
		if c.ID <= lastCS {
			t.Errorf("changeset %d after %d: not ascending", c.ID, lastCS)
		}
		lastCS = c.ID
		if c.Open || c.ChangesCount < 1 || c.ChangesCount > sim.APIChangesetLimit {
			t.Errorf("changeset %d: open=%v num_changes=%d", c.ID, c.Open, c.ChangesCount)
		}
		if c.ClosedAt.Before(c.CreatedAt) {
			t.Errorf("changeset %d closed before it was created", c.ID)
		}
		changesets[c.ID] = c
	}
	if int64(len(changesets)) != tr.Tallies.Changesets {
		t.Errorf("changesets file has %d, truth says %d", len(changesets), tr.Tallies.Changesets)
	}

	counted := map[osm.ChangesetID]int{}
	nodes := map[osm.NodeID][]nodeVersion{}
	var nodeVersions, wayVersions, nodeCount, wayCount int64
	var prevType osm.Type
	var prevID int64
	var prevVer int
	var prevAt time.Time
	check := func(typ osm.Type, id int64, ver int, at time.Time, visible bool, tags osm.Tags, cs osm.ChangesetID, uid osm.UserID, user string) {
		label := osm.ObjectID(0)
		_ = label
		switch {
		case typ == prevType && id == prevID:
			if ver != prevVer+1 {
				t.Errorf("%s/%d: version %d after %d", typ, id, ver, prevVer)
			}
			if !at.After(prevAt) {
				t.Errorf("%s/%d v%d: timestamp %v not after %v", typ, id, ver, at, prevAt)
			}
		case typ == prevType && id < prevID, typ == osm.TypeNode && prevType == osm.TypeWay:
			t.Errorf("%s/%d after %s/%d: not sorted", typ, id, prevType, prevID)
		default:
			if ver != 1 {
				t.Errorf("%s/%d starts at version %d", typ, id, ver)
			}
			if typ == osm.TypeNode {
				nodeCount++
			} else {
				wayCount++
			}
		}
		prevType, prevID, prevVer, prevAt = typ, id, ver, at
		if !visible && len(tags) > 0 {
			t.Errorf("%s/%d v%d: deleted version carries tags", typ, id, ver)
		}
		c, ok := changesets[cs]
		if !ok {
			t.Errorf("%s/%d v%d: changeset %d not in the changesets file", typ, id, ver, cs)
			return
		}
		counted[cs]++
		if c.UserID != uid || c.User != user {
			t.Errorf("%s/%d v%d: user %d %q, changeset %d has %d %q", typ, id, ver, uid, user, cs, c.UserID, c.User)
		}
		if at.Before(c.CreatedAt) || at.After(c.ClosedAt) {
			t.Errorf("%s/%d v%d at %v outside changeset %d [%v, %v]", typ, id, ver, at, cs, c.CreatedAt, c.ClosedAt)
		}
	}
	for _, o := range objs {
		switch v := o.(type) {
		case *osm.Node:
			nodeVersions++
			check(osm.TypeNode, int64(v.ID), v.Version, v.Timestamp, v.Visible, v.Tags, v.ChangesetID, v.UserID, v.User)
			nodes[v.ID] = append(nodes[v.ID], nodeVersion{v.Timestamp, v.Visible})
			if c := changesets[v.ChangesetID]; c != nil && v.Visible &&
				(v.Lat < c.MinLat || v.Lat > c.MaxLat || v.Lon < c.MinLon || v.Lon > c.MaxLon) {
				t.Errorf("node/%d v%d outside the bounding box of changeset %d", v.ID, v.Version, c.ID)
			}
		case *osm.Way:
			wayVersions++
			check(osm.TypeWay, int64(v.ID), v.Version, v.Timestamp, v.Visible, v.Tags, v.ChangesetID, v.UserID, v.User)
			if !v.Visible {
				if len(v.Nodes) > 0 {
					t.Errorf("way/%d v%d: deleted version has nodes", v.ID, v.Version)
				}
				continue
			}
			if len(v.Nodes) < 2 {
				t.Errorf("way/%d v%d: %d nodes", v.ID, v.Version, len(v.Nodes))
			}
			if v.Tags.Find("building") != "" && v.Nodes[0].ID != v.Nodes[len(v.Nodes)-1].ID {
				t.Errorf("way/%d v%d: building is not a closed way", v.ID, v.Version)
			}
			for _, wn := range v.Nodes {
				if !visibleAt(nodes[wn.ID], v.Timestamp) {
					t.Errorf("way/%d v%d refers to node %d, not visible at %v", v.ID, v.Version, wn.ID, v.Timestamp)
				}
			}
		default:
			t.Fatalf("history holds %T", o)
		}
	}
	for id, c := range changesets {
		if counted[id] != c.ChangesCount {
			t.Errorf("changeset %d: num_changes %d, history holds %d versions", id, c.ChangesCount, counted[id])
		}
	}
	ta := tr.Tallies
	for _, c := range []struct {
		name      string
		got, want int64
	}{
		{"node versions", nodeVersions, ta.NodeVersions},
		{"way versions", wayVersions, ta.WayVersions},
		{"nodes", nodeCount, ta.Nodes},
		{"ways", wayCount, ta.Ways},
	} {
		if c.got != c.want {
			t.Errorf("%s: history has %d, truth says %d", c.name, c.got, c.want)
		}
	}

	// Import changesets: the ones truth lists, tagged as the import guidelines
	// ask (OSM wiki, "Import/Guidelines": import=yes and a source), under the cap.
	accounts := map[osm.UserID]bool{}
	for _, a := range tr.ImportAccounts {
		accounts[osm.UserID(a.UID)] = true
	}
	listed := map[osm.ChangesetID]bool{}
	for _, id := range tr.ImportChangesets {
		listed[osm.ChangesetID(id)] = true
	}
	var importVersions int64
	for id, c := range changesets {
		isImport := c.Tags.Find("import") == "yes"
		if isImport != listed[id] || isImport != accounts[c.UserID] {
			t.Errorf("changeset %d: import tag %v, listed %v, import account %v", id, isImport, listed[id], accounts[c.UserID])
		}
		if isImport {
			importVersions += int64(c.ChangesCount)
			if c.Tags.Find("source") == "" || c.ChangesCount > cfg.ChangesetLimit {
				t.Errorf("import changeset %d: source %q, %d changes (cap %d)", id, c.Tags.Find("source"), c.ChangesCount, cfg.ChangesetLimit)
			}
		}
	}
	if importVersions != ta.ImportVersions || len(listed) != len(tr.ImportChangesets) || len(listed) < cfg.Treated {
		t.Errorf("import: %d versions in %d changesets, truth says %d versions in %d", importVersions, len(listed), ta.ImportVersions, len(tr.ImportChangesets))
	}

	// Districts: one polygon per district, every visible node inside the grid.
	fc, err := geojson.UnmarshalFeatureCollection(readFile(t, dir, sim.DistrictsFile))
	if err != nil {
		t.Fatalf("districts.geojson: %v", err)
	}
	if len(fc.Features) != cfg.Districts() {
		t.Fatalf("districts.geojson has %d features, want %d", len(fc.Features), cfg.Districts())
	}
	var grid orb.Bound
	names := map[string]bool{}
	for i, f := range fc.Features {
		if id, _ := f.Properties["id"].(float64); int(id) != i+1 {
			t.Errorf("feature %d has id %v", i, f.Properties["id"])
		}
		name, _ := f.Properties["name"].(string)
		if name == "" || names[name] {
			t.Errorf("feature %d: name %q empty or repeated", i, name)
		}
		names[name] = true
		if i == 0 {
			grid = f.Geometry.Bound()
		}
		grid = grid.Union(f.Geometry.Bound())
		if a := planar.Area(f.Geometry); math.Abs(a-cfg.CellDeg*cfg.CellDeg) > 1e-9 {
			t.Errorf("district %d area %v square degrees, want %v", i+1, a, cfg.CellDeg*cfg.CellDeg)
		}
	}
	for _, o := range objs {
		if n, ok := o.(*osm.Node); ok && n.Visible && !grid.Contains(n.Point()) {
			t.Errorf("node/%d v%d at %v outside the district grid %v", n.ID, n.Version, n.Point(), grid)
		}
	}
}

// visibleAt reports whether the last version at or before at is visible.
func visibleAt(vs []nodeVersion, at time.Time) bool {
	ok := false
	for _, v := range vs {
		if v.at.After(at) {
			break
		}
		ok = v.visible
	}
	return ok
}

// TestPoissonGammaCounts checks that district-month event counts follow the
// planted model: with Gamma(k, mean μ) rates, counts are negative binomial
// NB2 with E = μ and Var = μ + μ²/k (Cameron & Trivedi, Regression Analysis
// of Count Data, 2nd ed., 2013, section 3.3, NB2 variance function; section
// number from memory). The tolerances are 4 standard errors at the sample
// size: sqrt(Var/n) for the mean and sqrt((m4 − s⁴)/n) for the variance
// (the large-sample variance of a sample variance, e.g. Kendall's Advanced
// Theory of Statistics; common practice).
func TestPoissonGammaCounts(t *testing.T) {
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months, cfg.Treated = 30, 30, 2, 0
	cfg.BaselinePOIs, cfg.BaselineBuildings, cfg.BaselineRoads = 6, 8, 3
	_, tr := generate(t, cfg)
	if tr.Tallies.Skipped != 0 {
		t.Fatalf("%d planned edits were skipped; the counts would not follow the model", tr.Tallies.Skipped)
	}
	mo := tr.Tallies.Monthly
	for m := 0; m < cfg.Months; m++ {
		n := float64(cfg.Districts())
		x := make([]float64, cfg.Districts())
		for d := range x {
			for _, l := range []string{"geometry", "attribute", "new_feature", "deletion", "bookkeeping"} {
				x[d] += float64(mo.Layer(l)[d][m])
			}
		}
		mean, m2, m4 := moments(x)
		mu := cfg.MeanActivity * cfg.Scale * tr.Calendar[m]
		k := cfg.Dispersion
		wantVar := mu + mu*mu/k
		if se := math.Sqrt(wantVar / n); math.Abs(mean-mu) > 4*se {
			t.Errorf("month %d: mean %.2f, NB2 mean μ = %.2f (4 SE = %.2f)", m, mean, mu, 4*se)
		}
		s2 := m2 * n / (n - 1)
		if se := math.Sqrt((m4 - m2*m2) / n); math.Abs(s2-wantVar) > 4*se {
			t.Errorf("month %d: variance %.1f, NB2 μ + μ²/k = %.1f (4 SE = %.1f)", m, s2, wantVar, 4*se)
		}
		// A Poisson world (Var = μ) must be told apart: the test has power.
		if se := math.Sqrt((m4 - m2*m2) / n); math.Abs(s2-mu) < 4*se {
			t.Errorf("month %d: variance %.1f is within 4 SE of the Poisson variance %.1f", m, s2, mu)
		}
		// Given its rate, a district's count is Poisson: the Pearson statistic
		// Σ (y − λ)²/λ over n districts has mean n and variance 2n
		// (chi-square approximation; Cameron & Trivedi 2013, ch. 5, from memory).
		pearson := 0.0
		for d, y := range x {
			lam := tr.Districts[d].Rate * tr.Calendar[m]
			pearson += (y - lam) * (y - lam) / lam
		}
		if math.Abs(pearson-n) > 4*math.Sqrt(2*n) {
			t.Errorf("month %d: Pearson statistic %.0f for %v districts, want n ± 4·sqrt(2n)", m, pearson, n)
		}
	}
}

// moments returns the mean and the second and fourth central moments.
func moments(x []float64) (mean, m2, m4 float64) {
	for _, v := range x {
		mean += v
	}
	mean /= float64(len(x))
	for _, v := range x {
		d := v - mean
		m2 += d * d
		m4 += d * d * d * d
	}
	return mean, m2 / float64(len(x)), m4 / float64(len(x))
}

// TestPlantedEffects recovers the planted per-layer multipliers from the
// generator's tallies with the ratio of ratios (treated post/pre over
// untreated post/pre), the multiplicative two-group difference-in-differences
// (common practice), in a one-cohort world with large effects.
func TestPlantedEffects(t *testing.T) {
	if !simtest.Validate {
		t.Skip("a default-size world: make validate runs it")
	}
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 8, 8, 24
	cfg.Treated, cfg.Waves = 24, 1
	cfg.MeanActivity = 60
	cfg.Effects = sim.Effects{Geometry: 1, Attribute: 0.5, NewFeature: 2, Deletion: 1.5}
	_, tr := generate(t, cfg)
	start := tr.Cohorts[0].StartIndex
	treated := map[int]bool{}
	for _, id := range tr.Cohorts[0].Districts {
		treated[id-1] = true
	}
	for _, c := range []struct {
		layer string
		want  float64
	}{
		{"geometry", cfg.Effects.Geometry},
		{"attribute", cfg.Effects.Attribute},
		{"new_feature", cfg.Effects.NewFeature},
		{"deletion", cfg.Effects.Deletion},
		{"bookkeeping", 1},
	} {
		var sum [2][2]float64 // [treated][post]
		for d, row := range tr.Tallies.Monthly.Layer(c.layer) {
			for m, v := range row {
				sum[b2i(treated[d])][b2i(m >= start)] += float64(v)
			}
		}
		got := (sum[1][1] / sum[1][0]) / (sum[0][1] / sum[0][0])
		// Relative standard error of a ratio of four Poisson-ish sums,
		// inflated threefold for the district heterogeneity (common practice).
		rse := 3 * math.Sqrt(1/sum[0][0]+1/sum[0][1]+1/sum[1][0]+1/sum[1][1])
		if math.Abs(math.Log(got/c.want)) > 4*rse {
			t.Errorf("%s: ratio of ratios %.3f, planted %.2f (tolerance ±%.0f%%)", c.layer, got, c.want, 400*rse)
		}
	}
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// TestPlantedNeglect checks that imported buildings carry the neglected keys
// at the import rates and organic ones at the organic rates, within 4
// binomial standard errors (common practice).
func TestPlantedNeglect(t *testing.T) {
	cfg := smallConfig()
	dir, tr := generate(t, cfg)
	imports := map[osm.ChangesetID]bool{}
	for _, id := range tr.ImportChangesets {
		imports[osm.ChangesetID(id)] = true
	}
	var n [2]float64
	have := map[string]*[2]float64{}
	for _, o := range readOSM(t, filepath.Join(dir, sim.HistoryFile)) {
		w, ok := o.(*osm.Way)
		if !ok || w.Version != 1 || w.Tags.Find("building") == "" {
			continue
		}
		i := b2i(imports[w.ChangesetID])
		n[i]++
		for _, k := range tr.Keys {
			if k.Class != "building=*" {
				continue
			}
			if have[k.Key] == nil {
				have[k.Key] = new([2]float64)
			}
			if w.Tags.Find(k.Key) != "" {
				have[k.Key][i]++
			}
		}
	}
	if n[0] < 100 || n[1] < 100 {
		t.Fatalf("too few buildings: %v organic, %v imported", n[0], n[1])
	}
	for _, k := range tr.Keys {
		if k.Class != "building=*" {
			continue
		}
		for i, p := range []float64{k.Organic, k.Import} {
			got := have[k.Key][i] / n[i]
			se := math.Sqrt(p * (1 - p) / n[i])
			if math.Abs(got-p) > 4*se+1e-9 {
				t.Errorf("%s on %s buildings: share %.3f, planted %.2f", k.Key, []string{"organic", "imported"}[i], got, p)
			}
		}
		want := "equal"
		if k.Import < k.Organic {
			want = "neglected"
		}
		if k.Planted != want {
			t.Errorf("%s: truth says %q, want %q", k.Key, k.Planted, want)
		}
	}
}

// TestSelectionOnLevels: treated districts are drawn with weight λ_d, so their
// mean rate is above the untreated mean (size-biased Gamma: mean μ(k+1)/k).
func TestSelectionOnLevels(t *testing.T) {
	if !simtest.Validate {
		t.Skip("a default-size world: make validate runs it")
	}
	_, tr := generate(t, sim.DefaultConfig())
	var sum, cnt [2]float64
	for _, d := range tr.Districts {
		i := b2i(d.Cohort > 0)
		sum[i] += d.Rate
		cnt[i]++
	}
	if cnt[1] != float64(sim.DefaultConfig().Treated) {
		t.Fatalf("%v treated districts, want %d", cnt[1], sim.DefaultConfig().Treated)
	}
	if sum[1]/cnt[1] <= sum[0]/cnt[0] {
		t.Errorf("treated mean rate %.1f not above untreated %.1f", sum[1]/cnt[1], sum[0]/cnt[0])
	}
	if len(tr.Cohorts) != 4 || tr.Cohorts[0].StartIndex >= tr.Cohorts[3].StartIndex {
		t.Errorf("cohorts not staggered: %+v", tr.Cohorts)
	}
}

func TestConfigValidate(t *testing.T) {
	for _, c := range []struct {
		name string
		edit func(*sim.Config)
	}{
		{"zero months", func(c *sim.Config) { c.Months = 0 }},
		{"more treated than districts", func(c *sim.Config) { c.Treated = 65 }},
		{"negative treated", func(c *sim.Config) { c.Treated = -1 }},
		{"negative attribute effect", func(c *sim.Config) { c.Effects.Attribute = -0.1 }},
		{"NaN geometry effect", func(c *sim.Config) { c.Effects.Geometry = math.NaN() }},
		{"zero cols", func(c *sim.Config) { c.Cols = 0 }},
		{"more waves than treated", func(c *sim.Config) { c.Waves = 17 }},
		{"zero waves", func(c *sim.Config) { c.Waves = 0 }},
		{"treated with one month", func(c *sim.Config) { c.Months = 1 }},
		{"zero scale", func(c *sim.Config) { c.Scale = 0 }},
		{"changeset limit over the API's", func(c *sim.Config) { c.ChangesetLimit = 10001 }},
		{"shares not summing to 1", func(c *sim.Config) { c.Shares.Bookkeeping = 0.5 }},
		{"dynamic without ramp", func(c *sim.Config) { c.Dynamic, c.RampMonths = true, 0 }},
		{"start not a month", func(c *sim.Config) { c.Start = c.Start.Add(time.Hour) }},
		{"unknown key", func(c *sim.Config) { c.Keys = append(c.Keys, sim.KeyRate{Class: "building=*", Key: "colour"}) }},
		{"rate above 1", func(c *sim.Config) { c.Keys[0].Import = 1.5 }},
		{"grid off the globe", func(c *sim.Config) { c.OriginLat = 89 }},
	} {
		t.Run(c.name, func(t *testing.T) {
			cfg := sim.DefaultConfig()
			c.edit(&cfg)
			err := cfg.Validate()
			if !errors.Is(err, sim.ErrConfig) {
				t.Fatalf("Validate() = %v, want ErrConfig", err)
			}
			dir := filepath.Join(t.TempDir(), "out")
			if _, err := sim.Generate(context.Background(), cfg, dir, false); !errors.Is(err, sim.ErrConfig) {
				t.Fatalf("Generate: %v, want ErrConfig", err)
			}
			if _, err := os.Stat(dir); !errors.Is(err, os.ErrNotExist) {
				t.Errorf("Generate created %s for a bad configuration", dir)
			}
		})
	}
	if err := sim.DefaultConfig().Validate(); err != nil {
		t.Errorf("default config: %v", err)
	}
}

func TestGenerateRefusesNonEmptyFolder(t *testing.T) {
	dir := t.TempDir()
	keep := filepath.Join(dir, "notes.txt")
	if err := os.WriteFile(keep, []byte("mine"), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg := smallConfig()
	cfg.Months, cfg.Treated, cfg.Waves = 3, 1, 1
	if _, err := sim.Generate(context.Background(), cfg, dir, false); !errors.Is(err, sim.ErrOutputExists) {
		t.Fatalf("Generate into a non-empty folder: %v, want ErrOutputExists", err)
	}
	if _, err := os.Stat(filepath.Join(dir, sim.TruthFile)); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("truth.json written although the folder was refused")
	}
	if _, err := sim.Generate(context.Background(), cfg, dir, true); err != nil {
		t.Fatalf("Generate with force: %v", err)
	}
	var tr sim.Truth
	if err := json.Unmarshal(readFile(t, dir, sim.TruthFile), &tr); err != nil {
		t.Fatalf("truth.json: %v", err)
	}
	if tr.Config.Months != 3 || len(tr.Months) != 3 {
		t.Errorf("truth.json months %d/%d, want 3", tr.Config.Months, len(tr.Months))
	}
	if b, _ := os.ReadFile(keep); string(b) != "mine" {
		t.Errorf("force touched a file it does not own")
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 5 {
		t.Errorf("folder holds %d entries, want the 4 outputs and notes.txt (temporary runs removed)", len(entries))
	}
}

func TestGenerateCancelled(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := sim.Generate(ctx, smallConfig(), t.TempDir(), false)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("Generate with a cancelled context: %v", err)
	}
}
