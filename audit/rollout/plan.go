package rollout

import (
	"context"
	"fmt"
	"math"
	"slices"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/power"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/sequential"
	"github.com/loadwake/loadwake/layers"
)

// Schema is the plan JSON's schema name; fields keep their meaning while it
// stays the same.
const Schema = "loadwake-plan/1"

// Units are the spatial units of a plan; the units of spatial.Build meet it.
type Units interface {
	power.Units
	Name(i int) string
	Geometry(i int) orb.Geometry
}

// Options configures Make. The zero value takes the defaults.
type Options struct {
	Waves         int       // waves, the last held back as the comparison (default 3)
	MonthsBetween int       // months between wave starts (default 3)
	FollowUp      int       // months from the last treated wave's start to the evaluation (default MonthsBetween)
	Start         time.Time // first wave's month (default: the month after the store's history)
	History       int       // months of history the activity is counted over (default 24)
	Before        int       // months before each wave the evaluation uses (default 12)
	Seed          uint64    // seed of the assignment (default 1)
	Blocks        map[string]string
	Outcome       string  // the pre-registered layer (default "attribute")
	Pause         float64 // the decision rule's fall: pause when the outcome falls by more than this share (default 0.2)
	Alpha         float64 // two-sided level of the evaluation and the looks (default 0.05)
	Exclude       []osm.ChangesetID
	SkipPower     bool          // no power simulation (faster; no minimum detectable effects)
	Power         power.Options // the simulation's worlds, effects and draws
}

func (o Options) withDefaults() Options {
	if o.Waves == 0 {
		o.Waves = 3
	}
	if o.MonthsBetween <= 0 {
		o.MonthsBetween = 3
	}
	if o.FollowUp <= 0 {
		o.FollowUp = o.MonthsBetween
	}
	if o.History <= 0 {
		o.History = 24
	}
	if o.Before <= 0 {
		o.Before = 12
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	if o.Outcome == "" {
		o.Outcome = layers.Attribute.String()
	}
	if o.Pause <= 0 {
		o.Pause = 0.2
	}
	if o.Alpha <= 0 {
		o.Alpha = 0.05
	}
	return o
}

// Unit is one unit of the plan.
type Unit struct {
	ID       string             `json:"id"`
	Name     string             `json:"name,omitempty"`
	Block    string             `json:"block,omitempty"`
	Wave     int                `json:"wave"`  // 1-based; the last wave is the comparison until the evaluation
	Start    string             `json:"start"` // YYYY-MM of its planned first upload
	Features int                `json:"features"`
	Changes  int                `json:"changes"`
	Activity float64            `json:"activity"` // events per month, all layers, in the history
	ByLayer  map[string]float64 `json:"activity_by_layer"`
	index    int
}

// Wave is one wave of the plan with its balance: how its units' past
// activity compares with the other waves' (standardized mean difference of
// log(1 + events per month); within ±0.25 counts as alike for a randomized
// design of few units, common practice).
type Wave struct {
	Wave         int      `json:"wave"`
	Start        string   `json:"start"`
	Comparison   bool     `json:"comparison"` // held back until the evaluation
	Units        int      `json:"units"`
	Features     int      `json:"features"`
	Changes      int      `json:"changes"`
	Changesets   int      `json:"changesets"` // at the API's limit of 10,000 changes each
	MeanActivity float64  `json:"mean_activity"`
	SMD          float64  `json:"smd"`
	Files        []string `json:"files,omitempty"`
}

// InterimLook is a group-sequential look at the pre-registered outcome.
type InterimLook struct {
	Month string `json:"month"`
	sequential.Look
}

// Plan is a randomized staggered rollout of a proposal.
type Plan struct {
	Schema        string        `json:"schema"`
	Proposal      string        `json:"proposal"`
	Features      int           `json:"features"`
	Changes       int           `json:"changes"`
	UnitSpec      string        `json:"unit_spec"`
	Procedure     string        `json:"procedure"`
	Seed          uint64        `json:"seed"`
	Waves         int           `json:"waves"`
	MonthsBetween int           `json:"months_between"`
	FollowUp      int           `json:"follow_up_months"`
	Before        int           `json:"months_before"`
	Start         string        `json:"start"`
	Evaluation    string        `json:"evaluation"`
	HistoryStart  string        `json:"history_start"`
	HistoryEnd    string        `json:"history_end"`
	Outcome       string        `json:"outcome"`
	Pause         float64       `json:"pause_fall"`
	Alpha         float64       `json:"alpha"`
	Units         []Unit        `json:"units"`
	WaveList      []Wave        `json:"wave_list"`
	Looks         []InterimLook `json:"interim_looks"`
	Model         *power.Model  `json:"activity_model,omitempty"`
	Power         *power.Result `json:"power,omitempty"`
	Unplaced      []string      `json:"unplaced,omitempty"` // features in no unit (written to their own file)
	Moved         int           `json:"moved_features"`     // features moved to an earlier wave to stay with features they share nodes with
	Notes         []string      `json:"notes"`
	Cautions      []string      `json:"cautions"`
	featureWave   []int         // per proposal feature: 0-based wave, -1 unplaced
	proposal      *proposal.Proposal
	units         Units
}

// Cautions printed with every plan.
var Cautions = []string{
	"A plan is a proposal for the community's review, not a permission: community approval, the import guidelines (documentation, licence compatible with the ODbL, discussion with the local community and the imports list, a dedicated account) and local review come first, and the plan never replaces them.",
	"The waves are drawn at random so that a later comparison is fair; loading areas out of order or adding areas breaks that, and the evaluation will flag it.",
	"The minimum detectable effects come from a model of past activity (level, seasonality, trend, over-dispersion); activity that changes for other reasons (a mapping party, an editor change) is not in it.",
	"The per-wave files are the proposal's features as OsmChange; check them in an editor, conflate with existing data and resolve duplicates before any upload.",
}

// Make plans the rollout of proposal p over units: it places the features
// in units, reads the units' past activity from src, deals the units to
// waves with Assign, simulates the evaluation's power for the plan and for
// alternatives (more waves, longer follow-up, more units), and sets the
// interim looks' boundaries.
func Make(ctx context.Context, src layers.DerivedReader, p *proposal.Proposal, units Units, unitSpec string, opts Options) (*Plan, error) {
	opts = opts.withDefaults()
	if p == nil || len(p.Features) == 0 {
		return nil, fmt.Errorf("%w: the proposal has no features", ErrPlan)
	}
	if _, ok := layers.ParseLayer(opts.Outcome); !ok {
		return nil, fmt.Errorf("%w: outcome %q is not a layer (geometry, attribute, new_feature, deletion)", ErrPlan, opts.Outcome)
	}
	pl := &Plan{Schema: Schema, Proposal: p.Name, Features: len(p.Features), Changes: p.Changes + p.Deletes, UnitSpec: unitSpec,
		Procedure: Procedure, Seed: opts.Seed, Waves: opts.Waves, MonthsBetween: opts.MonthsBetween, FollowUp: opts.FollowUp,
		Before: opts.Before, Outcome: opts.Outcome, Pause: opts.Pause, Alpha: opts.Alpha, Notes: []string{}, Cautions: Cautions,
		proposal: p, units: units}
	// Place the features.
	featUnit := make([]int, len(p.Features))
	perUnit := map[int]*Unit{}
	for i := range p.Features {
		f := &p.Features[i]
		u, ok := -1, false
		if f.Geom != nil {
			u, ok = units.Locate(f.At)
		}
		if !ok {
			featUnit[i] = -1
			pl.Unplaced = append(pl.Unplaced, f.ID)
			continue
		}
		featUnit[i] = u
		if perUnit[u] == nil {
			perUnit[u] = &Unit{ID: units.ID(u), Name: units.Name(u), Block: opts.Blocks[units.ID(u)], index: u}
		}
		perUnit[u].Features++
	}
	if len(perUnit) < opts.Waves {
		return nil, fmt.Errorf("%w: the proposal's features fall in %d units, fewer than the %d waves; use smaller units (for example tiles:17) or fewer waves", ErrPlan, len(perUnit), opts.Waves)
	}
	for _, u := range perUnit {
		pl.Units = append(pl.Units, *u)
	}
	slices.SortFunc(pl.Units, func(a, b Unit) int { return a.index - b.index })
	// Past activity.
	// The history ends where the plan starts (by default where the store's
	// data end).
	hist, err := power.Activity(ctx, src, units, power.ActivityOptions{Months: opts.History, End: opts.Start, Exclude: opts.Exclude})
	if err != nil {
		return nil, err
	}
	pl.HistoryStart, pl.HistoryEnd = month(hist.Start), month(hist.MonthTime(hist.Months-1))
	start := opts.Start
	if start.IsZero() {
		start = hist.Start.AddDate(0, hist.Months, 0)
	}
	start = power.MonthStart(start)
	act := make([]float64, len(pl.Units))
	blocks := make([]string, len(pl.Units))
	cand := slices.Clone(hist.Units[:0])
	candY := make([][]float64, len(hist.Outcomes))
	for i := range pl.Units {
		u := &pl.Units[i]
		u.ByLayer = map[string]float64{}
		T := hist.Months
		for o, name := range hist.Outcomes {
			s := 0.0
			for t := range T {
				s += hist.Y[o][u.index*T+t]
			}
			u.ByLayer[name] = s / float64(T)
			u.Activity += s / float64(T)
			candY[o] = append(candY[o], hist.Y[o][u.index*T:(u.index+1)*T]...)
		}
		act[i], blocks[i] = u.Activity, u.Block
		cand = append(cand, hist.Units[u.index])
	}
	if opts.Blocks == nil {
		blocks = nil
	}
	waves, err := Assign(act, blocks, opts.Waves, opts.Seed)
	if err != nil {
		return nil, err
	}
	design := power.Design{Name: "plan", Waves: opts.Waves, MonthsBetween: opts.MonthsBetween, FollowUp: opts.FollowUp, Before: opts.Before}
	for i := range pl.Units {
		pl.Units[i].Wave = waves[i] + 1
		pl.Units[i].Start = month(start.AddDate(0, design.WaveStart(waves[i])-opts.Before, 0))
	}
	pl.Start = month(start)
	pl.Evaluation = month(start.AddDate(0, design.Months()-opts.Before, 0))
	pl.placeWaves(featUnit)
	if err := pl.balance(); err != nil {
		return nil, err
	}
	if err := pl.looks(design, start); err != nil {
		return nil, err
	}
	candPanel := *hist
	candPanel.Units, candPanel.Y = cand, candY
	if pl.Model, err = power.Fit(&candPanel); err != nil {
		return nil, err
	}
	if opts.SkipPower {
		pl.Notes = append(pl.Notes, "power not simulated (asked to skip it): no minimum detectable effects")
		return pl, nil
	}
	assign := func(us []int, k int, seed uint64) ([]int, error) {
		a, b := make([]float64, len(us)), []string(nil)
		if blocks != nil {
			b = make([]string, len(us))
		}
		for i, u := range us {
			a[i] = act[u]
			if b != nil {
				b[i] = blocks[u]
			}
		}
		return Assign(a, b, k, seed)
	}
	designs := []power.Design{design}
	alt := func(name string, d power.Design) {
		d.Name, d.Layers = name, []string{opts.Outcome}
		designs = append(designs, d)
	}
	if len(pl.Units) >= opts.Waves+2 {
		d := design
		d.Waves += 2
		alt(fmt.Sprintf("%d waves", d.Waves), d)
	}
	d := design
	d.FollowUp *= 2
	alt(fmt.Sprintf("follow-up %d months", d.FollowUp), d)
	d = design
	d.UnitCopies = 2
	alt("twice the units", d)
	po := opts.Power
	po.Alpha = opts.Alpha
	if pl.Power, err = power.Simulate(ctx, pl.Model, designs, assign, po); err != nil {
		return nil, err
	}
	return pl, nil
}

// month formats t as YYYY-MM.
func month(t time.Time) string { return t.UTC().Format("2006-01") }

// placeWaves gives each feature its unit's wave; features sharing nodes with
// features of an earlier wave move to that wave, to be uploaded together.
func (pl *Plan) placeWaves(featUnit []int) {
	waveOf := map[int]int{}
	for _, u := range pl.Units {
		waveOf[u.index] = u.Wave - 1
	}
	pl.featureWave = make([]int, len(featUnit))
	for _, comp := range components(pl.proposal.Features) {
		w := -1
		for _, i := range comp {
			if u := featUnit[i]; u >= 0 && (w < 0 || waveOf[u] < w) {
				w = waveOf[u]
			}
		}
		for _, i := range comp {
			if u := featUnit[i]; u >= 0 && waveOf[u] != w {
				pl.Moved++
			}
			pl.featureWave[i] = w
		}
	}
	if pl.Moved > 0 {
		pl.Notes = append(pl.Notes, fmt.Sprintf("%d feature(s) share nodes with features of an earlier wave and move to it, to be uploaded together", pl.Moved))
	}
	if n := len(pl.Unplaced); n > 0 {
		pl.Notes = append(pl.Notes, fmt.Sprintf("%d feature(s) lie in no unit (or have no geometry); they are in no wave and are written to their own file for review", n))
	}
}

// balance fills the wave list: sizes, changes and activity balance.
func (pl *Plan) balance() error {
	pl.WaveList = make([]Wave, pl.Waves)
	logs := make([][]float64, pl.Waves)
	for w := range pl.WaveList {
		pl.WaveList[w] = Wave{Wave: w + 1, Comparison: w == pl.Waves-1}
	}
	for _, u := range pl.Units {
		w := &pl.WaveList[u.Wave-1]
		w.Start = u.Start
		w.Units++
		w.MeanActivity += u.Activity
		logs[u.Wave-1] = append(logs[u.Wave-1], math.Log1p(u.Activity))
	}
	for i := range pl.proposal.Features {
		if w := pl.featureWave[i]; w >= 0 {
			pl.WaveList[w].Features++
		}
	}
	for w := range pl.WaveList {
		wv := &pl.WaveList[w]
		files, err := pl.chunks(w)
		if err != nil {
			return err
		}
		for _, f := range files {
			wv.Changes += f.changes()
		}
		if wv.Units > 0 {
			wv.MeanActivity /= float64(wv.Units)
		}
		wv.Changesets = max(len(files), proposal.ChangesetsNeeded(wv.Changes))
		var rest []float64
		for k := range logs {
			if k != w {
				rest = append(rest, logs[k]...)
			}
		}
		wv.SMD = smd(logs[w], rest)
	}
	return nil
}

// smd is the standardized mean difference of a against b, pooled standard
// deviation √((s²a + s²b)/2) (Austin 2009); 0 when both are constant.
func smd(a, b []float64) float64 {
	ma, va := meanVar(a)
	mb, vb := meanVar(b)
	s := math.Sqrt((va + vb) / 2)
	if s == 0 {
		return 0
	}
	return (ma - mb) / s
}

func meanVar(x []float64) (m, v float64) {
	if len(x) == 0 {
		return 0, 0
	}
	for _, v := range x {
		m += v
	}
	m /= float64(len(x))
	if len(x) < 2 {
		return m, 0
	}
	for _, y := range x {
		v += (y - m) * (y - m)
	}
	return m, v / float64(len(x)-1)
}

// looks places an interim look at each treated wave's start after the first
// (before the next wave is loaded) and the final one at the evaluation; the
// information at a look is the treated unit-months accumulated by then.
func (pl *Plan) looks(d power.Design, start time.Time) error {
	size := make([]int, d.Waves)
	for _, u := range pl.Units {
		size[u.Wave-1]++
	}
	info := func(at int) float64 {
		s := 0.0
		for w := 0; w < d.Waves-1; w++ {
			if st := d.WaveStart(w); st < at {
				s += float64(size[w] * (at - st))
			}
		}
		return s
	}
	total := info(d.Months())
	var at []int
	for w := 1; w < d.Waves-1; w++ {
		at = append(at, d.WaveStart(w))
	}
	at = append(at, d.Months())
	var fr []float64
	var months []int
	for _, a := range at {
		if f := info(a) / total; f > 0 && (len(fr) == 0 || f > fr[len(fr)-1]) {
			fr, months = append(fr, f), append(months, a)
		}
	}
	ls, err := sequential.Boundaries(fr, pl.Alpha)
	if err != nil {
		return err
	}
	for i, l := range ls {
		pl.Looks = append(pl.Looks, InterimLook{Month: month(start.AddDate(0, months[i]-d.Before, 0)), Look: l})
	}
	return nil
}
