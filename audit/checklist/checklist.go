package checklist

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"regexp"
	"slices"
	"strings"
	"time"
	"unique"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/markdown"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// Reference names of a checklist row: what the imported features are compared with.
const (
	RefMatchedControls   = "matched-controls"   // organic features of the class in the study's control units
	RefTreatedBefore     = "treated-before"     // organic features of the class in treated units, created before the import
	RefWithoutProvenance = "without-provenance" // snapshot mode: features of the class without the provenance tag
)

// Checklist defaults (see Options).
const (
	DefaultMinShare    = 0.10
	DefaultMinFeatures = 5
	DefaultAlpha       = 0.05
)

// ErrChecklist is the sentinel under errors that make a checklist impossible.
var ErrChecklist = errors.New("checklist: cannot build checklist")

// VersionScanner reads stored versions. *ingest.Store meets it.
type VersionScanner interface {
	// ScanVersions calls fn for every stored version of type t, id ascending
	// then version ascending.
	ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error
}

// Source is what Build reads: the classified events and the
// stored versions. *ingest.Store meets it.
type Source interface {
	layers.DerivedReader
	VersionScanner
}

// Options tunes Build and Snapshot. The zero value
// takes the documented defaults.
type Options struct {
	// A key is considered for a class when at least MinShare of the reference
	// features of that class carry it (default 0.10) and at least MinFeatures
	// of them (default 5); the same MinFeatures is the least number of
	// reference features a class needs to be compared at all.
	MinShare    float64
	MinFeatures int
	// Alpha is the q-value below which a lower share is flagged neglected
	// (default 0.05).
	Alpha float64
	// WindowEnd is the instant the tags are read at; zero means the first
	// instant after the study's window (study.Study.Window[1]).
	WindowEnd time.Time
	// OtherImports are changesets of other imports: features they created are
	// not organic and are left out of the references.
	OtherImports []osm.ChangesetID
	// Types limits Snapshot to these object types (nil: all).
	Types []osm.Type
}

func (o Options) withDefaults() Options {
	if o.MinShare <= 0 {
		o.MinShare = DefaultMinShare
	}
	if o.MinFeatures <= 0 {
		o.MinFeatures = DefaultMinFeatures
	}
	if o.Alpha <= 0 {
		o.Alpha = DefaultAlpha
	}
	return o
}

// Row compares the coverage of one attribute key among a class's
// imported features with its coverage among reference features of that
// class. Shares are with/total; CI95 intervals are Wilson's for the shares and
// Newcombe's hybrid score interval for Difference = import share − reference
// share. PValue is the pooled two-proportion z test; QValue its
// Benjamini–Hochberg adjustment across the rows of the same reference.
//
// GainedLater is the share of imported features that gained the key after
// their import version; OrganicGainRate the share of reference features that
// gained it after their first version (both 0 in snapshot mode). Affected is
// the number of imported features without the key. Score, the ranking
// measure, is the deficit (−Difference, 0 when not negative) times the number
// of imported features of the class: the tags missing against the reference.
type Row struct {
	Class           string     `json:"class"`
	Key             string     `json:"key"`
	Reference       string     `json:"reference"`
	ImportWith      int        `json:"import_with"`
	ImportTotal     int        `json:"import_total"`
	ImportShare     float64    `json:"import_share"`
	ImportCI95      [2]float64 `json:"import_ci95"`
	ReferenceWith   int        `json:"reference_with"`
	ReferenceTotal  int        `json:"reference_total"`
	ReferenceShare  float64    `json:"reference_share"`
	ReferenceCI95   [2]float64 `json:"reference_ci95"`
	Difference      float64    `json:"difference"`
	CI95            [2]float64 `json:"ci95"`
	PValue          float64    `json:"p_value"`
	QValue          float64    `json:"q_value"`
	GainedLater     float64    `json:"gained_later"`
	OrganicGainRate float64    `json:"organic_gain_rate"`
	Affected        int        `json:"affected"`
	Score           float64    `json:"score"`
	Neglected       bool       `json:"neglected"`
}

// ClassCounts is how many features of a class each group holds.
type ClassCounts struct {
	Class     string         `json:"class"`
	Imported  int            `json:"imported"`
	Reference map[string]int `json:"reference"` // by reference name
}

// Checklist is the neglected-tag checklist of one import.
type Checklist struct {
	Import      string        `json:"import"`
	Mode        string        `json:"mode"` // "history" or "snapshot"
	Provenance  string        `json:"provenance,omitempty"`
	WindowEnd   *time.Time    `json:"window_end,omitempty"`
	MinShare    float64       `json:"min_share"`
	MinFeatures int           `json:"min_features"`
	Alpha       float64       `json:"alpha"`
	Classes     []ClassCounts `json:"classes"`
	Rows        []Row         `json:"rows"`
	Notes       []string      `json:"notes"`
	Cautions    []string      `json:"cautions"`
}

// Cautions close every checklist.
var Cautions = []string{
	"These figures are evidence for local review, not a verdict on the import or on the people who made it.",
	"A lower share can have good reasons (the key does not apply, the source lacks it); check on the ground and with the local community before mass-adding tags.",
	"Any follow-up edit in bulk is itself an automated edit: follow the community's import guidelines and the automated edits code of conduct, and discuss it locally first.",
}

// tally counts one group of features of one class.
type tally struct {
	total  int
	with   map[string]int
	gained map[string]int
}

func (t *tally) add(final, initial osm.Tags, trackGain bool) {
	t.total++
	if t.with == nil {
		t.with = make(map[string]int)
		t.gained = make(map[string]int)
	}
	for _, tg := range final {
		if tg.Value == "" {
			continue
		}
		t.with[tg.Key]++
		if trackGain && initial.Find(tg.Key) == "" {
			t.gained[tg.Key]++
		}
	}
}

// groups of features.
const (
	grpImport uint8 = iota + 1
	grpControl
	grpTreatedBefore
)

// featRec is a feature a history checklist follows.
type featRec struct {
	group   uint8
	version int
	class   string
}

// Build compares, for each feature class the import created, each
// attribute key's coverage among the import's features with its coverage
// among organically created features of the class in the study's control
// units (RefMatchedControls) and in its treated units before the import
// (RefTreatedBefore).
//
// The import's features are the objects whose first classed version (the
// new_feature event) came from the import's changesets; reference features
// are the other new_feature events before the window end located in control
// units, or in treated units before the import's first edit. Tags are read as
// of the window end from the stored versions; features deleted by then are
// left out (counted in the notes). Keys of the provenance families and the
// class key are skipped, as are keys fewer than MinShare or MinFeatures of
// the reference features carry.
//
// It reads the events once and the versions of each type once; memory holds
// one small record per followed feature.
func Build(ctx context.Context, src Source, r *rules.RuleSet, st *study.Study, units study.UnitIndex, opts Options) (*Checklist, error) {
	opts = opts.withDefaults()
	if st == nil || units == nil {
		return nil, fmt.Errorf("%w: no study", ErrChecklist)
	}
	end := opts.WindowEnd
	if end.IsZero() {
		last, err := time.Parse("2006-01", st.Window[1])
		if err != nil {
			return nil, fmt.Errorf("%w: study window %q: %v", ErrChecklist, st.Window[1], err)
		}
		end = last.AddDate(0, 1, 0)
	}
	own := make(map[osm.ChangesetID]bool, len(st.Import.Changesets))
	for _, c := range st.Import.Changesets {
		own[c] = true
	}
	other := make(map[osm.ChangesetID]bool, len(opts.OtherImports))
	for _, c := range opts.OtherImports {
		if !own[c] {
			other[c] = true
		}
	}
	status := make([]study.UnitStatus, units.Len())
	for _, u := range st.Units {
		if u.Index >= 0 && u.Index < len(status) {
			status[u.Index] = u.Status
		}
	}
	feats := make(map[osm.FeatureID]featRec)
	err := layers.ScanEvents(ctx, src, time.Time{}, end, func(e *layers.Event) error {
		if e.Layer != layers.NewFeature || e.Class == "" {
			return nil
		}
		var g uint8
		switch {
		case own[e.Changeset]:
			g = grpImport
		case other[e.Changeset] || !e.Located:
			return nil
		default:
			u, ok := units.Locate(e.Location)
			if !ok {
				return nil
			}
			switch {
			case status[u] == study.StatusControl:
				g = grpControl
			case status[u] == study.StatusTreated && e.Time.Before(st.Import.First):
				g = grpTreatedBefore
			default:
				return nil
			}
		}
		feats[e.Feature()] = featRec{group: g, version: e.Object.Version(), class: unique.Make(e.Class).Value()}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("%w: scan events: %w", ErrChecklist, err)
	}
	counts := map[string]*[4]tally{}
	deleted := 0
	for _, t := range []osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation} {
		var (
			cur            osm.FeatureID
			rec            featRec
			active         bool
			initial, final osm.Tags
			visible        bool
		)
		flush := func() {
			if !active {
				return
			}
			active = false
			if !visible {
				deleted++
				return
			}
			c := counts[rec.class]
			if c == nil {
				c = new([4]tally)
				counts[rec.class] = c
			}
			c[rec.group].add(final, initial, true)
		}
		err := src.ScanVersions(ctx, t, func(o osm.Object) error {
			id := o.ObjectID()
			ref := o.(osm.Element).FeatureID()
			if !active || ref != cur {
				flush()
				fr, ok := feats[ref]
				if !ok {
					return nil
				}
				cur, rec, active, initial, final, visible = ref, fr, true, nil, nil, false
			}
			ts, vis, tags := VersionInfo(o)
			if !ts.Before(end) {
				return nil
			}
			if id.Version() == rec.version {
				initial = tags
			}
			if id.Version() >= rec.version {
				final, visible = tags, vis
			}
			return nil
		})
		flush()
		if err != nil {
			return nil, fmt.Errorf("%w: scan %s versions: %w", ErrChecklist, t, err)
		}
	}
	cl := &Checklist{Import: st.Import.ID, Mode: "history", WindowEnd: &end}
	refs := []refGroup{{RefMatchedControls, grpControl}, {RefTreatedBefore, grpTreatedBefore}}
	if err := cl.fill(r, counts, refs, opts, true, nil); err != nil {
		return nil, err
	}
	if deleted > 0 {
		cl.Notes = append(cl.Notes, fmt.Sprintf("%d followed feature(s) were deleted before %s and are not counted", deleted, end.Format(time.DateOnly)))
	}
	return cl, nil
}

// VersionInfo returns the timestamp, visibility and tags of a node, way or
// relation version: what a checklist, or a profile of past imports, needs.
func VersionInfo(o osm.Object) (time.Time, bool, osm.Tags) {
	switch v := o.(type) {
	case *osm.Node:
		return v.Timestamp, v.Visible, v.Tags
	case *osm.Way:
		return v.Timestamp, v.Visible, v.Tags
	case *osm.Relation:
		return v.Timestamp, v.Visible, v.Tags
	}
	return time.Time{}, false, nil
}

// Provenance selects an import's features by a tag: a key prefix ("tiger:*"),
// a key ("source"), a key and value ("source=Vellmar County GIS") or a key and
// a regular expression its value must match ("source~(?i)county gis").
type Provenance struct {
	spec   string
	key    string
	prefix bool
	value  string
	hasVal bool
	re     *regexp.Regexp
}

// ParseProvenance parses a provenance pattern (see Provenance).
func ParseProvenance(s string) (Provenance, error) {
	p := Provenance{spec: s}
	if i := strings.IndexAny(s, "=~"); i >= 0 {
		p.key = s[:i]
		if s[i] == '=' {
			p.value, p.hasVal = s[i+1:], true
		} else {
			re, err := regexp.Compile(s[i+1:])
			if err != nil {
				return Provenance{}, fmt.Errorf("%w: provenance %q: %v", ErrChecklist, s, err)
			}
			p.re = re
		}
	} else if k, ok := strings.CutSuffix(s, "*"); ok {
		p.key, p.prefix = k, true
	} else {
		p.key = s
	}
	if p.key == "" {
		return Provenance{}, fmt.Errorf("%w: provenance %q has no key (want prefix:*, key, key=value or key~regex)", ErrChecklist, s)
	}
	return p, nil
}

// String returns the pattern as given.
func (p Provenance) String() string { return p.spec }

// Match reports whether tags carry the provenance tag.
func (p Provenance) Match(tags osm.Tags) bool {
	for _, t := range tags {
		if p.MatchKey(t.Key) && (p.re == nil || p.re.MatchString(t.Value)) && (!p.hasVal || t.Value == p.value) {
			return true
		}
	}
	return false
}

// MatchKey reports whether key is the provenance key (or under its prefix).
func (p Provenance) MatchKey(key string) bool {
	if p.prefix {
		return strings.HasPrefix(key, p.key)
	}
	return key == p.key
}

// Snapshot is the checklist of a store without history: the
// import's features are those whose latest stored version carries the
// provenance tag, compared within each class with the features of that class
// without it (RefWithoutProvenance). Deleted objects and objects without a
// class are left out; opts.Types limits the object types. Keys matching the
// provenance pattern are skipped besides the provenance families and the
// class key.
func Snapshot(ctx context.Context, src VersionScanner, r *rules.RuleSet, prov Provenance, opts Options) (*Checklist, error) {
	opts = opts.withDefaults()
	types := opts.Types
	if len(types) == 0 {
		types = []osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation}
	}
	counts := map[string]*[4]tally{}
	for _, t := range types {
		var last osm.Object
		var lastRef int64 = -1
		flush := func() {
			if last == nil {
				return
			}
			_, vis, tags := VersionInfo(last)
			last = nil
			if !vis {
				return
			}
			class := r.Class(tags)
			if class == "" {
				return
			}
			c := counts[class]
			if c == nil {
				c = new([4]tally)
				counts[unique.Make(class).Value()] = c
			}
			g := grpControl
			if prov.Match(tags) {
				g = grpImport
			}
			c[g].add(tags, nil, false)
		}
		err := src.ScanVersions(ctx, t, func(o osm.Object) error {
			if ref := o.ObjectID().Ref(); ref != lastRef {
				flush()
				lastRef = ref
			}
			last = o
			return nil
		})
		flush()
		if err != nil {
			return nil, fmt.Errorf("%w: scan %s versions: %w", ErrChecklist, t, err)
		}
	}
	cl := &Checklist{Import: prov.String(), Mode: "snapshot", Provenance: prov.String()}
	refs := []refGroup{{RefWithoutProvenance, grpControl}}
	if err := cl.fill(r, counts, refs, opts, false, prov.MatchKey); err != nil {
		return nil, err
	}
	return cl, nil
}

// refGroup names the group of features a reference is counted in.
type refGroup struct {
	name string
	grp  uint8
}

// fill turns the tallies into rows; skip, when set, leaves out more keys.
func (cl *Checklist) fill(r *rules.RuleSet, counts map[string]*[4]tally, refs []refGroup, opts Options, gain bool, skip func(string) bool) error {
	cl.MinShare, cl.MinFeatures, cl.Alpha = opts.MinShare, opts.MinFeatures, opts.Alpha
	cl.Classes, cl.Rows, cl.Notes = []ClassCounts{}, []Row{}, []string{}
	cl.Cautions = slices.Clone(Cautions)
	classes := make([]string, 0, len(counts))
	for c, t := range counts {
		if t[grpImport].total > 0 {
			classes = append(classes, c)
		}
	}
	slices.Sort(classes)
	if len(classes) == 0 {
		return fmt.Errorf("%w: the import created no features with a class", ErrChecklist)
	}
	for _, ref := range refs {
		var rows []Row
		var ps []float64
		for _, class := range classes {
			t := counts[class]
			imp, rf := &t[grpImport], &t[ref.grp]
			if rf.total < opts.MinFeatures {
				continue
			}
			classKey, _, _ := strings.Cut(class, "=")
			keys := make([]string, 0, len(rf.with))
			for k, n := range rf.with {
				if k == classKey || n < opts.MinFeatures || float64(n) < opts.MinShare*float64(rf.total) {
					continue
				}
				if _, prov := r.Family(k); prov || skip != nil && skip(k) {
					continue
				}
				keys = append(keys, k)
			}
			slices.Sort(keys)
			for _, k := range keys {
				row, err := compareKey(class, k, ref.name, imp, rf, gain)
				if err != nil {
					return fmt.Errorf("%w: %s %s: %w", ErrChecklist, class, k, err)
				}
				rows = append(rows, row)
				ps = append(ps, row.PValue)
			}
		}
		if len(rows) == 0 {
			cl.Notes = append(cl.Notes, fmt.Sprintf("no class had %d or more %s features to compare with", opts.MinFeatures, ref.name))
			continue
		}
		qs, err := BHAdjust(ps)
		if err != nil {
			return fmt.Errorf("%w: %w", ErrChecklist, err)
		}
		for i := range rows {
			rows[i].QValue = qs[i]
			rows[i].Neglected = qs[i] < opts.Alpha && rows[i].Difference < 0
		}
		cl.Rows = append(cl.Rows, rows...)
	}
	slices.SortStableFunc(cl.Rows, func(a, b Row) int {
		if a.Reference != b.Reference {
			return strings.Compare(a.Reference, b.Reference)
		}
		if a.Score != b.Score {
			if a.Score > b.Score {
				return -1
			}
			return 1
		}
		if c := strings.Compare(a.Class, b.Class); c != 0 {
			return c
		}
		return strings.Compare(a.Key, b.Key)
	})
	for _, class := range classes {
		cc := ClassCounts{Class: class, Imported: counts[class][grpImport].total, Reference: map[string]int{}}
		for _, ref := range refs {
			cc.Reference[ref.name] = counts[class][ref.grp].total
		}
		cl.Classes = append(cl.Classes, cc)
	}
	return nil
}

// compareKey builds one row.
func compareKey(class, key, ref string, imp, rf *tally, gain bool) (Row, error) {
	row := Row{Class: class, Key: key, Reference: ref,
		ImportWith: imp.with[key], ImportTotal: imp.total, ReferenceWith: rf.with[key], ReferenceTotal: rf.total}
	a, err := Wilson(row.ImportWith, row.ImportTotal, 0.95)
	if err != nil {
		return row, err
	}
	b, err := Wilson(row.ReferenceWith, row.ReferenceTotal, 0.95)
	if err != nil {
		return row, err
	}
	d, err := NewcombeDiff(row.ImportWith, row.ImportTotal, row.ReferenceWith, row.ReferenceTotal, 0.95)
	if err != nil {
		return row, err
	}
	z, err := TwoProportionZ(row.ImportWith, row.ImportTotal, row.ReferenceWith, row.ReferenceTotal)
	if err != nil {
		return row, err
	}
	row.ImportShare, row.ImportCI95 = a.Estimate, [2]float64{a.Lower, a.Upper}
	row.ReferenceShare, row.ReferenceCI95 = b.Estimate, [2]float64{b.Lower, b.Upper}
	row.Difference, row.CI95 = d.Estimate, [2]float64{d.Lower, d.Upper}
	row.PValue = z.P
	row.Affected = row.ImportTotal - row.ImportWith
	row.Score = max(0, -row.Difference) * float64(row.ImportTotal)
	if gain {
		row.GainedLater = float64(imp.gained[key]) / float64(imp.total)
		row.OrganicGainRate = float64(rf.gained[key]) / float64(rf.total)
	}
	return row, nil
}

// Neglected returns the rows flagged neglected for reference ref, in rank order.
func (cl *Checklist) Neglected(ref string) []Row {
	var out []Row
	for _, r := range cl.Rows {
		if r.Reference == ref && r.Neglected {
			out = append(out, r)
		}
	}
	return out
}

// WriteJSON writes the checklist as indented JSON.
func (cl *Checklist) WriteJSON(w io.Writer) error { return writeJSON(w, cl) }

// writeIndentedJSON writes v as JSON indented by two spaces.
// writeJSON writes v as indented JSON.
func writeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// PrimaryRef returns the reference the Markdown checklist lists: matched controls
// when there are rows for them, else the first reference with rows.
func (cl *Checklist) PrimaryRef() string {
	for _, ref := range []string{RefMatchedControls, RefWithoutProvenance, RefTreatedBefore} {
		for _, r := range cl.Rows {
			if r.Reference == ref {
				return ref
			}
		}
	}
	return ""
}

// WriteMarkdown writes the checklist a reviewer can paste: one "- [ ]" line
// per neglected key of the primary reference, every string from OSM data
// escaped for Markdown, and the cautions at the end.
func (cl *Checklist) WriteMarkdown(w io.Writer) error {
	var b strings.Builder
	ref := cl.PrimaryRef()
	fmt.Fprintf(&b, "## Neglected tags: %s\n\n", markdown.Escape(cl.Import))
	if ref == "" {
		b.WriteString("No class had enough reference features to compare.\n")
	} else {
		fmt.Fprintf(&b, "Imported features compared with %s (keys carried by at least %.0f%% and %d of the reference features; flagged when q < %g and the share is lower).\n\n",
			refWords(ref), 100*cl.MinShare, cl.MinFeatures, cl.Alpha)
		rows := cl.Neglected(ref)
		if len(rows) == 0 {
			b.WriteString("No key was flagged.\n")
		}
		other := map[[2]string]bool{}
		for _, r := range cl.Rows {
			if r.Reference != ref && r.Neglected {
				other[[2]string{r.Class, r.Key}] = true
			}
		}
		for _, r := range rows {
			fmt.Fprintf(&b, "- [ ] **%s** on %s: %.1f%% of %d imported vs %.1f%% of %d reference; difference %+.1f points (95%% CI %+.1f to %+.1f), q = %.2g; %d imported features without it",
				markdown.Escape(r.Key), markdown.Escape(r.Class), 100*r.ImportShare, r.ImportTotal, 100*r.ReferenceShare, r.ReferenceTotal,
				100*r.Difference, 100*r.CI95[0], 100*r.CI95[1], r.QValue, r.Affected)
			if other[[2]string{r.Class, r.Key}] {
				b.WriteString("; also lower than in the treated areas before the import")
			}
			b.WriteString("\n")
		}
	}
	for _, n := range cl.Notes {
		fmt.Fprintf(&b, "\nNote: %s\n", markdown.Escape(n))
	}
	b.WriteString("\n**Cautions**\n\n")
	for _, c := range cl.Cautions {
		fmt.Fprintf(&b, "- %s\n", c)
	}
	_, err := io.WriteString(w, b.String())
	return err
}

func refWords(ref string) string {
	switch ref {
	case RefMatchedControls:
		return "organically mapped features of the same class in the matched control areas"
	case RefTreatedBefore:
		return "organically mapped features of the same class in the import areas before the import"
	case RefWithoutProvenance:
		return "features of the same class without the provenance tag"
	}
	return ref
}
