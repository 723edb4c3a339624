package study

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
	"gonum.org/v1/gonum/mat"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/layers"
)

// UnitIndex is the set of spatial units a study aggregates events into. The
// units of ParseUnits meet it.
type UnitIndex interface {
	Len() int
	ID(i int) string
	Locate(p orb.Point) (int, bool)
}

// ImportRef names the import a study follows: its changesets, its accounts and
// its time span. episode.Episode.Ref gives one for a detected episode.
type ImportRef struct {
	ID         string
	Changesets []osm.ChangesetID
	UIDs       []osm.UserID
	Accounts   []string
	First      time.Time
	Last       time.Time
}

// UnitStatus is the role a spatial unit plays in a study.
type UnitStatus uint8

// The roles of a unit.
const (
	StatusCandidate UnitStatus = iota // untouched, not chosen as a control
	StatusControl                     // untouched and matched to a treated unit
	StatusTreated                     // the import reached MinIntensity here
	StatusDropped                     // treated, but no control inside the caliper or no pre-period
	StatusExcluded                    // touched by an import below MinIntensity or by another import
)

// String returns the status name used in reports and GeoJSON.
func (s UnitStatus) String() string {
	switch s {
	case StatusControl:
		return "control"
	case StatusTreated:
		return "treated"
	case StatusDropped:
		return "dropped"
	case StatusExcluded:
		return "excluded"
	}
	return "unmatched"
}

// MarshalText writes the status name.
func (s UnitStatus) MarshalText() ([]byte, error) { return []byte(s.String()), nil }

// UnitInfo describes one spatial unit of a study.
type UnitInfo struct {
	Index           int        `json:"-"`
	ID              string     `json:"id"`
	Name            string     `json:"name,omitempty"` // the unit's name, when its units have names (admin:LEVEL, GeoJSON name)
	Status          UnitStatus `json:"status"`
	Reason          string     `json:"reason,omitempty"`
	FirstMonth      string     `json:"first_month,omitempty"` // YYYY-MM of the import's first edit here
	ImportFeatures  int        `json:"import_features"`       // objects the import created or modified here
	FeaturesAtStart int        `json:"features_at_start"`     // features present before the import reached the unit
	Intensity       float64    `json:"intensity"`             // ImportFeatures / (FeaturesAtStart + ImportFeatures)
	Weight          float64    `json:"weight"`                // matching weight in the panel (0: not in it)
}

// Options tunes Build. The zero value takes the documented defaults.
type Options struct {
	Before       int     // months before the import's first month (default 24)
	After        int     // months after its last month (default 24)
	MinIntensity float64 // smallest intensity that makes a unit treated (default 0.05)
	// KeepImportAccounts counts later edits by the import's own accounts as
	// follow-on activity; by default they are left out.
	KeepImportAccounts bool
	// OtherImports are the changesets of every detected import; a unit any of
	// them edited inside the window is not a clean control. The import's own
	// changesets are always left out of the outcomes.
	OtherImports []osm.ChangesetID
	Match        match.Options // K default 3; Caliper default 0 (none)
	// Propensity matches on the logit of a propensity score instead of
	// Mahalanobis distance.
	Propensity bool
}

// WithDefaults returns o with every zero field set to its documented default.
func (o Options) WithDefaults() Options {
	if o.Before <= 0 {
		o.Before = 24
	}
	if o.After <= 0 {
		o.After = 24
	}
	if o.MinIntensity <= 0 {
		o.MinIntensity = 0.05
	}
	if o.Match.K <= 0 {
		o.Match.K = 3
	}
	return o
}

// Study is an import's panel with matched controls, ready for Estimate.
type Study struct {
	Import ImportRef
	// Assignment is the treatment the study was built from when it came
	// as data (BuildAssigned); nil for an import's study.
	Assignment *Assignment
	Panel      *panel.Panel // treated and matched control units, weights set
	All        *panel.Panel // every unit not excluded, unweighted (for naive comparisons and exports)
	Units      []UnitInfo
	Covariates []string
	Balance    []match.BalanceRow
	// Counts of events that could not be placed.
	Unlocated int64     // events without a position
	Outside   int64     // events outside every unit
	Window    [2]string // first and last month of the panel, YYYY-MM
	Notes     []string  // clipping, dropped units and similar, in plain words
}

// GrowthPrefix starts the balance rows of pre-import growth per layer: the
// log ratio of the second half of the pre-import months' edits to the first
// half's. With unit fixed effects level differences are absorbed; growth
// differences are what threaten the comparison.
const GrowthPrefix = "pre-import growth "

// ErrStudy is the sentinel under errors that make a study impossible.
var ErrStudy = errors.New("study: cannot build study")

// Stores a study cannot use; both wrap ErrStudy.
var (
	// ErrUnclassified: the store's edits were never classified into layers.
	ErrUnclassified = fmt.Errorf("%w: the store's edits are not classified (run `loadwake classify` on it first)", ErrStudy)
	// ErrSnapshot: the store holds one version per object (a snapshot
	// extract), so no edit has a predecessor and follow-on editing cannot be
	// counted; every object would look newly mapped in its last month.
	ErrSnapshot = fmt.Errorf("%w: the store holds a snapshot, not a history: no edit has a predecessor, so follow-on editing before and after the import cannot be counted (ingest a full-history file, .osh.pbf or history XML, covering the months before the import)", ErrStudy)
)

// checkEstimable refuses stores no study can be built on: unclassified ones
// and snapshots (classified edits that are all first versions: no geometry,
// attribute or deletion event at all).
func checkEstimable(ctx context.Context, src layers.DerivedReader) error {
	sum, err := layers.Summarize(ctx, src)
	if errors.Is(err, layers.ErrNotClassified) {
		return ErrUnclassified
	}
	if err != nil {
		return fmt.Errorf("read classification summary: %w", err)
	}
	changes := sum.Events[layers.Geometry.String()] + sum.Events[layers.Attribute.String()] + sum.Events[layers.Deletion.String()]
	if changes == 0 && sum.Events[layers.NewFeature.String()] > 0 {
		return ErrSnapshot
	}
	return nil
}

// Outcome names beyond the four layers.
const (
	OutcomeContributors = "contributors" // distinct accounts editing in the unit-month
	OutcomeNewcomers    = "newcomers"    // of those, accounts whose first edit in the store falls in that month
	OutcomeEstablished  = "established"  // the others
	FamilyPrefix        = "attribute:"   // attribute events touching a key family, e.g. "attribute:names"
)

func monthOf(t time.Time) time.Time {
	t = t.UTC()
	return time.Date(t.Year(), t.Month(), 1, 0, 0, 0, 0, time.UTC)
}

func monthDiff(a, b time.Time) int { // months from b to a
	return (a.Year()-b.Year())*12 + int(a.Month()) - int(b.Month())
}

// builder accumulates one study in a single pass over the events.
type builder struct {
	ref   ImportRef
	units UnitIndex
	opts  Options
	start time.Time // first panel month
	// cutoff is the first day of the import's first month: features by
	// class are counted before it, as the other matching traits are counted
	// over the months before that month (whole months, so that an
	// assignment of months gives the same traits as the import's edits).
	cutoff  time.Time
	months  int
	ownCS   map[osm.ChangesetID]bool
	otherCS map[osm.ChangesetID]bool
	ownUID  map[osm.UserID]bool
	first   map[osm.UserID]time.Time

	nu         int
	impObjects []map[osm.FeatureID]bool // per unit: objects the import edited there
	firstImp   []time.Time              // per unit: first import edit
	touched    []bool                   // per unit: edited by another import in the window
	live       []int                    // per unit: features present, running count
	liveAtImp  []int                    // per unit: live count when the import first arrived (-1 not yet)
	classLive  []map[string]int         // per unit: features by class before the episode
	y          map[string][]float64
	fam        map[string][]float64 // y's attribute family arrays by bare family name
	contrib    map[[2]int64]bool    // (unit*months+t, uid) seen
	assigned   map[int]time.Time    // per unit: first treated month of an Assignment (nil: treatment from the import)
	minData    time.Time
	maxData    time.Time
	unlocated  int64
	outside    int64
}

// Build builds the outcome panel of one import over the given units and
// matches each treated unit with untouched controls. It reads the classified
// events once, in time order; memory grows with units × months and with
// distinct contributors per unit-month, not with the number of events.
//
// Treatment: a unit's intensity is the number of objects the import created or
// modified there over the features present when it arrived plus those objects;
// units at or above MinIntensity are treated from the month of the import's
// first edit there. Units the import touched below that, and units any other
// detected import edited inside the window, are excluded; the rest are
// candidate controls. Outcomes leave out the import's changesets, every other
// import's changesets and, unless KeepImportAccounts, the import's accounts.
func Build(ctx context.Context, src layers.DerivedReader, ref ImportRef, units UnitIndex, opts Options) (*Study, error) {
	opts = opts.WithDefaults()
	if units == nil || units.Len() == 0 {
		return nil, fmt.Errorf("%w: no spatial units", ErrStudy)
	}
	if len(ref.Changesets) == 0 || ref.First.IsZero() {
		return nil, fmt.Errorf("%w: import %q has no changesets", ErrStudy, ref.ID)
	}
	return build(ctx, src, ref, units, opts, nil)
}

// build is Build with, when assigned is not nil, the treatment of each unit
// given (BuildAssigned) instead of found from ref's changesets.
func build(ctx context.Context, src layers.DerivedReader, ref ImportRef, units UnitIndex, opts Options, assigned map[int]time.Time) (*Study, error) {
	if err := checkEstimable(ctx, src); err != nil {
		return nil, err
	}
	first, err := layers.FirstEdits(ctx, src)
	if err != nil {
		return nil, fmt.Errorf("read first edits: %w", err)
	}
	b := &builder{
		ref:     ref,
		units:   units,
		opts:    opts,
		start:   monthOf(ref.First).AddDate(0, -opts.Before, 0),
		cutoff:  monthOf(ref.First),
		ownCS:   make(map[osm.ChangesetID]bool, len(ref.Changesets)),
		otherCS: make(map[osm.ChangesetID]bool, len(opts.OtherImports)),
		ownUID:  make(map[osm.UserID]bool, len(ref.UIDs)),
		first:   first,
		nu:      units.Len(),
		y:       make(map[string][]float64),
		fam:     make(map[string][]float64),
		contrib: make(map[[2]int64]bool),

		assigned: assigned,
	}
	b.months = monthDiff(monthOf(ref.Last), b.start) + opts.After + 1
	for _, c := range ref.Changesets {
		b.ownCS[c] = true
	}
	for _, c := range opts.OtherImports {
		if !b.ownCS[c] {
			b.otherCS[c] = true
		}
	}
	if !opts.KeepImportAccounts {
		for _, u := range ref.UIDs {
			b.ownUID[u] = true
		}
	}
	b.impObjects = make([]map[osm.FeatureID]bool, b.nu)
	b.firstImp = make([]time.Time, b.nu)
	b.touched = make([]bool, b.nu)
	b.live = make([]int, b.nu)
	b.liveAtImp = make([]int, b.nu)
	b.classLive = make([]map[string]int, b.nu)
	for i := range b.liveAtImp {
		b.liveAtImp[i] = -1
	}
	end := b.start.AddDate(0, b.months, 0)
	if err := layers.ScanEvents(ctx, src, time.Time{}, end, b.add); err != nil {
		return nil, fmt.Errorf("scan events: %w", err)
	}
	return b.finish(ctx)
}

func (b *builder) outcome(name string) []float64 {
	v, ok := b.y[name]
	if !ok {
		v = make([]float64, b.nu*b.months)
		b.y[name] = v
	}
	return v
}

func (b *builder) add(e *layers.Event) error {
	if b.minData.IsZero() || e.Time.Before(b.minData) {
		b.minData = e.Time
	}
	if e.Time.After(b.maxData) {
		b.maxData = e.Time
	}
	if !e.Located {
		b.unlocated++
		return nil
	}
	u, ok := b.units.Locate(e.Location)
	if !ok {
		b.outside++
		return nil
	}
	t := monthDiff(monthOf(e.Time), b.start)
	own := b.ownCS[e.Changeset]
	if m, ok := b.assigned[u]; ok && b.liveAtImp[u] < 0 && !e.Time.Before(m) {
		b.liveAtImp[u] = b.live[u] // features present when the assigned treatment began
	}
	switch {
	case own:
		if b.impObjects[u] == nil {
			b.impObjects[u] = make(map[osm.FeatureID]bool)
		}
		b.impObjects[u][e.Feature()] = true
		if b.firstImp[u].IsZero() {
			b.firstImp[u] = e.Time
			if b.assigned == nil {
				b.liveAtImp[u] = b.live[u]
			}
		}
	case b.otherCS[e.Changeset]:
		if t >= 0 {
			b.touched[u] = true
		}
	}
	// Features present, counted over all edits including imports.
	switch e.Layer {
	case layers.NewFeature:
		b.live[u]++
		if e.Time.Before(b.cutoff) && e.Class != "" {
			if b.classLive[u] == nil {
				b.classLive[u] = make(map[string]int)
			}
			b.classLive[u][e.Class]++
		}
	case layers.Deletion:
		if b.live[u] > 0 {
			b.live[u]--
		}
		if e.Time.Before(b.cutoff) && e.Class != "" && b.classLive[u][e.Class] > 0 {
			b.classLive[u][e.Class]--
		}
	}
	if t < 0 || t >= b.months || own || b.otherCS[e.Changeset] || b.ownUID[e.UID] {
		return nil
	}
	cell := u*b.months + t
	if e.Layer != layers.Bookkeeping {
		b.outcome(e.Layer.String())[cell]++
	}
	if e.Layer == layers.Attribute {
		for i, k := range e.Keys {
			if !k.Provenance && !familyBefore(e.Keys[:i], k.Family) {
				b.family(k.Family)[cell]++
			}
		}
	}
	key := [2]int64{int64(cell), int64(e.UID)}
	if !b.contrib[key] {
		b.contrib[key] = true
		b.outcome(OutcomeContributors)[cell]++
		if f, ok := b.first[e.UID]; ok && monthOf(f).Equal(monthOf(e.Time)) {
			b.outcome(OutcomeNewcomers)[cell]++
		} else {
			b.outcome(OutcomeEstablished)[cell]++
		}
	}
	return nil
}

// family returns the outcome array of an attribute key family, caching it by
// the bare family name so the per-event path builds no strings.
func (b *builder) family(name string) []float64 {
	v, ok := b.fam[name]
	if !ok {
		v = b.outcome(FamilyPrefix + name)
		b.fam[name] = v
	}
	return v
}

// familyBefore reports whether an earlier attribute key of the same event
// already counted for family.
func familyBefore(keys []layers.KeyTouch, family string) bool {
	for _, k := range keys {
		if !k.Provenance && k.Family == family {
			return true
		}
	}
	return false
}

// outcomeOrder lists outcomes: the four layers, contributor counts, then
// attribute families alphabetically.
func (b *builder) outcomeOrder() []string {
	names := []string{}
	for _, l := range layers.Layers {
		names = append(names, l.String())
		b.outcome(l.String())
	}
	names = append(names, OutcomeContributors, OutcomeNewcomers, OutcomeEstablished)
	b.outcome(OutcomeContributors)
	b.outcome(OutcomeNewcomers)
	b.outcome(OutcomeEstablished)
	var fam []string
	for k := range b.y {
		if strings.HasPrefix(k, FamilyPrefix) {
			fam = append(fam, k)
		}
	}
	sort.Strings(fam)
	return append(names, fam...)
}

func (b *builder) finish(ctx context.Context) (*Study, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	st := &Study{Import: b.ref, Unlocated: b.unlocated, Outside: b.outside}
	// Clip the window to the months that hold data.
	lo, hi := 0, b.months-1
	if !b.minData.IsZero() {
		// When the data begin inside the window, their first month is left
		// out too: a history begins with a partial month or with the bulk
		// first mapping of the area, neither of which is follow-on activity.
		if d := monthDiff(monthOf(b.minData), b.start); d >= lo {
			lo = d + 1
		}
		if d := monthDiff(monthOf(b.maxData), b.start); d < hi {
			hi = d
		}
	}
	if lo > 0 || hi < b.months-1 {
		st.Notes = append(st.Notes, fmt.Sprintf("the window %s to %s reaches beyond the data; clipped to %s to %s",
			b.start.Format("2006-01"), b.start.AddDate(0, b.months-1, 0).Format("2006-01"),
			b.start.AddDate(0, lo, 0).Format("2006-01"), b.start.AddDate(0, hi, 0).Format("2006-01")))
	}
	if hi < lo {
		return nil, fmt.Errorf("%w: no events inside the window", ErrStudy)
	}
	start := b.start.AddDate(0, lo, 0)
	months := hi - lo + 1
	epMonth := monthDiff(monthOf(b.ref.First), start)
	if epMonth < 1 {
		return nil, fmt.Errorf("%w: no months of data before the import's first month %s", ErrStudy, b.ref.First.Format("2006-01"))
	}
	st.Window = [2]string{start.Format("2006-01"), start.AddDate(0, months-1, 0).Format("2006-01")}

	names := b.outcomeOrder()
	clip := func(v []float64, u int) []float64 { return v[u*b.months+lo : u*b.months+hi+1] }

	// Classes of the import, for the covariates: the three most common among
	// the pre-period features of treated units.
	st.Units = make([]UnitInfo, b.nu)
	var treated, candidates []int
	for u := 0; u < b.nu; u++ {
		info := UnitInfo{Index: u, ID: b.units.ID(u)}
		if n, ok := b.units.(interface{ Name(int) string }); ok {
			info.Name = n.Name(u)
		}
		n := len(b.impObjects[u])
		if n > 0 {
			at := b.liveAtImp[u]
			if at < 0 {
				at = 0
			}
			info.ImportFeatures, info.FeaturesAtStart = n, at
			info.Intensity = float64(n) / float64(at+n)
			info.FirstMonth = monthOf(b.firstImp[u]).Format("2006-01")
		}
		am, isAssigned := b.assigned[u]
		if b.assigned != nil {
			info.Intensity, info.FirstMonth = 0, ""
			if isAssigned {
				info.FirstMonth = am.Format("2006-01")
				info.FeaturesAtStart = max(b.liveAtImp[u], 0)
				if b.liveAtImp[u] < 0 {
					info.FeaturesAtStart = b.live[u]
				}
			}
		}
		switch {
		case isAssigned || (b.assigned == nil && n > 0 && info.Intensity >= b.opts.MinIntensity):
			ft := monthDiff(b.startOf(u), start)
			switch {
			case ft < 1:
				info.Status, info.Reason = StatusDropped, "the import arrived before the panel's second month: no pre-period"
			case ft >= months:
				info.Status, info.Reason = StatusDropped, "the import arrived after the panel ends"
			default:
				info.Status = StatusTreated
				treated = append(treated, u)
			}
			if isAssigned && info.Status == StatusDropped {
				info.Reason = strings.ReplaceAll(info.Reason, "the import arrived", "the treatment began")
			}
		case b.assigned != nil && n > 0:
			info.Status, info.Reason = StatusExcluded, "edited by the event's own changesets but not listed as treated"
		case n > 0:
			info.Status, info.Reason = StatusExcluded, fmt.Sprintf("touched by the import below the minimum intensity (%.3f < %.3f)", info.Intensity, b.opts.MinIntensity)
		case b.touched[u]:
			info.Status, info.Reason = StatusExcluded, "edited by another import inside the window"
		default:
			candidates = append(candidates, u)
		}
		st.Units[u] = info
	}
	if len(treated) == 0 && b.assigned != nil {
		return nil, fmt.Errorf("%w: no listed unit has a month of data before its first treated month inside the panel %s to %s", ErrStudy, st.Window[0], st.Window[1])
	}
	if len(treated) == 0 {
		return nil, fmt.Errorf("%w: no unit reached the minimum intensity %.3f", ErrStudy, b.opts.MinIntensity)
	}
	if len(candidates) == 0 {
		return nil, fmt.Errorf("%w: no untouched units left as controls", ErrStudy)
	}

	// Covariates from the months before the import's first month.
	// match.Matching uses three summaries of pre-import activity: per-layer means
	// are nearly collinear with them, and Mahalanobis distance over collinear
	// covariates weighs their noise, which gave worse balance on simulated
	// worlds. The balance table also checks the per-layer means and the
	// features of the import's three most common classes.
	covNames := []string{"log1p mean monthly events", "log1p mean monthly contributors", "log1p features before import"}
	if b.assigned != nil {
		covNames[2] = "log1p features before the event"
	}
	st.Covariates = covNames
	preMean := func(name string, u int) float64 { return mean(clip(b.y[name], u)[:epMonth]) }
	features := func(u int) int {
		pre := 0
		for _, n := range b.classLive[u] {
			pre += n
		}
		return pre
	}
	cov := func(u int) []float64 {
		tot := 0.0
		for _, l := range layers.Layers {
			tot += preMean(l.String(), u)
		}
		return []float64{math.Log1p(tot), math.Log1p(preMean(OutcomeContributors, u)), math.Log1p(float64(features(u)))}
	}
	classes := topClasses(b.classLive, treated, 3)
	diagNames := append([]string{}, covNames...)
	for _, l := range layers.Layers {
		diagNames = append(diagNames, "log1p mean monthly "+l.String())
	}
	for _, c := range classes {
		diagNames = append(diagNames, "log1p features "+c)
	}
	for _, l := range layers.Layers {
		diagNames = append(diagNames, GrowthPrefix+l.String())
	}
	// growth is the log ratio of a layer's edits in the second half of the
	// pre-import months to the first half (+0.5 each): what unit fixed
	// effects do not absorb and parallel trends need alike.
	growth := func(name string, u int) float64 {
		pre := clip(b.y[name], u)[:epMonth]
		h := len(pre) / 2
		return math.Log((mean(pre[h:]) + 0.5) / (mean(pre[:h]) + 0.5))
	}
	diag := func(u int) []float64 {
		row := cov(u)
		for _, l := range layers.Layers {
			row = append(row, math.Log1p(preMean(l.String(), u)))
		}
		for _, c := range classes {
			row = append(row, math.Log1p(float64(b.classLive[u][c])))
		}
		for _, l := range layers.Layers {
			row = append(row, growth(l.String(), u))
		}
		return row
	}
	td := mat.NewDense(len(treated), len(diagNames), nil)
	for i, u := range treated {
		td.SetRow(i, diag(u))
	}
	cd := mat.NewDense(len(candidates), len(diagNames), nil)
	for i, u := range candidates {
		cd.SetRow(i, diag(u))
	}
	tm := mat.NewDense(len(treated), len(covNames), nil)
	for i, u := range treated {
		tm.SetRow(i, cov(u))
	}
	cm := mat.NewDense(len(candidates), len(covNames), nil)
	for i, u := range candidates {
		cm.SetRow(i, cov(u))
	}
	var m *match.Matching
	var err error
	if b.opts.Propensity {
		m, err = match.Propensity(tm, cm, b.opts.Match)
	} else {
		m, err = match.Nearest(tm, cm, b.opts.Match)
	}
	if err != nil {
		return nil, fmt.Errorf("match controls: %w", err)
	}
	if st.Balance, err = match.Balance(diagNames, td, cd, m); err != nil {
		return nil, fmt.Errorf("balance: %w", err)
	}
	for _, i := range m.Dropped {
		u := treated[i]
		st.Units[u].Status, st.Units[u].Reason = StatusDropped, "no control inside the caliper"
	}
	if len(m.Dropped) > 0 {
		st.Notes = append(st.Notes, fmt.Sprintf("%d treated unit(s) had no control inside the caliper and were dropped", len(m.Dropped)))
	}

	// The matched panel and the full panel.
	mk := func(members []int, weight func(u int) float64) *panel.Panel {
		p := &panel.Panel{Start: start, Months: months, Outcomes: names, Y: make([][]float64, len(names)), CovariateNames: st.Covariates}
		for _, u := range members {
			ft := -1
			if st.Units[u].Status == StatusTreated {
				ft = monthDiff(b.startOf(u), start)
			}
			p.Units = append(p.Units, panel.Unit{ID: st.Units[u].ID, FirstTreated: ft, Weight: weight(u),
				Covariates: cov(u), Intensity: st.Units[u].Intensity})
		}
		for o, name := range names {
			v := make([]float64, 0, len(members)*months)
			for _, u := range members {
				v = append(v, clip(b.y[name], u)...)
			}
			p.Y[o] = v
		}
		return p
	}
	weights := make(map[int]float64)
	var members []int
	for i, u := range treated {
		if m.TreatedWeights[i] > 0 {
			weights[u] = 1
			members = append(members, u)
		}
	}
	for i, u := range candidates {
		if w := m.ControlWeights[i]; w > 0 {
			weights[u] = w
			st.Units[u].Status = StatusControl
			members = append(members, u)
		}
	}
	sort.Ints(members)
	if len(members) == 0 || len(m.Dropped) == len(treated) {
		return nil, fmt.Errorf("%w: every treated unit was dropped by the caliper", ErrStudy)
	}
	for u, w := range weights {
		st.Units[u].Weight = w
	}
	st.Panel = mk(members, func(u int) float64 { return weights[u] })
	all := append(append([]int(nil), treated...), candidates...)
	sort.Ints(all)
	st.All = mk(all, func(int) float64 { return 1 })
	return st, nil
}

// startOf is the first treated month of unit u: the assigned one, else the
// month of the import's first edit there.
func (b *builder) startOf(u int) time.Time {
	if m, ok := b.assigned[u]; ok {
		return m
	}
	return monthOf(b.firstImp[u])
}

func mean(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// topClasses returns the n classes with most pre-period features over the
// given units, ties by name.
func topClasses(byUnit []map[string]int, units []int, n int) []string {
	tot := map[string]int{}
	for _, u := range units {
		for c, k := range byUnit[u] {
			tot[c] += k
		}
	}
	cs := make([]string, 0, len(tot))
	for c := range tot {
		cs = append(cs, c)
	}
	sort.Slice(cs, func(i, j int) bool {
		if tot[cs[i]] != tot[cs[j]] {
			return tot[cs[i]] > tot[cs[j]]
		}
		return cs[i] < cs[j]
	})
	if len(cs) > n {
		cs = cs[:n]
	}
	return cs
}

// RefOf returns what a study needs to know of an episode.
func RefOf(e *episode.Episode) ImportRef {
	r := ImportRef{ID: e.ID, Changesets: e.Changesets, First: e.First, Last: e.Last}
	for _, a := range e.Accounts {
		r.UIDs = append(r.UIDs, a.UID)
		r.Accounts = append(r.Accounts, a.Name)
	}
	return r
}

// UnitCounts is the "units" object of the audit JSON.
type UnitCounts struct {
	Spec       string `json:"spec"`
	Total      int    `json:"total"`
	Treated    int    `json:"treated"`
	Controls   int    `json:"controls"`
	Dropped    int    `json:"dropped"`
	Excluded   int    `json:"excluded"`
	Unmatched  int    `json:"unmatched"`
	Outside    int64  `json:"events_outside_units"`
	Unlocated  int64  `json:"events_without_location"`
	Covariates int    `json:"covariates"`
}

// Counts tallies the study's units by role; spec says how they were given.
func (st *Study) Counts(spec string) UnitCounts {
	c := UnitCounts{Spec: spec, Total: len(st.Units), Outside: st.Outside, Unlocated: st.Unlocated, Covariates: len(st.Covariates)}
	for _, u := range st.Units {
		switch u.Status {
		case StatusTreated:
			c.Treated++
		case StatusControl:
			c.Controls++
		case StatusDropped:
			c.Dropped++
		case StatusExcluded:
			c.Excluded++
		default:
			c.Unmatched++
		}
	}
	return c
}

// ForEpisode builds the study of episode ep over units, keeping the units
// that any other of the detected episodes all edited out of the controls.
func ForEpisode(ctx context.Context, src layers.DerivedReader, ep *episode.Episode, all []episode.Episode, units UnitIndex, so Options) (*Study, error) {
	so.OtherImports = append(slices.Clone(so.OtherImports), OtherChangesets(ep.ID, all)...)
	return Build(ctx, src, RefOf(ep), units, so)
}

// OtherChangesets lists the changesets of every episode but the one with id.
func OtherChangesets(id string, eps []episode.Episode) []osm.ChangesetID {
	var out []osm.ChangesetID
	for _, e := range eps {
		if e.ID != id {
			out = append(out, e.Changesets...)
		}
	}
	return out
}
