package main

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"time"

	"github.com/paulmach/orb"
	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
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
		return nil, fmt.Errorf("%w at %s", errNoStore, g.store)
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
	unitName     string
	before       int
	after        int
	minIntensity float64
	k            int
	caliper      float64
	propensity   bool
	keepAccounts bool
}

func (s *studyFlags) addFlags(cmd *cobra.Command, g *globalOptions) {
	addImportFlags(cmd, g, &s.importID, &s.changesets, &s.account, &s.rules)
	s.addUnitFlags(cmd.Flags())
}

// addUnitFlags adds the flags of the units, the panel and the matching: all
// study flags but those naming the import.
func (s *studyFlags) addUnitFlags(f *pflag.FlagSet) {
	f.StringVar(&s.units, "units", "", "spatial units `SPEC`: tiles:Z (slippy-map tiles of zoom Z), admin:LEVEL or a GeoJSON file of polygons (required)")
	f.StringVar(&s.unitID, "unit-id", "id", "GeoJSON property `PROP` holding each unit's id")
	f.StringVar(&s.unitName, "unit-name", "name", "GeoJSON property `PROP` holding each unit's name, shown on maps and in tables")
	f.IntVar(&s.before, "before", 24, "months of the panel before the import's first month")
	f.IntVar(&s.after, "after", 24, "months of the panel after its last month")
	f.Float64Var(&s.minIntensity, "min-intensity", 0.05, "smallest share of imported features among a unit's features that makes it treated")
	f.IntVar(&s.k, "k", 3, "matched controls per treated unit (with replacement)")
	f.Float64Var(&s.caliper, "caliper", 0, "largest match distance in standard deviations of the distances (0: none)")
	f.BoolVar(&s.propensity, "propensity", false, "match on a propensity score (logistic regression) instead of Mahalanobis distance")
	f.BoolVar(&s.keepAccounts, "keep-import-accounts", false, "count later edits by the import's own accounts as follow-on activity")
}

// addImportFlags adds --import (completed with the ids of the store's
// imports), --changesets, --account and --rules.
func addImportFlags(cmd *cobra.Command, g *globalOptions, importID, changesets, account, rulesFile *string) {
	f := cmd.Flags()
	if importID != nil {
		f.StringVar(importID, "import", "", "episode `ID` from loadwake imports (may be left out when the store holds one; the shell completes it)")
		cmd.RegisterFlagCompletionFunc("import", func(cmd *cobra.Command, _ []string, _ string) ([]string, cobra.ShellCompDirective) {
			return completeImports(cmd, g, *rulesFile)
		})
	}
	f.StringVar(changesets, "changesets", "", "`FILE` listing the changeset ids of the import (spaces, commas or lines; # comments)")
	f.StringVar(account, "account", "", "account `NAME` or numeric id of the import")
	f.StringVar(rulesFile, "rules", "", "rule `FILE` (default: the built-in rules; see loadwake rules show)")
	cmd.RegisterFlagCompletionFunc("changesets", cobra.FixedCompletions(nil, cobra.ShellCompDirectiveDefault))
}

// completeImports offers the ids of the store's imports, each described by
// its accounts, months and size.
func completeImports(cmd *cobra.Command, g *globalOptions, rulesFile string) ([]string, cobra.ShellCompDirective) {
	r, err := loadRules(rulesFile)
	if err != nil {
		return nil, cobra.ShellCompDirectiveError
	}
	st, err := openStore(g)
	if err != nil {
		return nil, cobra.ShellCompDirectiveError
	}
	defer st.Close()
	eps, err := episode.Detect(cmd.Context(), st, r, episode.Options{})
	if err != nil {
		return nil, cobra.ShellCompDirectiveError
	}
	out := make([]string, 0, len(eps))
	for i := range eps {
		e := &eps[i]
		names := make([]string, 0, len(e.Accounts))
		for _, a := range e.Accounts {
			names = append(names, a.Name)
		}
		out = append(out, fmt.Sprintf("%s\t%s, %s to %s, %d changesets", e.ID, joinOr(names, "no account"), e.FirstMonth, e.LastMonth, len(e.Changesets)))
	}
	return out, cobra.ShellCompDirectiveNoFileComp
}

// checkImportChoice refuses more than one way of naming the import.
func checkImportChoice(importID, changesets, account string) error {
	var given []string
	for _, f := range []struct{ name, v string }{{"--import", importID}, {"--changesets", changesets}, {"--account", account}} {
		if f.v != "" {
			given = append(given, f.name)
		}
	}
	if len(given) > 1 {
		return usagef("%s name the import in different ways and could disagree: give only one of --import, --changesets and --account", joinOr(given, ""))
	}
	return nil
}

func (s *studyFlags) validate() error {
	if err := checkImportChoice(s.importID, s.changesets, s.account); err != nil {
		return err
	}
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

// estimatorFlags are the flags of the estimators shared by audit and report.
type estimatorFlags struct {
	draws        int
	seed         uint64
	inference    string
	windowBefore int // event window months before treatment (at most --before)
}

func addEstimatorFlags(f *pflag.FlagSet, e *estimatorFlags) {
	d := did.DefaultOptions()
	f.IntVar(&e.draws, "draws", 999, "bootstrap draws (at least 99)")
	f.Uint64Var(&e.seed, "seed", d.Seed, "seed of the bootstrap draws")
	f.StringVar(&e.inference, "inference", d.Inference, "auto (bootstrap when treated units are few), analytic or bootstrap")
	f.IntVar(&e.windowBefore, "window-before", 12, "months before each unit's import the estimators use (at most --before)")
}

// validate checks the flags; s is the study they estimate on, and f the
// command's flags, to tell given values from defaults.
func (e *estimatorFlags) validate(s *studyFlags, f *pflag.FlagSet) error {
	if f.Changed("window-before") && f.Changed("before") && e.windowBefore > s.before {
		return usagef("--window-before %d is longer than the panel's --before %d: the estimators can use only the months the panel holds", e.windowBefore, s.before)
	}
	return checkEstimator(e.draws, e.inference, e.windowBefore, 1)
}

// checkEstimator checks the estimator flags every command shares.
func checkEstimator(draws int, inference string, before, after int) error {
	switch inference {
	case did.InferenceAuto, did.InferenceAnalytic, did.InferenceBootstrap:
	default:
		return usagef("--inference %q: want auto, analytic or bootstrap", inference)
	}
	switch {
	case draws < 99:
		return usagef("--draws must be at least 99")
	case before < 1 || after < 1:
		return usagef("--window-before and --window-after must be at least 1 month")
	}
	return nil
}

// options are the estimator options for a study of s.
func (e *estimatorFlags) options(s *studyFlags) did.Options {
	eo := did.DefaultOptions()
	eo.Draws, eo.Seed, eo.Inference = e.draws, e.seed, e.inference
	eo.Window = did.Window{Pre: min(e.windowBefore, s.before), Post: s.after}
	return eo
}

// runStudyAudit audits the import of in, with a progress spinner.
func runStudyAudit(cmd *cobra.Command, g *globalOptions, in *studyInputs, s *studyFlags, e *estimatorFlags) (*audit.Report, error) {
	done := newProgress(cmd, g).step("audit " + in.episode.ID + ": study and estimates")
	defer done()
	return audit.Run(cmd.Context(), in.store, in.episode, in.all, in.units,
		audit.Options{Study: s.studyOptions(), Estimate: e.options(s), UnitSpec: s.units,
			Generator: generator(cmd.Context(), in.store, false)})
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
func (s *studyFlags) open(cmd *cobra.Command, g *globalOptions) (*studyInputs, error) {
	ctx := cmd.Context()
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
	done := newProgress(cmd, g).step("find imports")
	in.all, in.episode, err = episode.DetectAndFind(ctx, st, r, opts, s.importID)
	done()
	if err != nil {
		return fail(err)
	}
	// admin:LEVEL boundaries are taken as they were when the study window opens.
	at := time.Date(in.episode.First.Year(), in.episode.First.Month(), 1, 0, 0, 0, 0, time.UTC).AddDate(0, -s.before, 0)
	if in.units, err = storeUnits(ctx, st, s.units, s.unitID, s.unitName, orb.Bound{}, at); err != nil {
		return fail(err)
	}
	return in, nil
}

// storeUnits reads the units of spec; tiles:Z cover the store's area, grown
// by extra when extra is not zero (a proposal's bound); admin:LEVEL units are
// assembled from the store's boundary relations as they were at at (zero: the
// latest).
func storeUnits(ctx context.Context, st *ingest.Store, spec, idProp, nameProp string, extra orb.Bound, at time.Time) (*spatial.Units, error) {
	uo := spatial.Options{IDProperty: idProp, NameProperty: nameProp, Bound: extra, Store: st, At: at}
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
	return spatial.Build(ctx, spec, uo)
}
