package main

import (
	"fmt"
	"io"
	"os"
	"time"

	"github.com/paulmach/orb"
	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// importsOptions holds the flags of `loadwake imports`.
type importsOptions struct {
	rules        string // rule file; "" means the built-in rules
	json         string // file for the JSON array of episodes
	changesets   string // file listing the changesets of a named import
	account      string // account of a named import
	includeEmpty bool   // keep matched changesets with no stored versions

	// --audit: every episode audited over the study's units.
	audit bool
	study cli.StudyFlags // the unit, panel and matching flags (not the import's)
	est   cli.EstimatorFlags
	out   string // folder of overview.{md,html,csv,json}
	md    string // the overview's Markdown
	csv   string // the overview's CSV
}

func newImportsCommand(g *cli.Globals) *cobra.Command {
	var o importsOptions
	cmd := &cobra.Command{
		Use:   "imports",
		Short: "List past import episodes found in the stored history",
		Long: `imports matches every stored changeset against the import rules (import=yes
and similar changeset tags, dedicated import accounts, large creation-only
changesets; see loadwake rules show) and groups the matches by account and
changeset source tag into episodes. Name an import yourself with --changesets
FILE (ids separated by spaces, commas or lines; # starts a comment) or
--account NAME (a name, or a numeric account id): the result is then that one
episode, whatever the rules say.

--json FILE writes an array of episodes (with --json - the JSON goes to stdout
and the table to stderr) with the fields:
  id           "imp-" or "manual-" and the smallest changeset id; stable across runs
  matchers     names of the rules' matchers that matched ("manual" when named)
  accounts     [{uid, name}] of the changesets
  source       the changesets' source tag (rule-based episodes), omitted when empty
  changesets   changeset ids, ascending
  created, modified, deleted
               versions in the store that created (version 1), deleted
               (visible=false) or otherwise modified objects
  classes      [{class, count}] of those versions by feature class
  first, last  opening of the first and closing of the last changeset (RFC 3339, UTC)
  first_month, last_month
               the same as YYYY-MM
  bbox         [min_lon, min_lat, max_lon, max_lat], omitted when unknown

With --audit --units SPEC every episode is audited as loadwake audit does it
(with the checklist of the same study) and one summary table is written: per
import its area, size, the headline effect per layer with its 95% interval,
the top neglected keys and the number of warnings. --out DIR writes it as
overview.html (its table sorts by any column, without scripts), overview.md,
overview.csv and overview.json; --md FILE, --csv FILE and --json FILE write one
of them ("-" for stdout). The study flags (--units, --before, --k, ...) are
those of loadwake audit and apply to every import alike.

Episodes are candidates to check against the import's documentation and its
community discussion, not findings about the people behind an account.`,
		Example: `  loadwake imports --json imports.json
  loadwake imports --audit --units tiles:12 --out review-all
  loadwake imports --audit --units districts.geojson --unit-name label --md -`,
		Args: cli.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runImports(cmd, g, &o)
		},
	}
	f := cmd.Flags()
	cli.AddImportFlags(cmd, g, nil, &o.changesets, &o.account, &o.rules)
	cli.AddFileFlag(f, &o.json, "json", "the episodes as a JSON array")
	f.BoolVar(&o.includeEmpty, "include-empty", false, "keep matched changesets the store holds no versions of")
	f.BoolVar(&o.audit, "audit", false, "audit every episode over --units and write one summary table")
	o.study.AddUnitFlags(f)
	cli.AddEstimatorFlags(f, &o.est)
	cli.AddOutFlag(f, &o.out, "the overview of all imports (overview.html, .md, .csv, .json) with --audit")
	cli.AddFileFlag(f, &o.md, "md", "the overview's Markdown table (with --audit)")
	cli.AddFileFlag(f, &o.csv, "csv", "the overview's CSV table (with --audit)")
	return cmd
}

func runImports(cmd *cobra.Command, g *cli.Globals, o *importsOptions) error {
	if err := cli.CheckImportChoice("", o.changesets, o.account); err != nil {
		return err
	}
	if err := o.checkAudit(cmd); err != nil {
		return err
	}
	outs, err := cli.NewOutputs(cmd, o.json, o.md, o.csv)
	if err != nil {
		return err
	}
	r, err := cli.LoadRules(o.rules)
	if err != nil {
		return err
	}
	opts := episode.Options{Account: o.account, IncludeEmpty: o.includeEmpty}
	if o.changesets != "" {
		f, err := os.Open(o.changesets)
		if err != nil {
			return fmt.Errorf("changeset list: %w", err)
		}
		opts.Changesets, err = episode.ReadChangesetIDs(f, o.changesets)
		f.Close()
		if err != nil {
			return err
		}
	}
	st, err := cli.OpenStore(g)
	if err != nil {
		return err
	}
	defer st.Close()
	done := cli.NewProgress(cmd, g).Step("find imports")
	eps, err := episode.Detect(cmd.Context(), st, r, opts)
	done()
	if err != nil {
		return err
	}
	if err := episode.Write(outs.Text, eps); err != nil {
		return err
	}
	if o.audit {
		return auditImports(cmd, g, o, outs, st, r, eps)
	}
	return outs.Write(o.json, func(w io.Writer) error { return episode.WriteJSON(w, eps) })
}

// checkAudit refuses flags of --audit without it, and --audit without units
// or anywhere to write.
func (o *importsOptions) checkAudit(cmd *cobra.Command) error {
	f := cmd.Flags()
	if !o.audit {
		for _, name := range []string{"units", "unit-id", "unit-name", "out", "md", "csv", "before", "after", "k", "caliper", "propensity",
			"min-intensity", "keep-import-accounts", "window-before", "draws", "seed", "inference"} {
			if f.Changed(name) {
				return cli.Usagef("--%s applies to the audit of every import: add --audit", name)
			}
		}
		return nil
	}
	if err := o.study.ValidateUnits(); err != nil {
		return err
	}
	if o.out == "" && o.md == "" && o.csv == "" && o.json == "" {
		return cli.Usagef("--audit needs somewhere to write the overview: --out DIR, or --md, --csv or --json FILE (- for stdout)")
	}
	return o.est.Validate(&o.study, f)
}

// auditImports audits every episode of eps over the units of --units and
// writes the overview.
func auditImports(cmd *cobra.Command, g *cli.Globals, o *importsOptions, outs *cli.Outputs, st *ingest.Store, r *rules.RuleSet, eps []episode.Episode) error {
	ctx := cmd.Context()
	if len(eps) == 0 {
		return fmt.Errorf("%w: no import episodes to audit", episode.ErrNoImport)
	}
	units, err := cli.StoreUnits(ctx, st, o.study.Units, o.study.UnitID, o.study.UnitName, orb.Bound{}, time.Time{})
	if err != nil {
		return err
	}
	bar := cli.NewProgress(cmd, g).Bar("audit imports", int64(len(eps)))
	opts := audit.OverviewOptions{
		Audit: audit.Options{Study: o.study.StudyOptions(), Estimate: o.est.Options(&o.study), UnitSpec: o.study.Units,
			Generator: cli.Generator(ctx, st, false)},
		Progress: func(i, _ int, id string) { bar.Describe("audit " + id); bar.Set(i) },
	}
	ov, err := audit.AuditAll(ctx, st, r, eps, units, opts)
	bar.Finish()
	bar.Exit()
	if err != nil {
		return err
	}
	fmt.Fprintln(outs.Text)
	if err := report.WriteOverviewText(outs.Text, ov); err != nil {
		return err
	}
	for _, w := range []struct {
		path string
		fill func(io.Writer) error
	}{
		{o.json, ov.WriteJSON},
		{o.md, func(w io.Writer) error { return report.WriteOverviewMarkdown(w, ov) }},
		{o.csv, func(w io.Writer) error { return report.WriteOverviewCSV(w, ov) }},
	} {
		if err := outs.Write(w.path, w.fill); err != nil {
			return err
		}
	}
	if o.out == "" {
		return nil
	}
	if err := report.WriteOverview(o.out, ov); err != nil {
		return err
	}
	fmt.Fprintf(outs.Text, "wrote the overview to %s (%s; open overview.html in a browser)\n", o.out, cli.JoinOr(report.OverviewFiles(), ""))
	return nil
}
