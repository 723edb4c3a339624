package cli

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

// OpenStore opens the store of --store, with a plain message when there is none.
func OpenStore(g *Globals) (*ingest.Store, error) {
	if _, err := os.Stat(g.Store); errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("%w at %s", ErrNoStore, g.Store)
	}
	return ingest.Open(g.Store, ingest.DefaultOptions())
}

// LoadRules returns the rules of path, or the built-in ones when path is "".
func LoadRules(path string) (*rules.RuleSet, error) {
	if path == "" {
		return rules.Default(), nil
	}
	return rules.Load(path)
}

// StudyFlags are the flags shared by the commands that study one import over
// spatial units: panel, audit, checklist and report.
type StudyFlags struct {
	ImportID     string
	Changesets   string
	Account      string
	Rules        string
	Units        string
	UnitID       string
	UnitName     string
	Before       int
	After        int
	MinIntensity float64
	K            int
	Caliper      float64
	Propensity   bool
	KeepAccounts bool
	Treatment    string // --treatment FILE: treated units and months instead of an import
	EventName    string // --event-name
}

// AddFlags adds the study flags to cmd.
func (s *StudyFlags) AddFlags(cmd *cobra.Command, g *Globals) {
	AddImportFlags(cmd, g, &s.ImportID, &s.Changesets, &s.Account, &s.Rules)
	s.AddUnitFlags(cmd.Flags())
}

// AddUnitFlags adds the flags of the units, the panel and the matching: all
// study flags but those naming the import.
func (s *StudyFlags) AddUnitFlags(f *pflag.FlagSet) {
	f.StringVar(&s.Units, "units", "", "spatial units `SPEC`: tiles:Z (slippy-map tiles of zoom Z), admin:LEVEL or a GeoJSON file of polygons (required)")
	f.StringVar(&s.UnitID, "unit-id", "id", "GeoJSON property `PROP` holding each unit's id")
	f.StringVar(&s.UnitName, "unit-name", "name", "GeoJSON property `PROP` holding each unit's name, shown on maps and in tables")
	f.IntVar(&s.Before, "before", 24, "months of the panel before the import's first month")
	f.IntVar(&s.After, "after", 24, "months of the panel after its last month")
	f.Float64Var(&s.MinIntensity, "min-intensity", 0.05, "smallest share of imported features among a unit's features that makes it treated")
	f.IntVar(&s.K, "k", 3, "matched controls per treated unit (with replacement)")
	f.Float64Var(&s.Caliper, "caliper", 0, "largest match distance in standard deviations of the distances (0: none)")
	f.BoolVar(&s.Propensity, "propensity", false, "match on a propensity score (logistic regression) instead of Mahalanobis distance")
	f.BoolVar(&s.KeepAccounts, "keep-import-accounts", false, "count later edits by the import's own accounts as follow-on activity")
}

// AddImportFlags adds --import (completed with the ids of the store's
// imports), --changesets, --account and --rules.
func AddImportFlags(cmd *cobra.Command, g *Globals, importID, changesets, account, rulesFile *string) {
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
func completeImports(cmd *cobra.Command, g *Globals, rulesFile string) ([]string, cobra.ShellCompDirective) {
	r, err := LoadRules(rulesFile)
	if err != nil {
		return nil, cobra.ShellCompDirectiveError
	}
	st, err := OpenStore(g)
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
		out = append(out, fmt.Sprintf("%s\t%s, %s to %s, %d changesets", e.ID, JoinOr(names, "no account"), e.FirstMonth, e.LastMonth, len(e.Changesets)))
	}
	return out, cobra.ShellCompDirectiveNoFileComp
}

// CheckImportChoice refuses more than one way of naming the import.
func CheckImportChoice(importID, changesets, account string) error {
	var given []string
	for _, f := range []struct{ name, v string }{{"--import", importID}, {"--changesets", changesets}, {"--account", account}} {
		if f.v != "" {
			given = append(given, f.name)
		}
	}
	if len(given) > 1 {
		return Usagef("%s name the import in different ways and could disagree: give only one of --import, --changesets and --account", JoinOr(given, ""))
	}
	return nil
}

func (s *StudyFlags) validate() error {
	if err := CheckImportChoice(s.ImportID, s.Changesets, s.Account); err != nil {
		return err
	}
	if err := s.checkTreatment(); err != nil {
		return err
	}
	return s.ValidateUnits()
}

// ValidateUnits checks the flags AddUnitFlags adds.
func (s *StudyFlags) ValidateUnits() error {
	switch {
	case s.Units == "":
		return Usagef("--units is required: tiles:Z or a GeoJSON file of polygons")
	case s.Before < 1 || s.After < 1:
		return Usagef("--before and --after must be at least 1 month")
	case s.K < 1:
		return Usagef("--k must be at least 1")
	case s.MinIntensity < 0 || s.MinIntensity > 1:
		return Usagef("--min-intensity must lie between 0 and 1")
	case s.Caliper < 0:
		return Usagef("--caliper must not be negative")
	}
	return nil
}

// EstimatorFlags are the flags of the estimators shared by audit and report.
type EstimatorFlags struct {
	Draws        int
	Seed         uint64
	Inference    string
	WindowBefore int // event window months before treatment (at most --before)
}

func AddEstimatorFlags(f *pflag.FlagSet, e *EstimatorFlags) {
	d := did.DefaultOptions()
	f.IntVar(&e.Draws, "draws", 999, "bootstrap draws (at least 99)")
	f.Uint64Var(&e.Seed, "seed", d.Seed, "seed of the bootstrap draws")
	f.StringVar(&e.Inference, "inference", d.Inference, "auto (bootstrap when treated units are few), analytic or bootstrap")
	f.IntVar(&e.WindowBefore, "window-before", 12, "months before each unit's import the estimators use (at most --before)")
}

// Validate checks the flags; s is the study they estimate on, and f the
// command's flags, to tell given values from defaults.
func (e *EstimatorFlags) Validate(s *StudyFlags, f *pflag.FlagSet) error {
	if f.Changed("window-before") && f.Changed("before") && e.WindowBefore > s.Before {
		return Usagef("--window-before %d is longer than the panel's --before %d: the estimators can use only the months the panel holds", e.WindowBefore, s.Before)
	}
	return CheckEstimator(e.Draws, e.Inference, e.WindowBefore, 1)
}

// CheckEstimator checks the estimator flags every command shares.
func CheckEstimator(draws int, inference string, before, after int) error {
	switch inference {
	case did.InferenceAuto, did.InferenceAnalytic, did.InferenceBootstrap:
	default:
		return Usagef("--inference %q: want auto, analytic or bootstrap", inference)
	}
	switch {
	case draws < 99:
		return Usagef("--draws must be at least 99")
	case before < 1 || after < 1:
		return Usagef("--window-before and --window-after must be at least 1 month")
	}
	return nil
}

// Options are the estimator options for a study of s.
func (e *EstimatorFlags) Options(s *StudyFlags) did.Options {
	eo := did.DefaultOptions()
	eo.Draws, eo.Seed, eo.Inference = e.Draws, e.Seed, e.Inference
	eo.Window = did.Window{Pre: min(e.WindowBefore, s.Before), Post: s.After}
	return eo
}

// RunStudyAudit audits the import (or the --treatment event) of in, with a
// progress spinner.
func RunStudyAudit(cmd *cobra.Command, g *Globals, in *StudyInputs, s *StudyFlags, e *EstimatorFlags) (*audit.Report, error) {
	done := NewProgress(cmd, g).Step("audit " + in.Label() + ": study and estimates")
	defer done()
	opts := audit.Options{Study: s.StudyOptions(), Estimate: e.Options(s), UnitSpec: s.Units,
		Generator: Generator(cmd.Context(), in.Store, false)}
	if in.Assignment != nil {
		return audit.RunTreatment(cmd.Context(), in.Store, in.Assignment, in.All, in.Units, opts)
	}
	return audit.Run(cmd.Context(), in.Store, in.Episode, in.All, in.Units, opts)
}

// StudyOptions are the study.Options of the flags.
func (s *StudyFlags) StudyOptions() study.Options {
	return study.Options{Before: s.Before, After: s.After, MinIntensity: s.MinIntensity,
		KeepImportAccounts: s.KeepAccounts, Propensity: s.Propensity,
		Match: match.Options{K: s.K, Caliper: s.Caliper}}
}

// StudyInputs is what the study commands work from.
type StudyInputs struct {
	Store   *ingest.Store
	Rules   *rules.RuleSet
	All     []episode.Episode
	Episode *episode.Episode // nil with --treatment
	Units   *spatial.Units
	// Assignment is the treatment of --treatment; nil for an import's study.
	Assignment *study.Assignment
}

// Open opens the store, loads the rules, finds the import and reads the
// units. The caller closes in.Store.
func (s *StudyFlags) Open(cmd *cobra.Command, g *Globals) (*StudyInputs, error) {
	ctx := cmd.Context()
	if err := s.validate(); err != nil {
		return nil, err
	}
	r, err := LoadRules(s.Rules)
	if err != nil {
		return nil, err
	}
	opts := episode.Options{Account: s.Account}
	if s.Changesets != "" {
		f, err := os.Open(s.Changesets)
		if err != nil {
			return nil, fmt.Errorf("changeset list: %w", err)
		}
		opts.Changesets, err = episode.ReadChangesetIDs(f, s.Changesets)
		f.Close()
		if err != nil {
			return nil, err
		}
	}
	st, err := OpenStore(g)
	if err != nil {
		return nil, err
	}
	in := &StudyInputs{Store: st, Rules: r}
	fail := func(err error) (*StudyInputs, error) {
		st.Close()
		return nil, err
	}
	var first time.Time
	if s.Treatment != "" {
		if err := s.openTreatment(cmd, g, in); err != nil {
			return fail(err)
		}
		first, _ = in.Assignment.Span()
	} else {
		done := NewProgress(cmd, g).Step("find imports")
		in.All, in.Episode, err = episode.DetectAndFind(ctx, st, r, opts, s.ImportID)
		done()
		if err != nil {
			return fail(err)
		}
		first = in.Episode.First
	}
	// admin:LEVEL boundaries are taken as they were when the study window opens.
	at := time.Date(first.Year(), first.Month(), 1, 0, 0, 0, 0, time.UTC).AddDate(0, -s.Before, 0)
	if in.Units, err = StoreUnits(ctx, st, s.Units, s.UnitID, s.UnitName, orb.Bound{}, at); err != nil {
		return fail(err)
	}
	return in, nil
}

// StoreUnits reads the units of spec; tiles:Z cover the store's area, grown
// by extra when extra is not zero (a proposal's bound); admin:LEVEL units are
// assembled from the store's boundary relations as they were at at (zero: the
// latest).
func StoreUnits(ctx context.Context, st *ingest.Store, spec, idProp, nameProp string, extra orb.Bound, at time.Time) (*spatial.Units, error) {
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
