package main

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"

	"github.com/paulmach/orb"
	"github.com/spf13/pflag"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// openStore opens the store of --store, with a plain message when there is none.
func openStore(g *globalOptions) (*ingest.Store, error) {
	if _, err := os.Stat(g.store); errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("no store at %s: run loadwake ingest first, or pass --store", g.store)
	}
	return ingest.Open(g.store, ingest.DefaultOptions())
}

// loadRules returns the rules of path, or the built-in ones when path is "".
func loadRules(path string) (*rules.RuleSet, error) {
	if path == "" {
		return rules.Default(), nil
	}
	return rules.Load(path)
}

// studyFlags are the flags shared by the commands that study one import over
// spatial units: panel, audit, checklist and report.
type studyFlags struct {
	importID     string
	changesets   string
	account      string
	rules        string
	units        string
	unitID       string
	before       int
	after        int
	minIntensity float64
	k            int
	caliper      float64
	propensity   bool
	keepAccounts bool
}

func (s *studyFlags) addFlags(f *pflag.FlagSet) {
	f.StringVar(&s.importID, "import", "", "episode id from loadwake imports (may be left out when the store holds one)")
	f.StringVar(&s.changesets, "changesets", "", "file listing the changeset ids of the import, instead of --import")
	f.StringVar(&s.account, "account", "", "account name or numeric id of the import, instead of --import")
	f.StringVar(&s.rules, "rules", "", "rule file (default: the built-in rules)")
	f.StringVar(&s.units, "units", "", `spatial units: "tiles:Z" (slippy-map tiles of zoom Z) or a GeoJSON file of polygons (required)`)
	f.StringVar(&s.unitID, "unit-id", "id", "GeoJSON property holding each unit's id")
	f.IntVar(&s.before, "before", 24, "months before the import's first month")
	f.IntVar(&s.after, "after", 24, "months after its last month")
	f.Float64Var(&s.minIntensity, "min-intensity", 0.05, "smallest share of imported features among a unit's features that makes it treated")
	f.IntVar(&s.k, "k", 3, "matched controls per treated unit (with replacement)")
	f.Float64Var(&s.caliper, "caliper", 0, "largest match distance in standard deviations of the distances (0: none)")
	f.BoolVar(&s.propensity, "propensity", false, "match on a propensity score (logistic regression) instead of Mahalanobis distance")
	f.BoolVar(&s.keepAccounts, "keep-import-accounts", false, "count later edits by the import's own accounts as follow-on activity")
}

func (s *studyFlags) validate() error {
	switch {
	case s.units == "":
		return usagef("--units is required: tiles:Z or a GeoJSON file of polygons")
	case s.before < 1 || s.after < 1:
		return usagef("--before and --after must be at least 1 month")
	case s.k < 1:
		return usagef("--k must be at least 1")
	case s.minIntensity < 0 || s.minIntensity > 1:
		return usagef("--min-intensity must lie between 0 and 1")
	case s.caliper < 0:
		return usagef("--caliper must not be negative")
	}
	return nil
}

func (s *studyFlags) studyOptions() study.Options {
	return study.Options{Before: s.before, After: s.after, MinIntensity: s.minIntensity,
		KeepImportAccounts: s.keepAccounts, Propensity: s.propensity,
		Match: match.Options{K: s.k, Caliper: s.caliper}}
}

// studyInputs is what the study commands work from.
type studyInputs struct {
	store   *ingest.Store
	rules   *rules.RuleSet
	all     []episode.Episode
	episode *episode.Episode
	units   *spatial.Units
}

// open opens the store, loads the rules, finds the import and reads the
// units. The caller closes in.store.
func (s *studyFlags) open(ctx context.Context, g *globalOptions) (*studyInputs, error) {
	if err := s.validate(); err != nil {
		return nil, err
	}
	r, err := loadRules(s.rules)
	if err != nil {
		return nil, err
	}
	opts := episode.Options{Account: s.account}
	if s.changesets != "" {
		f, err := os.Open(s.changesets)
		if err != nil {
			return nil, fmt.Errorf("changeset list: %w", err)
		}
		opts.Changesets, err = episode.ReadChangesetIDs(f, s.changesets)
		f.Close()
		if err != nil {
			return nil, err
		}
	}
	st, err := openStore(g)
	if err != nil {
		return nil, err
	}
	in := &studyInputs{store: st, rules: r}
	fail := func(err error) (*studyInputs, error) {
		st.Close()
		return nil, err
	}
	in.all, in.episode, err = episode.DetectAndFind(ctx, st, r, opts, s.importID)
	if err != nil {
		return fail(err)
	}
	if in.units, err = storeUnits(ctx, st, s.units, s.unitID, orb.Bound{}); err != nil {
		return fail(err)
	}
	return in, nil
}

// storeUnits reads the units of spec; tiles:Z cover the store's area, grown
// by extra when extra is not zero (a proposal's bound).
func storeUnits(ctx context.Context, st *ingest.Store, spec, idProp string, extra orb.Bound) (*spatial.Units, error) {
	uo := spatial.Options{IDProperty: idProp, Bound: extra}
	stats, err := st.Stats(ctx)
	if err != nil {
		return nil, err
	}
	switch {
	case stats.HasBBox && extra.IsZero():
		uo.Bound = stats.BBox
	case stats.HasBBox:
		uo.Bound = uo.Bound.Union(stats.BBox)
	}
	return spatial.Parse(spec, uo)
}
