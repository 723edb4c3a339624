package episode

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// fakeHistory is an in-memory Source. Objects must be given in the
// order the store returns them: by type, id, then version.
type fakeHistory struct {
	changesets []*osm.Changeset
	objects    []osm.Object
	err        error // returned by ScanVersions when set
}

func (f *fakeHistory) ScanChangesets(ctx context.Context, fn func(c *osm.Changeset) error) error {
	for _, c := range f.changesets {
		if err := ctx.Err(); err != nil {
			return err
		}
		if err := fn(c); err != nil {
			return err
		}
	}
	return nil
}

func (f *fakeHistory) ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error {
	if f.err != nil {
		return f.err
	}
	for _, o := range f.objects {
		if err := ctx.Err(); err != nil {
			return err
		}
		if o.ObjectID().Type() != t {
			continue
		}
		if err := fn(o); err != nil {
			return err
		}
	}
	return nil
}

var day0 = time.Date(2021, 3, 1, 9, 0, 0, 0, time.UTC)

func at(days float64) time.Time { return day0.Add(time.Duration(days * float64(24*time.Hour))) }

func cset(id osm.ChangesetID, uid osm.UserID, user string, days float64, tags ...string) *osm.Changeset {
	c := &osm.Changeset{ID: id, UserID: uid, User: user, CreatedAt: at(days), ClosedAt: at(days).Add(time.Hour)}
	for i := 0; i+1 < len(tags); i += 2 {
		c.Tags = append(c.Tags, osm.Tag{Key: tags[i], Value: tags[i+1]})
	}
	return c
}

func node(id osm.NodeID, v int, cs osm.ChangesetID, uid osm.UserID, user string, days float64, lon, lat float64, tags ...string) *osm.Node {
	n := &osm.Node{ID: id, Version: v, ChangesetID: cs, UserID: uid, User: user, Timestamp: at(days), Visible: true, Lon: lon, Lat: lat}
	for i := 0; i+1 < len(tags); i += 2 {
		n.Tags = append(n.Tags, osm.Tag{Key: tags[i], Value: tags[i+1]})
	}
	return n
}

func way(id osm.WayID, v int, cs osm.ChangesetID, uid osm.UserID, user string, days float64, tags ...string) *osm.Way {
	w := &osm.Way{ID: id, Version: v, ChangesetID: cs, UserID: uid, User: user, Timestamp: at(days), Visible: true}
	for i := 0; i+1 < len(tags); i += 2 {
		w.Tags = append(w.Tags, osm.Tag{Key: tags[i], Value: tags[i+1]})
	}
	return w
}

func deleted[T interface{ *osm.Node | *osm.Way }](o T) T {
	switch v := any(o).(type) {
	case *osm.Node:
		v.Visible, v.Tags = false, nil
	case *osm.Way:
		v.Visible, v.Tags = false, nil
	}
	return o
}

// history builds a small history. Accounts and places are invented; the
// signs of an import follow the community's import guidelines (OSM wiki,
// Import/Guidelines: dedicated account, import=yes and source on changesets;
// from memory).
//
//	changeset 10, 11, 13: account 501 "harbourdata_import", import=yes,
//	                       source "Harbour County parcels"; days 0, 5 and 60
//	changeset 12:          account 501, import=yes, other source; day 6
//	changeset 20:          account 7 "wren", organic edits; day 7
//	changeset 30:          no metadata; versions by account 502 "bulk_import_bot" (all creations)
func history() *fakeHistory {
	const imp, impName = 501, "harbourdata_import"
	return &fakeHistory{
		changesets: []*osm.Changeset{
			cset(10, imp, impName, 0, "import", "yes", "source", "Harbour County parcels"),
			cset(11, imp, impName, 5, "import", "yes", "source", "Harbour County parcels"),
			cset(12, imp, impName, 6, "import", "yes", "source", "Harbour County addresses"),
			cset(13, imp, impName, 60, "import", "yes", "source", "Harbour County parcels"),
			cset(20, 7, "wren", 7, "comment", "fix"),
		},
		objects: []osm.Object{
			node(1, 1, 10, imp, impName, 0, 10.0, 50.0),
			node(1, 2, 20, 7, "wren", 7, 10.001, 50.0),
			node(2, 1, 10, imp, impName, 0, 10.01, 50.02, "addr:housenumber", "4"),
			node(3, 1, 12, imp, impName, 6, 11.0, 51.0, "addr:housenumber", "9"),
			node(4, 1, 30, 502, "bulk_import_bot", 3, 12.0, 52.0, "amenity", "bench"),
			node(5, 1, 30, 502, "bulk_import_bot", 3, 12.5, 52.5, "amenity", "bench"),
			node(6, 1, 13, imp, impName, 60, 10.5, 50.5, "shop", "bakery"),
			way(100, 1, 10, imp, impName, 0, "building", "yes"),
			way(101, 1, 10, imp, impName, 0, "building", "house"),
			way(101, 2, 11, imp, impName, 5, "building", "house", "building:levels", "2"),
			way(102, 1, 20, 7, "wren", 7, "highway", "residential"),
			deleted(way(102, 2, 11, imp, impName, 5)),
		},
	}
}

func TestDetectImports(t *testing.T) {
	eps, err := Detect(context.Background(), history(), gapRules(t, "30"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	type want struct {
		id                  string
		changesets          []osm.ChangesetID
		matchers            []string
		source              string
		created, mod, del   int
		classes             []ClassCount
		firstMonth, lastMon string
		bbox                []float64
	}
	wants := []want{
		{"imp-10", []osm.ChangesetID{10, 11}, []string{"import-tag", "import-account"}, "Harbour County parcels", 4, 1, 1,
			// way 102 was highway=residential before the import deleted it
			[]ClassCount{{"building=*", 3}, {"addr:housenumber=*", 1}, {"highway=residential", 1}},
			"2021-03", "2021-03", nil},
		{"imp-30", []osm.ChangesetID{30}, []string{"import-account"}, "", 2, 0, 0,
			[]ClassCount{{"amenity=bench", 2}}, "2021-03", "2021-03", []float64{12.0, 52.0, 12.5, 52.5}},
		{"imp-12", []osm.ChangesetID{12}, []string{"import-tag", "import-account"}, "Harbour County addresses", 1, 0, 0,
			[]ClassCount{{"addr:housenumber=*", 1}}, "2021-03", "2021-03", []float64{11.0, 51.0, 11.0, 51.0}},
		{"imp-13", []osm.ChangesetID{13}, []string{"import-tag", "import-account"}, "Harbour County parcels", 1, 0, 0,
			[]ClassCount{{"shop=*", 1}}, "2021-04", "2021-04", []float64{10.5, 50.5, 10.5, 50.5}},
	}
	if len(eps) != len(wants) {
		for _, e := range eps {
			t.Logf("%+v", e)
		}
		t.Fatalf("got %d episodes, want %d", len(eps), len(wants))
	}
	for i, w := range wants {
		e := eps[i]
		t.Run(w.id, func(t *testing.T) {
			if e.ID != w.id || !slices.Equal(e.Changesets, w.changesets) || e.Source != w.source {
				t.Errorf("episode %s %v source %q, want %s %v %q", e.ID, e.Changesets, e.Source, w.id, w.changesets, w.source)
			}
			if !slices.Equal(e.Matchers, w.matchers) {
				t.Errorf("matchers %v, want %v", e.Matchers, w.matchers)
			}
			if e.Created != w.created || e.Modified != w.mod || e.Deleted != w.del {
				t.Errorf("created/modified/deleted %d/%d/%d, want %d/%d/%d", e.Created, e.Modified, e.Deleted, w.created, w.mod, w.del)
			}
			if !slices.Equal(e.Classes, w.classes) {
				t.Errorf("classes %v, want %v", e.Classes, w.classes)
			}
			if e.FirstMonth != w.firstMonth || e.LastMonth != w.lastMon {
				t.Errorf("months %s..%s, want %s..%s", e.FirstMonth, e.LastMonth, w.firstMonth, w.lastMon)
			}
			if w.bbox != nil && !slices.Equal(e.BBox, w.bbox) {
				t.Errorf("bbox %v, want %v", e.BBox, w.bbox)
			}
		})
	}
	// imp-10: bbox over the node versions of changesets 10 and 11 (11 made no node version).
	if got, want := eps[0].BBox, []float64{10.0, 50.0, 10.01, 50.02}; !slices.Equal(got, want) {
		t.Errorf("imp-10 bbox %v, want %v", got, want)
	}
	if got := eps[0].Accounts; !slices.Equal(got, []Account{{501, "harbourdata_import"}}) {
		t.Errorf("imp-10 accounts %v", got)
	}
}

// TestDetectGap checks the grouping gap: changesets 0, 5 and 60 days apart
// form one episode when the gap exceeds the pause, two otherwise.
func TestDetectGap(t *testing.T) {
	tests := []struct {
		gap  string
		want [][]osm.ChangesetID
	}{
		{"0", [][]osm.ChangesetID{{10}, {11}, {13}}},
		{"4.9", [][]osm.ChangesetID{{10}, {11}, {13}}},
		{"5", [][]osm.ChangesetID{{10, 11}, {13}}}, // 11 opens 4 days 23 hours after 10 closed
		{"60", [][]osm.ChangesetID{{10, 11, 13}}},
	}
	for _, tt := range tests {
		t.Run(tt.gap, func(t *testing.T) {
			r := gapRules(t, tt.gap)
			h := history()
			h.changesets = slices.DeleteFunc(slices.Clone(h.changesets), func(c *osm.Changeset) bool { return c.ID == 12 })
			eps, err := Detect(context.Background(), h, r, Options{})
			if err != nil {
				t.Fatal(err)
			}
			var got [][]osm.ChangesetID
			for _, e := range eps {
				if e.Source == "Harbour County parcels" {
					got = append(got, e.Changesets)
				}
			}
			if !slices.EqualFunc(got, tt.want, slices.Equal) {
				t.Errorf("episodes %v, want %v", got, tt.want)
			}
		})
	}
}

func gapRules(t testing.TB, gap string) *rules.RuleSet {
	t.Helper()
	src := strings.Replace(string(rules.DefaultYAML()), "group_gap_days: 365", "group_gap_days: "+gap, 1)
	r, err := rules.Parse("gap.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func TestDetectManual(t *testing.T) {
	tests := []struct {
		name    string
		opts    Options
		want    []osm.ChangesetID
		wantErr string
	}{
		{"changesets", Options{Changesets: []int64{20, 11}}, []osm.ChangesetID{11, 20}, ""},
		{"account name", Options{Account: "wren"}, []osm.ChangesetID{20}, ""},
		{"account id", Options{Account: "501"}, []osm.ChangesetID{10, 11, 12, 13}, ""},
		{"account from versions only", Options{Account: "bulk_import_bot"}, []osm.ChangesetID{30}, ""},
		{"union", Options{Account: "wren", Changesets: []int64{30}}, []osm.ChangesetID{20, 30}, ""},
		{"unknown changeset", Options{Changesets: []int64{10, 99, 98}}, nil, "99, 98"},
		{"unknown account", Options{Account: "nobody"}, nil, `"nobody"`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			eps, err := Detect(context.Background(), history(), rules.Default(), tt.opts)
			if tt.wantErr != "" {
				if !errors.Is(err, ErrNoImport) || !strings.Contains(err.Error(), tt.wantErr) {
					t.Fatalf("err = %v, want ErrNoImport naming %s", err, tt.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if len(eps) != 1 {
				t.Fatalf("got %d episodes, want 1", len(eps))
			}
			e := eps[0]
			wantID := fmt.Sprintf("manual-%d", tt.want[0])
			if e.ID != wantID || !slices.Equal(e.Changesets, tt.want) || !slices.Equal(e.Matchers, []string{ManualMatcher}) {
				t.Errorf("episode %s %v %v, want %s %v [manual]", e.ID, e.Changesets, e.Matchers, wantID, tt.want)
			}
		})
	}
}

func TestDetectIncludeEmpty(t *testing.T) {
	h := history()
	h.changesets = append(h.changesets, cset(40, 501, "harbourdata_import", 1, "import", "yes", "source", "Harbour County parcels"))
	for _, include := range []bool{false, true} {
		eps, err := Detect(context.Background(), h, rules.Default(), Options{IncludeEmpty: include})
		if err != nil {
			t.Fatal(err)
		}
		if got := slices.Contains(eps[0].Changesets, 40); got != include {
			t.Errorf("IncludeEmpty %v: changeset 40 in %v", include, eps[0].Changesets)
		}
	}
}

func TestDetectErrors(t *testing.T) {
	boom := errors.New("disk on fire")
	h := history()
	h.err = boom
	if _, err := Detect(context.Background(), h, rules.Default(), Options{}); !errors.Is(err, boom) || !strings.Contains(err.Error(), "scan node versions") {
		t.Errorf("err = %v, want the source's error naming the scan", err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Detect(ctx, history(), rules.Default(), Options{}); !errors.Is(err, context.Canceled) {
		t.Errorf("err = %v, want context.Canceled", err)
	}
}

func TestEpisodeJSON(t *testing.T) {
	eps, err := Detect(context.Background(), history(), rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(eps[1])
	if err != nil {
		t.Fatal(err)
	}
	want := `{"id":"imp-30","matchers":["import-account"],"accounts":[{"uid":502,"name":"bulk_import_bot"}],` +
		`"changesets":[30],"created":2,"modified":0,"deleted":0,"classes":[{"class":"amenity=bench","count":2}],` +
		`"first":"2021-03-04T09:00:00Z","last":"2021-03-04T09:00:00Z","first_month":"2021-03","last_month":"2021-03",` +
		`"bbox":[12,52,12.5,52.5]}`
	if string(b) != want {
		t.Errorf("JSON\n%s\nwant\n%s", b, want)
	}
}

func TestReadChangesetIDs(t *testing.T) {
	tests := []struct {
		name, in string
		want     []int64
		wantErr  string
	}{
		{"lines and commas", "# import of harbour parcels\n10, 11\n12\t13 # last\n", []int64{10, 11, 12, 13}, ""},
		{"crlf", "10\r\n11\r\n", []int64{10, 11}, ""},
		{"bad id", "10\n11, x12\n", nil, "ids.txt:2:5: \"x12\" is not a changeset id"},
		{"negative", "-4\n", nil, "ids.txt:1:1: \"-4\""},
		{"empty", "# nothing\n", nil, "ids.txt: no changeset ids"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := ReadChangesetIDs(strings.NewReader(tt.in), "ids.txt")
			if tt.wantErr != "" {
				if err == nil || !strings.Contains(err.Error(), tt.wantErr) {
					t.Fatalf("err = %v, want %q", err, tt.wantErr)
				}
				return
			}
			if err != nil || !slices.Equal(got, tt.want) {
				t.Errorf("got %v, %v, want %v", got, err, tt.want)
			}
		})
	}
}

func TestWriteEpisodes(t *testing.T) {
	eps, err := Detect(context.Background(), history(), gapRules(t, "30"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	if err := Write(&b, eps[:2]); err != nil {
		t.Fatal(err)
	}
	want := "EPISODE  FIRST    LAST     ACCOUNTS                  CHANGESETS  CREATED  MODIFIED  DELETED  CLASSES                                                    MATCHED BY\n" +
		"imp-10   2021-03  2021-03  harbourdata_import (501)  2           4        1         1        building=* 3, addr:housenumber=* 1, highway=residential 1  import-tag,import-account\n" +
		"imp-30   2021-03  2021-03  bulk_import_bot (502)     1           2        0         0        amenity=bench 2                                            import-account\n" +
		"\n" + Caution + "\n"
	if b.String() != want {
		t.Errorf("got\n%s\nwant\n%s", b.String(), want)
	}
	b.Reset()
	if err := WriteJSON(&b, nil); err != nil || b.String() != "[]\n" {
		t.Errorf("empty JSON = %q, %v", b.String(), err)
	}
}

// TestDetectSimulated checks Detect against the simulator's truth: the
// changesets it planted as import changesets (truth.json import_changesets)
// must be exactly the changesets of the detected episodes, and every
// episode's account one of the planted import accounts. The world is
// invented by audit/sim; it is stored through ingest as the command does.
func TestDetectSimulated(t *testing.T) {
	if testing.Short() {
		t.Skip("generates and ingests a simulated history")
	}
	ctx := context.Background()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 4, 4, 18
	cfg.Treated, cfg.Waves = 4, 2
	cfg.Scale = 0.25
	cfg.ChangesetLimit = 40 // several changesets per district import
	dir := t.TempDir()
	truth, err := sim.Generate(ctx, cfg, dir, false)
	if err != nil {
		t.Fatal(err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	paths := []string{filepath.Join(dir, sim.ChangesetsFile), filepath.Join(dir, sim.HistoryFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		t.Fatal(err)
	}
	eps, err := Detect(ctx, st, rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	var got []int64
	accounts := map[osm.UserID]bool{}
	for _, a := range truth.ImportAccounts {
		accounts[osm.UserID(a.UID)] = true
	}
	for _, e := range eps {
		for _, c := range e.Changesets {
			got = append(got, int64(c))
		}
		if len(e.Accounts) != 1 || !accounts[e.Accounts[0].UID] {
			t.Errorf("episode %s accounts %v are not one planted import account", e.ID, e.Accounts)
		}
		if e.Created == 0 || e.Source == "" {
			t.Errorf("episode %s: created %d, source %q", e.ID, e.Created, e.Source)
		}
	}
	slices.Sort(got)
	want := slices.Clone(truth.ImportChangesets)
	slices.Sort(want)
	if len(want) < 2*cfg.Treated {
		t.Fatalf("the simulation planted only %d import changesets; the config no longer splits imports", len(want))
	}
	t.Logf("%d episodes, %d import changesets planted", len(eps), len(want))
	if !slices.Equal(got, want) {
		t.Errorf("detected import changesets %v\nplanted %v", got, want)
	}
	// Each import account loads a block of waves months apart, within the
	// default one-year gap: one episode per account (truth.json's accounts).
	if len(eps) != len(truth.ImportAccounts) {
		t.Errorf("%d episodes for %d import accounts", len(eps), len(truth.ImportAccounts))
	}
}

// TestDetectRealTIGER runs Detect on real history shipped with the osm
// module (github.com/paulmach/osm v0.8.0, annotate/testdata/relation_2714790.osm,
// the members of a relation in California with all their versions). Account
// 7168 is the 2007 TIGER import account (OSM wiki, TIGER page; from memory).
// Counts read off the file with grep: 207 versions by uid 7168, all version 1
// and visible, in 4 changesets, all timestamped 2007-09.
func TestDetectRealTIGER(t *testing.T) {
	path := osmModuleFile(t, "annotate/testdata/relation_2714790.osm")
	ctx := context.Background()
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if _, err := ingest.Ingest(ctx, st, []string{path}, ingest.IngestOptions{}); err != nil {
		t.Fatal(err)
	}
	// The built-in rules look for the signs today's guidelines ask for; the
	// 2007 upload carries none of them (no changeset metadata, no import tag).
	eps, err := Detect(ctx, st, rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(eps) != 0 {
		t.Errorf("built-in rules found %d episodes in the TIGER history, want 0", len(eps))
	}
	src := strings.Replace(string(rules.DefaultYAML()), "  matchers:\n", "  matchers:\n    - name: tiger-account\n      account_ids: [7168]\n", 1)
	r, err := rules.Parse("tiger.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	for _, opts := range []Options{{}, {Account: "7168"}} {
		eps, err := Detect(ctx, st, r, opts)
		if err != nil {
			t.Fatal(err)
		}
		if len(eps) != 1 {
			t.Fatalf("%+v: %d episodes, want 1", opts, len(eps))
		}
		e := eps[0]
		if len(e.Changesets) != 4 || e.Created != 207 || e.Modified != 0 || e.Deleted != 0 ||
			e.FirstMonth != "2007-09" || e.LastMonth != "2007-09" {
			t.Errorf("%+v: episode %s changesets %v created/modified/deleted %d/%d/%d months %s..%s, want 4 changesets, 207/0/0, 2007-09",
				opts, e.ID, e.Changesets, e.Created, e.Modified, e.Deleted, e.FirstMonth, e.LastMonth)
		}
		if want := fmt.Sprintf("%s-%d", map[bool]string{true: "manual", false: "imp"}[opts.Account != ""], e.Changesets[0]); e.ID != want {
			t.Errorf("ID %s, want %s", e.ID, want)
		}
	}
}

// osmModuleFile returns the path of a file in the osm module's source in the
// module cache; the test skips when the cache does not hold it.
func osmModuleFile(t testing.TB, rel string) string {
	t.Helper()
	out, err := exec.Command("go", "env", "GOMODCACHE").Output()
	if err != nil {
		t.Skipf("go env GOMODCACHE: %v", err)
	}
	p := filepath.Join(strings.TrimSpace(string(out)), "github.com", "paulmach", "osm@v0.8.0", rel)
	if _, err := os.Stat(p); err != nil {
		t.Skipf("osm module testdata not in the module cache: %v", err)
	}
	return p
}

// BenchmarkDetectImports detects imports in real history (the osm module's
// relation_2714790.osm, held in an in-memory store) with a rule naming the
// TIGER account; throughput in stored versions read per second.
func BenchmarkDetectImports(b *testing.B) {
	path := osmModuleFile(b, "annotate/testdata/relation_2714790.osm")
	ctx := context.Background()
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	rep, err := ingest.Ingest(ctx, st, []string{path}, ingest.IngestOptions{})
	if err != nil {
		b.Fatal(err)
	}
	versions := rep.Sum().Versions
	src := strings.Replace(string(rules.DefaultYAML()), "  matchers:\n", "  matchers:\n    - name: tiger-account\n      account_ids: [7168]\n", 1)
	r, err := rules.Parse("tiger.yaml", []byte(src))
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	n := 0
	for b.Loop() {
		eps, err := Detect(ctx, st, r, Options{})
		if err != nil || len(eps) != 1 {
			b.Fatalf("%d episodes, %v", len(eps), err)
		}
		n++
	}
	b.ReportMetric(float64(versions)*float64(n)/b.Elapsed().Seconds(), "versions/s")
}

func ExampleDetect() {
	// history() is an in-memory Source with invented accounts; a
	// *ingest.Store is the usual one. The rules group changesets at most 30
	// days apart (the default is a year).
	src := strings.Replace(string(rules.DefaultYAML()), "group_gap_days: 365", "group_gap_days: 30", 1)
	r, err := rules.Parse("gap30.yaml", []byte(src))
	if err != nil {
		fmt.Println(err)
		return
	}
	eps, err := Detect(context.Background(), history(), r, Options{})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, e := range eps {
		fmt.Println(e.ID, e.Changesets, e.Created, e.Matchers)
	}
	// Output:
	// imp-10 [10 11] 4 [import-tag import-account]
	// imp-30 [30] 2 [import-account]
	// imp-12 [12] 1 [import-tag import-account]
	// imp-13 [13] 1 [import-tag import-account]
}
