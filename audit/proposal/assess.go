package proposal

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"time"
	"unique"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geo"
	"github.com/paulmach/orb/quadtree"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/markdown"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// Source is what Assess reads: the classified events, the versions and
// the changesets. *ingest.Store meets it.
type Source interface {
	layers.DerivedReader
	episode.Source
}

// Assessment defaults.
const (
	DefaultDuplicateDistance = 15.0 // metres
	DefaultNearestImports    = 3
)

// AssessOptions tunes Assess. The zero value takes the defaults.
type AssessOptions struct {
	// Distance is how close, in metres, an existing feature of the same class
	// must be to count as a likely duplicate (default 15).
	Distance float64
	// spatial.Units, when set, gives the footprint and intensity per unit.
	Units study.UnitIndex
	// MinIntensity marks footprint units the proposal would make treated units
	// of a study (default 0.05, as StudyOptions).
	MinIntensity float64
	// Episodes are the store's past imports; nil means episode.Detect with the
	// rules.
	Episodes []episode.Episode
	// Nearest is how many past imports to list (default 3).
	Nearest int
	// MaxDuplicates is how many duplicate pairs are listed with ids (default
	// 1,000); all are counted.
	MaxDuplicates int
}

func (o AssessOptions) withDefaults() AssessOptions {
	if o.Distance <= 0 {
		o.Distance = DefaultDuplicateDistance
	}
	if o.MinIntensity <= 0 {
		o.MinIntensity = 0.05
	}
	if o.Nearest <= 0 {
		o.Nearest = DefaultNearestImports
	}
	if o.MaxDuplicates <= 0 {
		o.MaxDuplicates = 1000
	}
	return o
}

// FootprintUnit is one spatial unit the proposal reaches.
type FootprintUnit struct {
	ID        string  `json:"id"`
	Proposed  int     `json:"proposed"`  // proposed features located here
	Existing  int     `json:"existing"`  // features alive at the store's last time
	Intensity float64 `json:"intensity"` // Proposed / (Existing + Proposed), as a study counts it
	Treated   bool    `json:"would_be_treated"`
}

// Duplicate is a proposed feature with an existing feature of the same class
// close by.
type Duplicate struct {
	Proposed string  `json:"proposed"` // proposal feature id
	Existing string  `json:"existing"` // "node/12", "way/7"
	Class    string  `json:"class"`
	Metres   float64 `json:"metres"` // from the proposed feature's point, or its bound for lines and polygons
}

// ImportMatch is a past import and its distance to the proposal.
type ImportMatch struct {
	Episode       episode.Episode `json:"episode"`
	Distance      float64         `json:"distance"`       // (ClassDistance + TagDistance) / 2
	ClassDistance float64         `json:"class_distance"` // total variation distance of the class mixes
	TagDistance   float64         `json:"tag_distance"`   // mean absolute difference of key completeness
	Features      int             `json:"features"`       // features the import created
}

// LayerRange is the range of audited effects of the nearest past imports in
// one layer.
type LayerRange struct {
	Layer     string    `json:"layer"`
	Estimator string    `json:"estimator"`
	Relative  bool      `json:"relative"` // bounds are relative effects (else ATT in events per unit-month)
	Low       float64   `json:"low"`      // lowest lower 95% limit
	High      float64   `json:"high"`     // highest upper 95% limit
	Estimates []float64 `json:"estimates"`
	Imports   []string  `json:"imports"`
}

// LackingKey is a key a similar past import neglected which the proposal also
// carries less often than the organic reference of that import.
type LackingKey struct {
	Class          string  `json:"class"`
	Key            string  `json:"key"`
	Import         string  `json:"import"`
	ProposalWith   int     `json:"proposal_with"`
	ProposalTotal  int     `json:"proposal_total"`
	ProposalShare  float64 `json:"proposal_share"`
	ProposalUpper  float64 `json:"proposal_upper95"` // checklist.Wilson upper limit
	PastShare      float64 `json:"past_import_share"`
	ReferenceShare float64 `json:"reference_share"`
}

// Assessment is the result of Assess.
type Assessment struct {
	Proposal       string          `json:"proposal"`
	Profile        Profile         `json:"profile"`
	Distance       float64         `json:"duplicate_distance_m"`
	StoreTime      *time.Time      `json:"store_last_time,omitempty"`
	Footprint      []FootprintUnit `json:"footprint"`
	Outside        int             `json:"outside_units"` // proposed features in no unit
	Duplicates     []Duplicate     `json:"duplicates"`
	DuplicateCount int             `json:"duplicate_count"` // proposed features with at least one duplicate
	Nearest        []ImportMatch   `json:"nearest_imports"`
	Expected       []LayerRange    `json:"expected_effects"`
	Lacking        []LackingKey    `json:"lacking_keys"`
	Notes          []string        `json:"notes"`
	Cautions       []string        `json:"cautions"`
}

// Cautions are the review points of the community's import guidelines.
var Cautions = []string{
	"Document the import on the OSM wiki (the import catalogue and a page of its own) before uploading anything.",
	"Make sure the data's licence is compatible with the ODbL and that the owner's permission is on record.",
	"Discuss the plan with the local community and on the imports mailing list, and wait for their review.",
	"Upload from a dedicated import account, not your everyday one, with changesets that name the source.",
	"Have a plan for conflation and duplicates with existing data: the counts here are a first screen, not a conflation.",
	"These figures are evidence for local review, not a decision: the community's import guidelines and local review decide.",
}

// existing is a feature alive in the store.
type existing struct {
	ref   osm.FeatureID
	class string
	at    orb.Point
}

// Point lets orb/quadtree index existing features.
func (e *existing) Point() orb.Point { return e.at }

// Assess assesses a proposal against the store: its profile, footprint and
// intensity per unit, likely duplicates, the changesets it needs, and the
// past imports nearest to it. Add the audits of those imports with
// AddPastAudits.
//
// Existing features are those alive at the store's last event time (a
// new_feature event not followed by a deletion), placed where the classifier
// placed them (a node's position, a way's centre). A proposed point is a
// likely duplicate of an existing feature of the same class within Distance
// metres (orb/geo.Distance); a proposed line or polygon of one whose place
// lies inside its bound grown by Distance metres (orb/geo.BoundPad), the
// existing feature's own shape not being read. The spatial search uses one
// orb/quadtree per class.
//
// The store's events are read once, the versions once (for the past imports'
// profiles); memory holds one record per alive feature.
func Assess(ctx context.Context, src Source, r *rules.RuleSet, p *Proposal, opts AssessOptions) (*Assessment, error) {
	opts = opts.withDefaults()
	a := &Assessment{Proposal: p.Name, Profile: p.Profile(), Distance: opts.Distance,
		Footprint: []FootprintUnit{}, Duplicates: []Duplicate{}, Nearest: []ImportMatch{},
		Expected: []LayerRange{}, Lacking: []LackingKey{}, Notes: []string{}, Cautions: slices.Clone(Cautions)}
	if len(p.Features) == 0 {
		return nil, fmt.Errorf("%w: %s: no features to assess", ErrInvalid, p.Name)
	}
	alive, last, err := aliveFeatures(ctx, src)
	if err != nil {
		return nil, err
	}
	if !last.IsZero() {
		a.StoreTime = &last
	}
	if len(alive) == 0 {
		a.Notes = append(a.Notes, "the store holds no classified features: run loadwake classify first, or the area is empty")
	}
	if opts.Units != nil {
		a.footprint(p, alive, opts)
	}
	a.duplicates(p, alive, opts)
	eps := opts.Episodes
	if eps == nil {
		if eps, err = episode.Detect(ctx, src, r, episode.Options{}); err != nil {
			return nil, fmt.Errorf("audit: assess: %w", err)
		}
	}
	if len(eps) > 0 {
		profiles, err := importProfiles(ctx, src, r, eps)
		if err != nil {
			return nil, err
		}
		a.Nearest = nearestImports(&a.Profile, eps, profiles, opts.Nearest, r)
	} else {
		a.Notes = append(a.Notes, "no past imports found in the store to compare with")
	}
	return a, nil
}

// aliveFeatures reads every event and returns the features alive at the end
// with the time of the last event.
func aliveFeatures(ctx context.Context, src layers.DerivedReader) ([]existing, time.Time, error) {
	idx := make(map[osm.FeatureID]int32)
	var feats []existing
	var free []int32
	var last time.Time
	err := layers.ScanEvents(ctx, src, time.Time{}, time.Time{}, func(e *layers.Event) error {
		if e.Time.After(last) {
			last = e.Time
		}
		ref := e.Feature()
		switch e.Layer {
		case layers.NewFeature:
			if !e.Located {
				return nil
			}
			rec := existing{ref: ref, class: unique.Make(e.Class).Value(), at: e.Location}
			if i, ok := idx[ref]; ok {
				feats[i] = rec
				return nil
			}
			if k := len(free); k > 0 {
				i := free[k-1]
				free = free[:k-1]
				feats[i] = rec
				idx[ref] = i
				return nil
			}
			idx[ref] = int32(len(feats))
			feats = append(feats, rec)
		case layers.Deletion:
			if i, ok := idx[ref]; ok {
				delete(idx, ref)
				feats[i] = existing{}
				free = append(free, i)
			}
		case layers.Geometry:
			if i, ok := idx[ref]; ok && e.Located {
				feats[i].at = e.Location
			}
		}
		return nil
	})
	if err != nil {
		return nil, time.Time{}, fmt.Errorf("audit: assess: scan events: %w", err)
	}
	out := feats[:0]
	for _, f := range feats {
		if f.class != "" {
			out = append(out, f)
		}
	}
	return out, last, nil
}

func (a *Assessment) footprint(p *Proposal, alive []existing, opts AssessOptions) {
	units := opts.Units
	proposed := map[int]int{}
	for i := range p.Features {
		f := &p.Features[i]
		if f.Geom == nil {
			continue
		}
		u, ok := units.Locate(f.At)
		if !ok {
			a.Outside++
			continue
		}
		proposed[u]++
	}
	have := make(map[int]int, len(proposed))
	for i := range alive {
		if u, ok := units.Locate(alive[i].at); ok {
			if _, in := proposed[u]; in {
				have[u]++
			}
		}
	}
	for u, n := range proposed {
		fu := FootprintUnit{ID: units.ID(u), Proposed: n, Existing: have[u]}
		fu.Intensity = float64(n) / float64(n+have[u])
		fu.Treated = fu.Intensity >= opts.MinIntensity
		a.Footprint = append(a.Footprint, fu)
	}
	slices.SortFunc(a.Footprint, func(x, y FootprintUnit) int {
		if x.Proposed != y.Proposed {
			return y.Proposed - x.Proposed
		}
		return strings.Compare(x.ID, y.ID)
	})
	if a.Outside > 0 {
		a.Notes = append(a.Notes, fmt.Sprintf("%d proposed feature(s) lie outside every unit", a.Outside))
	}
}

func (a *Assessment) duplicates(p *Proposal, alive []existing, opts AssessOptions) {
	if p.Bound.IsZero() && len(p.Features) > 0 && p.Features[0].Geom == nil {
		return
	}
	area := geo.BoundPad(p.Bound, opts.Distance+1)
	trees := map[string]*quadtree.Quadtree{}
	for i := range alive {
		e := &alive[i]
		if !area.Contains(e.at) {
			continue
		}
		q := trees[e.class]
		if q == nil {
			q = quadtree.New(area)
			trees[e.class] = q
		}
		_ = q.Add(e) // inside area by the test above
	}
	var buf []orb.Pointer
	for i := range p.Features {
		f := &p.Features[i]
		q := trees[f.Class]
		if q == nil || f.Geom == nil || f.Class == "" {
			continue
		}
		search := geo.BoundPad(f.Bound, opts.Distance)
		buf = q.InBound(buf[:0], search)
		found := false
		for _, ptr := range buf {
			e := ptr.(*existing)
			var d float64
			if f.Kind == KindPoint && f.Bound.Min == f.Bound.Max {
				d = geo.Distance(f.At, e.at)
				if d > opts.Distance {
					continue
				}
			} else if !f.Bound.Contains(e.at) {
				d = boundDistance(f.Bound, e.at)
			}
			found = true
			if len(a.Duplicates) < opts.MaxDuplicates {
				a.Duplicates = append(a.Duplicates, Duplicate{Proposed: f.ID, Existing: fmt.Sprintf("%s/%d", e.ref.Type(), e.ref.Ref()), Class: f.Class, Metres: d})
			}
		}
		if found {
			a.DuplicateCount++
		}
	}
	if a.DuplicateCount > 0 && len(a.Duplicates) >= opts.MaxDuplicates {
		a.Notes = append(a.Notes, fmt.Sprintf("only the first %d duplicate pairs are listed", opts.MaxDuplicates))
	}
}

// boundDistance is the distance in metres from p to the nearest point of b.
func boundDistance(b orb.Bound, p orb.Point) float64 {
	q := orb.Point{math.Max(b.Min[0], math.Min(p[0], b.Max[0])), math.Max(b.Min[1], math.Min(p[1], b.Max[1]))}
	return geo.Distance(p, q)
}

// importProfile is the class mix and key completeness of the features one
// past import created.
type importProfile struct {
	features int
	classes  map[string]int
	keys     map[string]int // over all its features
}

// importProfiles reads the versions once and profiles the features each
// episode created: objects whose first classed version came from one of its
// changesets, with the tags of that version.
func importProfiles(ctx context.Context, src checklist.VersionScanner, r *rules.RuleSet, eps []episode.Episode) ([]importProfile, error) {
	byCS := map[osm.ChangesetID]int{}
	for i, e := range eps {
		for _, c := range e.Changesets {
			byCS[c] = i
		}
	}
	out := make([]importProfile, len(eps))
	for i := range out {
		out[i] = importProfile{classes: map[string]int{}, keys: map[string]int{}}
	}
	for _, t := range []osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation} {
		var lastRef int64 = -1
		done := false
		err := src.ScanVersions(ctx, t, func(o osm.Object) error {
			id := o.ObjectID()
			if id.Ref() != lastRef {
				lastRef, done = id.Ref(), false
			}
			if done {
				return nil
			}
			_, vis, tags := checklist.VersionInfo(o)
			if !vis {
				return nil
			}
			class := r.Class(tags)
			if class == "" {
				return nil
			}
			done = true
			var cs osm.ChangesetID
			switch v := o.(type) {
			case *osm.Node:
				cs = v.ChangesetID
			case *osm.Way:
				cs = v.ChangesetID
			case *osm.Relation:
				cs = v.ChangesetID
			}
			i, ok := byCS[cs]
			if !ok {
				return nil
			}
			ip := &out[i]
			ip.features++
			ip.classes[class]++
			classKey, _, _ := strings.Cut(class, "=")
			for _, tg := range tags {
				if tg.Key == classKey || tg.Value == "" || r.IsClassKey(tg.Key) {
					continue
				}
				if _, prov := r.Family(tg.Key); prov {
					continue
				}
				ip.keys[tg.Key]++
			}
			return nil
		})
		if err != nil {
			return nil, fmt.Errorf("audit: assess: profile past imports: scan %s versions: %w", t, err)
		}
	}
	return out, nil
}

// nearestImports ranks past imports by their distance to the proposal:
//
//	D = (TV + K) / 2
//
// with TV = ½ Σ_c |p_c − q_c| the total variation distance between the class
// shares of the proposal and of the import's created features, and K the
// mean over keys k of |s_k − t_k|, the shares of all features carrying k,
// taken over the keys either side carries on at least 10% of its features
// (provenance keys and feature class keys left out). Both parts lie in [0, 1], so
// does D: 0 for the same mix and completeness, 1 for disjoint classes and
// opposite completeness. Imports that created no classed features are left
// out.
func nearestImports(pr *Profile, eps []episode.Episode, ips []importProfile, n int, r *rules.RuleSet) []ImportMatch {
	propClasses := map[string]float64{}
	propKeys := map[string]float64{}
	total := 0
	for _, c := range pr.Classes {
		if c.Class == "" {
			continue
		}
		total += c.Features
	}
	for _, c := range pr.Classes {
		if c.Class == "" || total == 0 {
			continue
		}
		propClasses[c.Class] = float64(c.Features) / float64(total)
		for _, k := range c.Keys {
			if _, prov := r.Family(k.Key); prov || r.IsClassKey(k.Key) {
				continue
			}
			propKeys[k.Key] += float64(k.With) / float64(total)
		}
	}
	var out []ImportMatch
	for i, ip := range ips {
		if ip.features == 0 || total == 0 {
			continue
		}
		tv := 0.0
		seen := map[string]bool{}
		for c, s := range propClasses {
			tv += math.Abs(s - float64(ip.classes[c])/float64(ip.features))
			seen[c] = true
		}
		for c, k := range ip.classes {
			if !seen[c] {
				tv += float64(k) / float64(ip.features)
			}
		}
		tv /= 2
		keys := map[string]bool{}
		for k, s := range propKeys {
			if s >= 0.1 {
				keys[k] = true
			}
		}
		for k, c := range ip.keys {
			if float64(c)/float64(ip.features) >= 0.1 {
				keys[k] = true
			}
		}
		kd := 0.0
		for k := range keys {
			kd += math.Abs(propKeys[k] - float64(ip.keys[k])/float64(ip.features))
		}
		if len(keys) > 0 {
			kd /= float64(len(keys))
		}
		out = append(out, ImportMatch{Episode: eps[i], Distance: (tv + kd) / 2, ClassDistance: tv, TagDistance: kd, Features: ip.features})
	}
	slices.SortStableFunc(out, func(a, b ImportMatch) int {
		switch {
		case a.Distance < b.Distance:
			return -1
		case a.Distance > b.Distance:
			return 1
		}
		return strings.Compare(a.Episode.ID, b.Episode.ID)
	})
	if len(out) > n {
		out = out[:n]
	}
	if out == nil {
		out = []ImportMatch{}
	}
	return out
}

// AddPastAudits adds what the audits of the nearest past imports found:
// effects by episode id give an expected range per layer (over those imports,
// the lowest lower and highest upper 95% limit of the headline estimator,
// did.Headline, the one each past audit's own summary reports; an import
// whose headline has no reliable interval is named in the notes and left
// out of the range), and their checklists the keys they neglected that the proposal
// also lacks: a neglected key (primary reference) of a class the proposal
// has, where the checklist.Wilson upper 95% limit of the proposal's share lies below
// the reference share. Imports not among Nearest are ignored.
func (a *Assessment) AddPastAudits(effects map[string][]did.Effect, checklists map[string]*checklist.Checklist) {
	type acc struct {
		r   LayerRange
		set bool
	}
	ranges := map[string]*acc{}
	var order []string
	for _, m := range a.Nearest {
		id := m.Episode.ID
		byLayer := map[string]did.Effect{}
		for _, e := range effects[id] {
			if e.Estimator == did.Headline {
				byLayer[e.Layer] = e
			}
		}
		for _, l := range layers.Layers {
			e, ok := byLayer[l.String()]
			if !ok || math.IsNaN(e.CI95[0]) || math.IsNaN(e.CI95[1]) {
				continue
			}
			if e.NoInterval {
				a.Notes = append(a.Notes, fmt.Sprintf("layer %s: past import %s has no reliable interval (%d import areas; %s) and is left out of the range", e.Layer, id, e.TreatedUnits, e.Method))
				continue
			}
			ac := ranges[e.Layer]
			if ac == nil {
				ac = &acc{}
				ranges[e.Layer] = ac
				order = append(order, e.Layer)
			}
			est := e.ATT
			rel := e.RelativeEffect != nil
			if rel {
				est = *e.RelativeEffect
			}
			if ac.set && (ac.r.Relative != rel || ac.r.Estimator != e.Estimator) {
				a.Notes = append(a.Notes, fmt.Sprintf("layer %s: the effect of %s is on another scale or estimator and is left out of the range", e.Layer, id))
				continue
			}
			if !ac.set {
				ac.r = LayerRange{Layer: e.Layer, Estimator: e.Estimator, Relative: rel, Low: e.CI95[0], High: e.CI95[1]}
				ac.set = true
			}
			ac.r.Low = math.Min(ac.r.Low, e.CI95[0])
			ac.r.High = math.Max(ac.r.High, e.CI95[1])
			ac.r.Estimates = append(ac.r.Estimates, est)
			ac.r.Imports = append(ac.r.Imports, id)
		}
		cl := checklists[id]
		if cl == nil {
			continue
		}
		for _, row := range cl.Neglected(cl.PrimaryRef()) {
			with, total, ok := a.Profile.classShare(row.Class, row.Key)
			if !ok || total == 0 {
				continue
			}
			w, err := checklist.Wilson(with, total, 0.95)
			if err != nil || w.Upper >= row.ReferenceShare {
				continue
			}
			a.Lacking = append(a.Lacking, LackingKey{Class: row.Class, Key: row.Key, Import: id,
				ProposalWith: with, ProposalTotal: total, ProposalShare: w.Estimate, ProposalUpper: w.Upper,
				PastShare: row.ImportShare, ReferenceShare: row.ReferenceShare})
		}
	}
	a.Expected = a.Expected[:0]
	for _, l := range order {
		a.Expected = append(a.Expected, ranges[l].r)
	}
}

// WriteJSON writes the assessment as indented JSON.
func (a *Assessment) WriteJSON(w io.Writer) error { return writeJSON(w, a) }

// WriteMarkdown writes the assessment as a Markdown report, every string
// from the proposal or the store escaped, closing with the review points of
// the import guidelines.
func (a *Assessment) WriteMarkdown(w io.Writer) error {
	var b strings.Builder
	e := markdown.Escape
	pr := &a.Profile
	fmt.Fprintf(&b, "## Proposed import: %s\n\n", e(a.Proposal))
	fmt.Fprintf(&b, "%d features; %d OSM changes (way nodes included), %d changeset(s) at the API 0.6 limit of %d changes each.\n\n",
		pr.Features, pr.Changes, pr.Changesets, APIChangesetLimit)
	b.WriteString("| class | features | points | lines | length km | polygons | area ha | most complete keys |\n|---|---|---|---|---|---|---|---|\n")
	for _, c := range pr.Classes {
		name := c.Class
		if name == "" {
			name = "(no class)"
		}
		var ks []string
		for i, k := range c.Keys {
			if i == 5 {
				break
			}
			ks = append(ks, fmt.Sprintf("%s %.0f%%", e(k.Key), 100*k.Share))
		}
		fmt.Fprintf(&b, "| %s | %d | %d | %d | %.2f | %d | %.2f | %s |\n", e(name), c.Features, c.Points, c.Lines, c.LengthM/1000, c.Polygons, c.AreaM2/1e4, strings.Join(ks, ", "))
	}
	if len(a.Footprint) > 0 {
		treated := 0
		for _, f := range a.Footprint {
			if f.Treated {
				treated++
			}
		}
		fmt.Fprintf(&b, "\nFootprint: %d unit(s); in %d of them the proposal would reach an intensity of 5%% or more of the features there.\n\n", len(a.Footprint), treated)
		b.WriteString("| unit | proposed | existing | intensity |\n|---|---|---|---|\n")
		for i, f := range a.Footprint {
			if i == 20 {
				fmt.Fprintf(&b, "| … %d more | | | |\n", len(a.Footprint)-20)
				break
			}
			fmt.Fprintf(&b, "| %s | %d | %d | %.1f%% |\n", e(f.ID), f.Proposed, f.Existing, 100*f.Intensity)
		}
	}
	fmt.Fprintf(&b, "\nLikely duplicates: %d of %d proposed features have an existing feature of the same class within %.0f m.\n", a.DuplicateCount, pr.Features, a.Distance)
	for i, d := range a.Duplicates {
		if i == 20 {
			fmt.Fprintf(&b, "- … %d more pairs in the JSON output\n", len(a.Duplicates)-20)
			break
		}
		fmt.Fprintf(&b, "- %s near existing %s (%s, %.1f m)\n", e(d.Proposed), e(d.Existing), e(d.Class), d.Metres)
	}
	if len(a.Nearest) > 0 {
		b.WriteString("\nNearest past imports in this store (distance 0 = same class mix and tag completeness, 1 = nothing in common):\n\n")
		for _, m := range a.Nearest {
			fmt.Fprintf(&b, "- %s (%s to %s, %d features): distance %.2f (classes %.2f, tags %.2f)\n",
				e(m.Episode.ID), m.Episode.FirstMonth, m.Episode.LastMonth, m.Features, m.Distance, m.ClassDistance, m.TagDistance)
		}
	}
	if len(a.Expected) > 0 {
		b.WriteString("\nWhat followed those imports (range of 95% intervals over them):\n\n")
		for _, r := range a.Expected {
			unit := "events per unit-month"
			lo, hi := r.Low, r.High
			if r.Relative {
				unit, lo, hi = "relative change", 100*lo, 100*hi
				fmt.Fprintf(&b, "- %s: %+.0f%% to %+.0f%% (%s, %s)\n", r.Layer, lo, hi, r.Estimator, unit)
				continue
			}
			fmt.Fprintf(&b, "- %s: %+.2f to %+.2f %s (%s)\n", r.Layer, lo, hi, unit, r.Estimator)
		}
	}
	if len(a.Lacking) > 0 {
		b.WriteString("\nKeys similar past imports neglected that this proposal also lacks:\n\n")
		for _, l := range a.Lacking {
			fmt.Fprintf(&b, "- [ ] **%s** on %s: %.0f%% of proposed features (past import %s: %.0f%%; organic reference %.0f%%)\n",
				e(l.Key), e(l.Class), 100*l.ProposalShare, e(l.Import), 100*l.PastShare, 100*l.ReferenceShare)
		}
	}
	if len(pr.Warnings) > 0 {
		b.WriteString("\nInput warnings:\n\n")
		for _, wn := range pr.Warnings {
			fmt.Fprintf(&b, "- %s\n", e(wn))
		}
	}
	for _, n := range a.Notes {
		fmt.Fprintf(&b, "\nNote: %s\n", e(n))
	}
	b.WriteString("\n**Before any upload: the review points of the import guidelines**\n\n")
	for _, c := range a.Cautions {
		fmt.Fprintf(&b, "- [ ] %s\n", c)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

// writeJSON writes v as indented JSON.
func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}
