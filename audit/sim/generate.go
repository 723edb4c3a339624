package sim

import (
	"bufio"
	"compress/gzip"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geojson"
	"github.com/paulmach/osm"
	"gonum.org/v1/gonum/stat/distuv"
)

// File names Generate writes into its folder.
const (
	HistoryFile    = "history.osh.gz"
	ChangesetsFile = "changesets.osm.gz"
	DistrictsFile  = "districts.geojson"
	TruthFile      = "truth.json"
)

// layer is the simulator's own layer code, in the order of layers.Layers with bookkeeping last.
type layer uint8

const (
	layerGeometry layer = iota
	layerAttribute
	layerNewFeature
	layerDeletion
	layerBookkeeping
	nLayers
)

// runLimit is the size of rendered XML kept in memory before a sorted run is spilled.
const runLimit = 48 << 20

// Object state is kept compact: it is the only memory that grows with the
// world. Times are seconds since epochBase in a uint32 (Validate keeps every
// time before 2130); tags are interned.
const epochBase = 946684800 // 2000-01-01T00:00:00Z

type nodeRec struct {
	lat, lon int32
	ver      uint32
	last     uint32
}

func (n *nodeRec) lastAt() int64 { return int64(n.last) + epochBase }

type wayRec struct {
	ver   uint32
	last  uint32
	nodes []uint32
}

func (w *wayRec) lastAt() int64 { return int64(w.last) + epochBase }

// ctag is an interned tag: indexes into gen.keyNames and gen.vals.
type ctag struct {
	k uint16
	v uint32
}

type feature struct {
	kind     uint8
	imported bool
	district int32
	slot     int32 // index in district.live[kind]
	id       uint32
	tags     []ctag // class tag first
}

type district struct {
	id       int
	name     string
	col, row int
	rate     float64
	start    int // study-month index of the import, -1 untreated
	cohort   int
	streets  []string
	live     [nKinds][]int32
	minLat   int32
	minLon   int32
	spanLat  int32
	spanLon  int32
}

func (d *district) placeName(r *rand.Rand) string {
	return syllA[r.IntN(len(syllA))] + syllC[r.IntN(len(syllC))] + " " + d.name
}

type user struct {
	uid  int
	name string
}

// session is one changeset's worth of work planned for a month.
type session struct {
	start    int64
	seq      int
	district int32
	uid      int
	actions  []layer // organic edits, in order
	imports  []uint8 // import: kinds of features to load
	account  int     // index in accounts for imports
	step     int64   // seconds between edits
}

type gen struct {
	cfg   Config
	rng   *rand.Rand
	src   *rand.PCG
	truth *Truth

	nodes     []nodeRec
	ways      []wayRec
	features  []feature
	districts []district
	users     []user
	cum       []float64 // cumulative activity weights of users, in join order
	accounts  []Account

	keyIdx   map[string]uint16
	keyNames []string
	valIdx   map[string]uint32
	vals     []string
	scratch  osm.Tags

	out   runWriter
	csOut *bufio.Writer
	csBuf []byte
	csID  int64

	// current changeset
	cur struct {
		id             int64
		uid            int
		user           string
		changes        int
		first, last    int64
		minLat, minLon int32
		maxLat, maxLon int32
		imported       bool
		tags           osm.Tags
	}
	month int             // study-month index being generated, -1 for baseline
	ret   *retentionState // the Retention plan's newcomers (newcomers.go)
}

// Generate writes a simulated world for cfg into dir (created if missing) and
// returns what it planted and counted. An existing non-empty dir is refused
// with ErrOutputExists unless force is set, in which case the four output
// files are replaced. ctx is checked once per month and per session batch.
func Generate(ctx context.Context, cfg Config, dir string, force bool) (*Truth, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if err := prepareDir(dir, force); err != nil {
		return nil, err
	}
	tmp, err := os.MkdirTemp(dir, ".sim-runs-")
	if err != nil {
		return nil, fmt.Errorf("sim: %w", err)
	}
	defer os.RemoveAll(tmp)

	g := newGen(cfg)
	g.out = runWriter{dir: tmp, limit: runLimit, buf: make([]byte, 0, runLimit+4<<20), idx: make([]runRec, 0, 1<<16)}
	if err := g.setup(); err != nil {
		return nil, err
	}

	csPath := filepath.Join(dir, ChangesetsFile)
	csFile, err := os.Create(csPath)
	if err != nil {
		return nil, fmt.Errorf("sim: %w", err)
	}
	defer csFile.Close()
	csZip, _ := gzip.NewWriterLevel(csFile, gzip.BestSpeed)
	g.csOut = bufio.NewWriterSize(csZip, 1<<20)
	g.csOut.WriteString("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<osm version=\"0.6\" generator=\"loadwake simulate\">\n")

	for m := -1; m < cfg.Months; m++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		if err := g.runMonth(ctx, m); err != nil {
			return nil, err
		}
	}
	g.csOut.WriteString("</osm>\n")
	if err := g.csOut.Flush(); err != nil {
		return nil, fmt.Errorf("sim: write %s: %w", csPath, err)
	}
	if err := csZip.Close(); err != nil {
		return nil, fmt.Errorf("sim: write %s: %w", csPath, err)
	}
	if err := csFile.Close(); err != nil {
		return nil, fmt.Errorf("sim: write %s: %w", csPath, err)
	}

	if err := g.writeHistory(filepath.Join(dir, HistoryFile)); err != nil {
		return nil, err
	}
	if err := g.writeDistricts(filepath.Join(dir, DistrictsFile)); err != nil {
		return nil, err
	}
	if g.accounts != nil {
		g.truth.ImportAccounts = g.accounts
	}
	g.truth.Tallies.Nodes = int64(len(g.nodes))
	g.truth.Tallies.Ways = int64(len(g.ways))
	if err := writeJSON(filepath.Join(dir, TruthFile), g.truth); err != nil {
		return nil, err
	}
	return g.truth, nil
}

func prepareDir(dir string, force bool) error {
	entries, err := os.ReadDir(dir)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return fmt.Errorf("sim: create output folder: %w", err)
		}
		return nil
	case err != nil:
		return fmt.Errorf("sim: output folder: %w", err)
	case len(entries) > 0 && !force:
		return fmt.Errorf("%w: %s (use force to overwrite)", ErrOutputExists, dir)
	}
	return nil
}

func newGen(cfg Config) *gen {
	src := rand.NewPCG(cfg.Seed, cfg.Seed^0x9e3779b97f4a7c15)
	g := &gen{cfg: cfg, src: src, rng: rand.New(src), keyIdx: map[string]uint16{}, valIdx: map[string]uint32{}}
	g.truth = &Truth{
		Generator: "loadwake simulate",
		Region: Region{
			Name:      "Quorvesk Isle",
			Note:      "invented region: names, accounts, agencies and datasets are made up; the grid lies in open water",
			OriginLat: cfg.OriginLat, OriginLon: cfg.OriginLon, CellDeg: cfg.CellDeg,
		},
		Config:           cfg,
		Effects:          cfg.Effects,
		Dynamic:          cfg.Dynamic,
		TrendSelection:   cfg.TrendSelection,
		Cohorts:          []Cohort{},
		ImportAccounts:   []Account{},
		ImportChangesets: []int64{},
		Keys:             []PlantedKey{},
	}
	if cfg.Dynamic {
		g.truth.RampMonths = cfg.RampMonths
	}
	return g
}

func monthLabel(cfg Config, m int) string {
	return cfg.Start.AddDate(0, m, 0).Format("2006-01")
}

// calendar is the shared activity multiplier of study month m.
func (c Config) calendar(m int) float64 {
	mo := float64(c.Start.AddDate(0, m, 0).Month())
	return math.Exp(c.TrendPerYear*float64(m)/12 + c.Seasonality*math.Cos(2*math.Pi*(mo-7)/12))
}

func (g *gen) setup() error {
	cfg := g.cfg
	r := g.rng
	for m := 0; m < cfg.Months; m++ {
		g.truth.Months = append(g.truth.Months, monthLabel(cfg, m))
		g.truth.Calendar = append(g.truth.Calendar, cfg.calendar(m))
	}
	g.truth.Baseline = monthLabel(cfg, -1)

	// Districts with Gamma rates (mean μ·Scale, shape k): Poisson-gamma counts.
	gamma := distuv.Gamma{Alpha: cfg.Dispersion, Beta: cfg.Dispersion / (cfg.MeanActivity * cfg.Scale), Src: g.src}
	names := map[string]bool{}
	n := cfg.Districts()
	g.districts = make([]district, n)
	for i := range g.districts {
		d := &g.districts[i]
		d.id = i + 1
		d.col, d.row = i%cfg.Cols, i/cfg.Cols
		for {
			d.name = inventName(r)
			if !names[d.name] || len(names) > 1500 {
				break
			}
		}
		if names[d.name] {
			d.name += " " + strconv.Itoa(d.id)
		}
		names[d.name] = true
		d.rate = gamma.Rand()
		d.start = -1
		for s := 0; s < 4; s++ {
			d.streets = append(d.streets, syllA[r.IntN(len(syllA))]+syllC[r.IntN(len(syllC))]+" "+roads[r.IntN(len(roads))])
		}
		d.minLat = e7(cfg.OriginLat + float64(d.row)*cfg.CellDeg)
		d.minLon = e7(cfg.OriginLon + float64(d.col)*cfg.CellDeg)
		d.spanLat = e7(cfg.CellDeg)
		d.spanLon = e7(cfg.CellDeg)
	}

	// Import accounts come first in uid order.
	agencies := []string{"Quorvesk County Survey Office", "Tharnmere Land Registry", "Oskvale Planning Board", "Ilmbrook Harbour Authority"}
	for a := 0; a < cfg.ImportAccounts; a++ {
		ag := agencies[a%len(agencies)]
		if a >= len(agencies) {
			ag += " " + strconv.Itoa(a/len(agencies)+1)
		}
		uid := len(g.users) + 1
		acc := Account{
			UID:       uid,
			User:      "import_" + handA[a%len(handA)] + "_" + strconv.Itoa(uid),
			Agency:    ag,
			Dataset:   ag + " building and address dataset " + strconv.Itoa(2018+a),
			Districts: []int{},
		}
		g.accounts = append(g.accounts, acc)
		g.users = append(g.users, user{uid: uid, name: acc.User})
		g.cum = append(g.cum, 0) // never drawn for organic work
	}

	// Treated districts: as assigned (plan.go), or weighted sampling without
	// replacement, weight rate^LevelSelection.
	if cfg.Assignment != nil {
		g.assignCohorts()
	} else if cfg.Treated > 0 {
		w := make([]float64, n)
		for i, d := range g.districts {
			w[i] = math.Pow(d.rate, cfg.LevelSelection)
			if !(w[i] > 0) || math.IsInf(w[i], 0) {
				w[i] = 1e-12
			}
		}
		var chosen []int
		for len(chosen) < cfg.Treated {
			total := 0.0
			for _, x := range w {
				total += x
			}
			u := r.Float64() * total
			pick := -1
			for i, x := range w {
				if x == 0 {
					continue
				}
				pick = i
				if u < x {
					break
				}
				u -= x
			}
			chosen = append(chosen, pick)
			w[pick] = 0
		}
		r.Shuffle(len(chosen), func(i, j int) { chosen[i], chosen[j] = chosen[j], chosen[i] })
		lo := max(1, cfg.Months/4)
		hi := max(lo, min(cfg.Months-1, 3*cfg.Months/4))
		for wv := 0; wv < cfg.Waves; wv++ {
			start := lo
			if cfg.Waves > 1 {
				start = lo + (hi-lo)*wv/(cfg.Waves-1)
			}
			c := Cohort{Wave: wv + 1, Start: monthLabel(cfg, start), StartIndex: start, Districts: []int{}}
			for k := wv; k < len(chosen); k += cfg.Waves {
				d := &g.districts[chosen[k]]
				d.start, d.cohort = start, wv+1
				c.Districts = append(c.Districts, d.id)
			}
			slices.Sort(c.Districts)
			g.truth.Cohorts = append(g.truth.Cohorts, c)
		}
	}
	for _, d := range g.districts {
		td := District{ID: d.id, Name: d.name, Col: d.col, Row: d.row, Rate: d.rate, Cohort: d.cohort, StartIndex: d.start}
		if d.start >= 0 {
			td.Start = monthLabel(cfg, d.start)
		}
		g.truth.Districts = append(g.truth.Districts, td)
	}
	for _, k := range cfg.Keys {
		p := PlantedKey{KeyRate: k, Planted: "equal"}
		if k.Import < k.Organic {
			p.Planted = "neglected"
		} else if k.Import > k.Organic {
			p.Planted = "more"
		}
		g.truth.Keys = append(g.truth.Keys, p)
	}
	g.addUsers(cfg.Contributors)
	if n*cfg.Months <= MonthlyLimit {
		mk := func() [][]int64 {
			x := make([][]int64, n)
			for i := range x {
				x[i] = make([]int64, cfg.Months)
			}
			return x
		}
		g.truth.Tallies.Monthly = &Monthly{mk(), mk(), mk(), mk(), mk()}
	}
	return nil
}

// addUsers adds k contributors with Pareto activity weights.
func (g *gen) addUsers(k int) {
	for i := 0; i < k; i++ {
		uid := len(g.users) + 1
		w := math.Pow(1-g.rng.Float64(), -1/g.cfg.ActivityTail)
		g.users = append(g.users, user{uid: uid, name: inventHandle(g.rng, uid)})
		g.cum = append(g.cum, lastOr0(g.cum)+w)
	}
}

func lastOr0(x []float64) float64 {
	if len(x) == 0 {
		return 0
	}
	return x[len(x)-1]
}

// drawUser picks a contributor who has joined, weighted by activity.
func (g *gen) drawUser() int {
	u := g.rng.Float64() * lastOr0(g.cum)
	i := max(sort.SearchFloat64s(g.cum, u), len(g.accounts)) // accounts have weight 0
	return g.users[min(i, len(g.cum)-1)].uid
}

func e7(deg float64) int32 { return int32(math.Round(deg * 1e7)) }

// factor is the planted multiplier of layer l in district d at study month m.
func (g *gen) factor(d *district, l layer, m int) float64 {
	f := 1.0
	if d.start >= 0 && g.cfg.TrendSelection {
		f *= math.Exp(g.cfg.PreTrendPerYear * (float64(m) - float64(g.cfg.Months)/2) / 12)
	}
	if d.start < 0 || m < d.start {
		return f
	}
	var e float64
	switch l {
	case layerGeometry:
		e = g.cfg.Effects.Geometry
	case layerAttribute:
		e = g.cfg.Effects.Attribute
	case layerNewFeature:
		e = g.cfg.Effects.NewFeature
	case layerDeletion:
		e = g.cfg.Effects.Deletion
	default:
		return f
	}
	if g.cfg.Dynamic {
		frac := math.Min(1, float64(m-d.start+1)/float64(g.cfg.RampMonths))
		e = 1 + (e-1)*frac
	}
	return f * e
}

func (g *gen) share(l layer) float64 {
	s := g.cfg.Shares
	return [...]float64{s.Geometry, s.Attribute, s.NewFeature, s.Deletion, s.Bookkeeping}[l]
}

func (g *gen) poisson(lambda float64) int {
	if lambda <= 0 {
		return 0
	}
	return int(distuv.Poisson{Lambda: lambda, Src: g.src}.Rand())
}

// runMonth plans the month's sessions, runs them in time order and writes
// their changesets. m is the study-month index, -1 for the baseline month.
func (g *gen) runMonth(ctx context.Context, m int) error {
	g.month = m
	cfg := g.cfg
	r := g.rng
	t0 := cfg.Start.AddDate(0, m, 0).Unix()
	t1 := cfg.Start.AddDate(0, m+1, 0).Unix()
	window := t1 - t0 - 3*3600
	if m >= 0 {
		g.addUsers(g.poisson(cfg.NewcomersPerMonth * cfg.Scale))
	}
	var sessions []session
	plan := func(di int, acts []layer, mean float64) {
		r.Shuffle(len(acts), func(i, j int) { acts[i], acts[j] = acts[j], acts[i] })
		for len(acts) > 0 {
			size := min(len(acts), 1+g.poisson(mean-1))
			s := session{
				start:    t0 + r.Int64N(window),
				seq:      len(sessions),
				district: int32(di),
				uid:      g.drawUser(),
				actions:  acts[:size:size],
				step:     15 + r.Int64N(max(1, 3000/int64(size))),
			}
			sessions = append(sessions, s)
			acts = acts[size:]
		}
	}
	for di := range g.districts {
		d := &g.districts[di]
		var acts []layer
		if m < 0 {
			sc := cfg.Scale * (0.5 + 0.5*d.rate/(cfg.MeanActivity*cfg.Scale))
			k := int(math.Round(sc * float64(cfg.BaselinePOIs+cfg.BaselineBuildings+cfg.BaselineRoads)))
			for range k {
				acts = append(acts, layerNewFeature)
			}
			plan(di, acts, 3*cfg.SessionMean)
			continue
		}
		base := d.rate * cfg.calendar(m)
		for l := layer(0); l < nLayers; l++ {
			for range g.poisson(base * g.share(l) * g.factor(d, l, m)) {
				acts = append(acts, l)
			}
		}
		plan(di, acts, cfg.SessionMean)
	}
	// Imports of the cohorts starting this month.
	for di := range g.districts {
		d := &g.districts[di]
		if m < 0 || d.start != m {
			continue
		}
		// Each account loads a contiguous block of waves, as one import
		// project working through its area does.
		acc := (d.cohort - 1) * len(g.accounts) / max(cfg.Waves, 1)
		acc = min(acc, len(g.accounts)-1)
		g.accounts[acc].Districts = append(g.accounts[acc].Districts, d.id)
		nb := int(math.Round(float64(cfg.ImportBuildings) * cfg.Scale))
		np := int(math.Round(float64(cfg.ImportPOIs) * cfg.Scale))
		var kinds []uint8
		for range nb {
			kinds = append(kinds, kindBuilding)
		}
		for range np {
			kinds = append(kinds, kindPOI)
		}
		at := t0 + 86400*int64(2+r.IntN(10)) + r.Int64N(43200)
		for len(kinds) > 0 {
			size, changes := 0, 0
			for size < len(kinds) {
				c := 1
				if kinds[size] == kindBuilding {
					c = 5
				}
				if changes+c > cfg.ChangesetLimit {
					break
				}
				changes += c
				size++
			}
			sessions = append(sessions, session{start: at, seq: len(sessions), district: int32(di),
				uid: g.accounts[acc].UID, imports: kinds[:size:size], account: acc})
			kinds = kinds[size:]
			at += 600
		}
	}
	sessions = append(sessions, g.retentionSessions(m, len(sessions))...)
	slices.SortFunc(sessions, func(a, b session) int {
		if a.start != b.start {
			if a.start < b.start {
				return -1
			}
			return 1
		}
		return a.seq - b.seq
	})
	for i := range sessions {
		if i%1024 == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		if err := g.runSession(&sessions[i]); err != nil {
			return err
		}
	}
	return nil
}

func (g *gen) beginChangeset(s *session) {
	g.cur.id = g.csID + 1
	u := g.users[s.uid-1]
	g.cur.uid, g.cur.user = u.uid, u.name
	g.cur.changes = 0
	g.cur.first, g.cur.last = s.start, s.start
	g.cur.minLat, g.cur.minLon = math.MaxInt32, math.MaxInt32
	g.cur.maxLat, g.cur.maxLon = math.MinInt32, math.MinInt32
	g.cur.imported = s.imports != nil
	r := g.rng
	if g.cur.imported {
		acc := g.accounts[s.account]
		d := g.districts[s.district]
		g.cur.tags = osm.Tags{
			{Key: "comment", Value: acc.Agency + " import: buildings, addresses and points of interest in " + d.name},
			{Key: "created_by", Value: "Tidemark 0.9 bulk upload"},
			{Key: "import", Value: "yes"},
			{Key: "source", Value: acc.Dataset},
			// The import's documentation page, as the import guidelines ask
			// changesets to link it (an invented address under the reserved
			// .example domain, RFC 2606).
			{Key: "url", Value: "https://wiki.quorvesk.example/Import/" + strings.ReplaceAll(acc.Agency, " ", "_")},
		}
	} else {
		g.cur.tags = osm.Tags{
			{Key: "comment", Value: comments[r.IntN(len(comments))]},
			{Key: "created_by", Value: editors[r.IntN(len(editors))]},
		}
	}
}

func (g *gen) endChangeset() error {
	if g.cur.changes == 0 {
		return nil
	}
	g.csID = g.cur.id
	g.truth.Tallies.Changesets++
	if g.cur.imported {
		g.truth.ImportChangesets = append(g.truth.ImportChangesets, g.cur.id)
	}
	b := g.csBuf[:0]
	b = append(b, "  <changeset"...)
	b = appendIntAttr(b, "id", g.cur.id)
	b = appendTimeAttr(b, "created_at", g.cur.first)
	b = appendTimeAttr(b, "closed_at", g.cur.last+60)
	b = append(b, ` open="false"`...)
	b = appendIntAttr(b, "num_changes", int64(g.cur.changes))
	b = appendAttr(b, "user", g.cur.user)
	b = appendIntAttr(b, "uid", int64(g.cur.uid))
	b = appendE7Attr(b, "min_lat", g.cur.minLat)
	b = appendE7Attr(b, "min_lon", g.cur.minLon)
	b = appendE7Attr(b, "max_lat", g.cur.maxLat)
	b = appendE7Attr(b, "max_lon", g.cur.maxLon)
	b = append(b, ` comments_count="0">`+"\n"...)
	b = appendTags(b, g.cur.tags)
	b = append(b, "  </changeset>\n"...)
	g.csBuf = b
	_, err := g.csOut.Write(b)
	return err
}

func (g *gen) runSession(s *session) error {
	g.beginChangeset(s)
	d := &g.districts[s.district]
	if s.imports != nil {
		for _, k := range s.imports {
			g.newFeature(d, k, s.start, true)
			g.truth.Tallies.Import.add(layerNewFeature, 1)
		}
	} else {
		t := s.start
		for _, l := range s.actions {
			if g.organic(d, l, t) {
				g.truth.Tallies.Organic.add(l, 1)
				if g.month < 0 {
					g.truth.Tallies.Baseline.add(l, 1)
				} else if mo := g.truth.Tallies.Monthly; mo != nil {
					[...][][]int64{mo.Geometry, mo.Attribute, mo.NewFeature, mo.Deletion, mo.Bookkeeping}[l][d.id-1][g.month]++
				}
			} else {
				g.truth.Tallies.Skipped++
			}
			t += s.step
		}
	}
	if err := g.endChangeset(); err != nil {
		return err
	}
	if g.out.full() {
		return g.out.spill()
	}
	return nil
}

// stamp returns the time of an edit to an object last edited at last: t, or
// one second after last when the object was touched later within the month.
func stamp(t, last int64) int64 { return max(t, last+1) }

func (g *gen) touch(t int64, lat, lon int32) {
	c := &g.cur
	c.changes++
	c.last = max(c.last, t)
	c.minLat, c.maxLat = min(c.minLat, lat), max(c.maxLat, lat)
	c.minLon, c.maxLon = min(c.minLon, lon), max(c.maxLon, lon)
	if c.imported {
		g.truth.Tallies.ImportVersions++
	}
}

func (g *gen) head(id int64, ver uint32, t int64, visible bool) version {
	return version{id: id, ver: int(ver), unix: t, cs: g.cur.id, uid: g.cur.uid, user: g.cur.user, visible: visible}
}

// writeNode emits the current state of node id (1-based) as a new version.
func (g *gen) writeNode(id uint32, t int64, visible bool, tags osm.Tags) {
	n := &g.nodes[id-1]
	n.ver++
	n.last = uint32(t - epochBase)
	start := len(g.out.buf)
	g.out.buf = appendNode(g.out.buf, g.head(int64(id), n.ver, t, visible), n.lat, n.lon, tags)
	g.out.add(sortKey(keyTypeNode, int64(id), int(n.ver)), start)
	g.truth.Tallies.NodeVersions++
	g.touch(t, n.lat, n.lon)
}

func (g *gen) writeWay(id uint32, t int64, visible bool, tags osm.Tags) {
	w := &g.ways[id-1]
	w.ver++
	w.last = uint32(t - epochBase)
	start := len(g.out.buf)
	g.out.buf = appendWay(g.out.buf, g.head(int64(id), w.ver, t, visible), w.nodes, tags)
	g.out.add(sortKey(keyTypeWay, int64(id), int(w.ver)), start)
	g.truth.Tallies.WayVersions++
	first := &g.nodes[w.nodes[0]-1]
	g.touch(t, first.lat, first.lon)
	for _, nid := range w.nodes[1:] {
		n := &g.nodes[nid-1]
		c := &g.cur
		c.minLat, c.maxLat = min(c.minLat, n.lat), max(c.maxLat, n.lat)
		c.minLon, c.maxLon = min(c.minLon, n.lon), max(c.maxLon, n.lon)
	}
}

func (g *gen) newNode(lat, lon int32) uint32 {
	g.nodes = append(g.nodes, nodeRec{lat: lat, lon: lon})
	return uint32(len(g.nodes))
}

// clamp keeps a position inside its district, a small margin from the edges.
func (d *district) clamp(lat, lon int32) (int32, int32) {
	mLat, mLon := d.spanLat/50, d.spanLon/50
	lat = min(max(lat, d.minLat+mLat), d.minLat+d.spanLat-mLat)
	lon = min(max(lon, d.minLon+mLon), d.minLon+d.spanLon-mLon)
	return lat, lon
}

func (d *district) randomPoint(r *rand.Rand) (int32, int32) {
	return d.clamp(d.minLat+int32(r.Int64N(int64(d.spanLat))), d.minLon+int32(r.Int64N(int64(d.spanLon))))
}

// offset returns a position metres away from (lat, lon) in a random direction.
func (g *gen) offset(lat, lon int32, metres float64) (int32, int32) {
	a := g.rng.Float64() * 2 * math.Pi
	dLat := metres * math.Cos(a) / 111_320
	dLon := metres * math.Sin(a) / (111_320 * math.Cos(float64(lat)*1e-7*math.Pi/180))
	return lat + e7(dLat), lon + e7(dLon)
}

func (g *gen) addLive(d *district, fi int32) {
	f := &g.features[fi]
	f.slot = int32(len(d.live[f.kind]))
	d.live[f.kind] = append(d.live[f.kind], fi)
}

func (g *gen) removeLive(d *district, fi int32) {
	f := &g.features[fi]
	l := d.live[f.kind]
	last := l[len(l)-1]
	l[f.slot] = last
	g.features[last].slot = f.slot
	d.live[f.kind] = l[:len(l)-1]
}

// initialTags draws a new feature's tags: class first, then optional keys at
// their organic or import rates, then a source tag on imports.
func (g *gen) initialTags(d *district, kind uint8, imported bool) osm.Tags {
	r := g.rng
	class := classTag(r, kind)
	tags := osm.Tags{class}
	rc := rateClass(kind, class)
	for _, key := range optionalKeys[kind] {
		p := defaultKeyRate
		for _, k := range g.cfg.Keys {
			if k.Class == rc && k.Key == key {
				p = k.Organic
				if imported {
					p = k.Import
				}
			}
		}
		if r.Float64() < p {
			tags = append(tags, osm.Tag{Key: key, Value: keyValue(r, key, d)})
		}
	}
	if imported {
		tags = append(tags, osm.Tag{Key: "source", Value: g.cur.tags.Find("source")})
	}
	return tags
}

// newFeature creates a POI, building or road in d at time t: one new_feature event.
func (g *gen) newFeature(d *district, kind uint8, t int64, imported bool) {
	r := g.rng
	f := feature{kind: kind, imported: imported, district: int32(d.id - 1)}
	f.tags = g.encode(g.initialTags(d, kind, imported))
	switch kind {
	case kindPOI:
		lat, lon := d.randomPoint(r)
		f.id = g.newNode(lat, lon)
		g.writeNode(f.id, t, true, g.tagsOf(&f))
	case kindBuilding:
		lat, lon := d.randomPoint(r)
		h := 4 + r.Float64()*8
		var ids []uint32
		for _, c := range [4][2]float64{{-1, -1}, {-1, 1}, {1, 1}, {1, -1}} {
			la, lo := d.clamp(g.offsetXY(lat, lon, c[0]*h, c[1]*h*(0.7+0.6*r.Float64())))
			id := g.newNode(la, lo)
			g.writeNode(id, t, true, nil)
			ids = append(ids, id)
		}
		ids = append(ids, ids[0])
		g.ways = append(g.ways, wayRec{nodes: ids})
		f.id = uint32(len(g.ways))
		g.writeWay(f.id, t, true, g.tagsOf(&f))
	case kindRoad:
		lat, lon := d.randomPoint(r)
		k := 3 + r.IntN(4)
		var ids []uint32
		for i := 0; i < k; i++ {
			id := g.newNode(lat, lon)
			g.writeNode(id, t, true, nil)
			ids = append(ids, id)
			lat, lon = g.offset(lat, lon, 30+90*r.Float64())
			lat, lon = d.clamp(lat, lon)
		}
		g.ways = append(g.ways, wayRec{nodes: ids})
		f.id = uint32(len(g.ways))
		g.writeWay(f.id, t, true, g.tagsOf(&f))
	}
	g.features = append(g.features, f)
	g.addLive(d, int32(len(g.features)-1))
}

// move returns a new position lo to hi metres from (lat, lon) that stays in
// d and differs from the old one, so that the version is a real geometry edit.
func (g *gen) move(d *district, lat, lon int32, lo, hi float64) (int32, int32) {
	for range 16 {
		la, ln := d.clamp(g.offset(lat, lon, lo+(hi-lo)*g.rng.Float64()))
		if la != lat || ln != lon {
			return la, ln
		}
	}
	// Stuck in a corner: step towards the district's centre.
	cLat, cLon := d.minLat+d.spanLat/2, d.minLon+d.spanLon/2
	return lat + (cLat-lat)/100 + 1, lon + (cLon-lon)/100 + 1
}

func (g *gen) offsetXY(lat, lon int32, north, east float64) (int32, int32) {
	dLat := north / 111_320
	dLon := east / (111_320 * math.Cos(float64(lat)*1e-7*math.Pi/180))
	return lat + e7(dLat), lon + e7(dLon)
}

// pickWeighted draws an index with the given weights, -1 if all are zero.
func (g *gen) pickWeighted(w []float64) int {
	total := 0.0
	for _, x := range w {
		total += x
	}
	if total <= 0 {
		return -1
	}
	u := g.rng.Float64() * total
	last := -1
	for i, x := range w {
		if x <= 0 {
			continue
		}
		last = i
		if u < x {
			return i
		}
		u -= x
	}
	return last
}

func (g *gen) randomLive(d *district, kind uint8) int32 {
	l := d.live[kind]
	return l[g.rng.IntN(len(l))]
}

// anyLive picks a live feature of any kind uniformly, -1 when there is none.
func (g *gen) anyLive(d *district) int32 {
	n := len(d.live[0]) + len(d.live[1]) + len(d.live[2])
	if n == 0 {
		return -1
	}
	i := g.rng.IntN(n)
	for k := range d.live {
		if i < len(d.live[k]) {
			return d.live[k][i]
		}
		i -= len(d.live[k])
	}
	return -1
}

func has(w float64, n int) float64 {
	if n == 0 {
		return 0
	}
	return w
}

// organic makes one organic edit of layer l in d at about time t and reports
// whether it was made (false when d had no object to make it on).
func (g *gen) organic(d *district, l layer, t int64) bool {
	r := g.rng
	nPOI, nWays := len(d.live[kindPOI]), len(d.live[kindBuilding])+len(d.live[kindRoad])
	switch l {
	case layerNewFeature:
		g.newFeature(d, [...]uint8{kindPOI, kindBuilding, kindBuilding, kindRoad}[r.IntN(4)], t, false)
		return true
	case layerGeometry:
		switch g.pickWeighted([]float64{has(0.3, nPOI), has(0.4, nWays), has(0.3, nWays)}) {
		case 0: // move a tagged POI node
			f := &g.features[g.randomLive(d, kindPOI)]
			n := &g.nodes[f.id-1]
			n.lat, n.lon = g.move(d, n.lat, n.lon, 2, 30)
			g.writeNode(f.id, stamp(t, n.lastAt()), true, g.tagsOf(f))
			return true
		case 1: // move an untagged way node
			w := &g.ways[g.features[g.randomWay(d)].id-1]
			nid := w.nodes[r.IntN(len(w.nodes)-1)]
			if len(w.nodes) > 1 && w.nodes[0] != w.nodes[len(w.nodes)-1] {
				nid = w.nodes[r.IntN(len(w.nodes))]
			}
			n := &g.nodes[nid-1]
			n.lat, n.lon = g.move(d, n.lat, n.lon, 1, 8)
			g.writeNode(nid, stamp(t, n.lastAt()), true, nil)
			return true
		case 2: // insert a node into a way
			fi := g.randomWay(d)
			f := &g.features[fi]
			w := &g.ways[f.id-1]
			i := r.IntN(len(w.nodes) - 1)
			a, b := g.nodes[w.nodes[i]-1], g.nodes[w.nodes[i+1]-1]
			lat, lon := g.offset((a.lat+b.lat)/2, (a.lon+b.lon)/2, 2*r.Float64())
			lat, lon = d.clamp(lat, lon)
			ts := stamp(t, w.lastAt())
			id := g.newNode(lat, lon)
			g.writeNode(id, ts, true, nil)
			w.nodes = slices.Insert(w.nodes, i+1, id)
			g.writeWay(f.id, ts, true, g.tagsOf(f))
			return true
		}
		return false
	case layerAttribute:
		fi := g.anyLive(d)
		if fi < 0 {
			return false
		}
		f := &g.features[fi]
		var missing, present []string
		cur := g.tagsOf(f)
		for _, k := range optionalKeys[f.kind] {
			if cur.Find(k) == "" {
				missing = append(missing, k)
			} else {
				present = append(present, k)
			}
		}
		tags := slices.Clone(cur)
		switch g.pickWeighted([]float64{has(0.5, len(missing)), has(0.35, len(present)), has(0.15, len(present))}) {
		case 0:
			k := missing[r.IntN(len(missing))]
			tags = append(tags, osm.Tag{Key: k, Value: keyValue(r, k, d)})
		case 1:
			k := present[r.IntN(len(present))]
			old := tags.Find(k)
			v := old
			for try := 0; v == old && try < 20; try++ {
				v = keyValue(r, k, d)
			}
			if v == old {
				v = old + " " + strconv.Itoa(1+r.IntN(9))
			}
			for i := range tags {
				if tags[i].Key == k {
					tags[i].Value = v
				}
			}
		case 2:
			k := present[r.IntN(len(present))]
			tags = slices.DeleteFunc(tags, func(t osm.Tag) bool { return t.Key == k })
		default:
			return false
		}
		f.tags = g.encode(tags)
		g.rewrite(f, t)
		return true
	case layerBookkeeping:
		fi := g.anyLive(d)
		if fi < 0 {
			return false
		}
		f := &g.features[fi]
		k := provenanceKeys[r.IntN(len(provenanceKeys))]
		tags := slices.Clone(g.tagsOf(f))
		if old := tags.Find(k); old != "" {
			if r.IntN(2) == 0 {
				tags = slices.DeleteFunc(tags, func(t osm.Tag) bool { return t.Key == k })
			} else {
				v := old
				for try := 0; v == old && try < 20; try++ {
					v = keyValue(r, k, d)
				}
				if v == old {
					v = old + " (checked)"
				}
				for i := range tags {
					if tags[i].Key == k {
						tags[i].Value = v
					}
				}
			}
		} else {
			tags = append(tags, osm.Tag{Key: k, Value: keyValue(r, k, d)})
		}
		f.tags = g.encode(tags)
		g.rewrite(f, t)
		return true
	case layerDeletion:
		nRoad := len(d.live[kindRoad])
		switch g.pickWeighted([]float64{has(0.4, nPOI), has(0.4, len(d.live[kindBuilding])), has(0.2, nRoad)}) {
		case 0:
			fi := g.randomLive(d, kindPOI)
			f := &g.features[fi]
			g.writeNode(f.id, stamp(t, g.nodes[f.id-1].lastAt()), false, nil)
			g.removeLive(d, fi)
			return true
		case 1, 2:
			kind := kindBuilding
			if len(d.live[kindBuilding]) == 0 || (nRoad > 0 && r.IntN(3) == 0) {
				kind = kindRoad
			}
			fi := g.randomLive(d, kind)
			f := &g.features[fi]
			w := &g.ways[f.id-1]
			ts := stamp(t, w.lastAt())
			for _, nid := range w.nodes {
				ts = max(ts, g.nodes[nid-1].lastAt()+1)
			}
			g.writeWay(f.id, ts, false, nil)
			seen := map[uint32]bool{}
			for _, nid := range w.nodes {
				if !seen[nid] {
					seen[nid] = true
					g.writeNode(nid, ts, false, nil)
				}
			}
			g.removeLive(d, fi)
			return true
		}
		return false
	}
	return false
}

func (g *gen) randomWay(d *district) int32 {
	nb, nr := len(d.live[kindBuilding]), len(d.live[kindRoad])
	i := g.rng.IntN(nb + nr)
	if i < nb {
		return d.live[kindBuilding][i]
	}
	return d.live[kindRoad][i-nb]
}

// encode interns tags.
func (g *gen) encode(tags osm.Tags) []ctag {
	out := make([]ctag, len(tags))
	for i, t := range tags {
		k, ok := g.keyIdx[t.Key]
		if !ok {
			k = uint16(len(g.keyNames))
			g.keyIdx[t.Key] = k
			g.keyNames = append(g.keyNames, t.Key)
		}
		v, ok := g.valIdx[t.Value]
		if !ok {
			v = uint32(len(g.vals))
			g.valIdx[t.Value] = v
			g.vals = append(g.vals, t.Value)
		}
		out[i] = ctag{k: k, v: v}
	}
	return out
}

// tagsOf decodes f's tags into a scratch slice valid until the next call.
func (g *gen) tagsOf(f *feature) osm.Tags {
	g.scratch = g.scratch[:0]
	for _, t := range f.tags {
		g.scratch = append(g.scratch, osm.Tag{Key: g.keyNames[t.k], Value: g.vals[t.v]})
	}
	return g.scratch
}

// rewrite writes a new version of f with its current tags.
func (g *gen) rewrite(f *feature, t int64) {
	if f.kind == kindPOI {
		g.writeNode(f.id, stamp(t, g.nodes[f.id-1].lastAt()), true, g.tagsOf(f))
		return
	}
	g.writeWay(f.id, stamp(t, g.ways[f.id-1].lastAt()), true, g.tagsOf(f))
}

func (g *gen) writeHistory(path string) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("sim: %w", err)
	}
	defer f.Close()
	zw, _ := gzip.NewWriterLevel(f, gzip.BestSpeed)
	bw := bufio.NewWriterSize(zw, 1<<20)
	bw.WriteString("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<osm version=\"0.6\" generator=\"loadwake simulate\">\n")
	if err := g.out.merge(bw); err != nil {
		return fmt.Errorf("sim: write %s: %w", path, err)
	}
	bw.WriteString("</osm>\n")
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("sim: write %s: %w", path, err)
	}
	if err := zw.Close(); err != nil {
		return fmt.Errorf("sim: write %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("sim: write %s: %w", path, err)
	}
	return nil
}

func (g *gen) writeDistricts(path string) error {
	fc := geojson.NewFeatureCollection()
	for _, d := range g.districts {
		s, w := float64(d.minLat)*1e-7, float64(d.minLon)*1e-7
		n, e := float64(d.minLat+d.spanLat)*1e-7, float64(d.minLon+d.spanLon)*1e-7
		poly := orb.Polygon{orb.Ring{{w, s}, {e, s}, {e, n}, {w, n}, {w, s}}}
		f := geojson.NewFeature(poly)
		f.Properties["id"] = d.id
		f.Properties["name"] = d.name
		f.Properties["col"] = d.col
		f.Properties["row"] = d.row
		fc.Append(f)
	}
	return writeJSON(path, fc)
}

func writeJSON(path string, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return fmt.Errorf("sim: encode %s: %w", path, err)
	}
	b = append(b, '\n')
	if err := os.WriteFile(path, b, 0o644); err != nil {
		return fmt.Errorf("sim: %w", err)
	}
	return nil
}
