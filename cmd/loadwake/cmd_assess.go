package main

import (
	"fmt"
	"io"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// assessOptions holds the flags of `loadwake assess`.
type assessOptions struct {
	rules    string
	units    string
	unitID   string
	unitName string
	distance float64
	nearest  int
	noAudit  bool
	draws    int
	json     string
	md       string
	out      string // write the report folder here
}

func newAssessCommand(g *cli.Globals) *cobra.Command {
	var o assessOptions
	cmd := &cobra.Command{
		Use:   "assess PROPOSAL [--units SPEC] [--distance 15] [--json FILE] [--md FILE] [--out DIR]",
		Short: "Assess a proposed import against the store and past imports",
		Long: `assess reads a proposed import (OSM XML, OsmChange or GeoJSON with tags as
properties) and reports:

  - its profile: features by class, how complete each key is, points, line
    lengths (m) and polygon areas (m²);
  - its footprint in the spatial units and the share of the features there it
    would make up (intensity), against the features alive in the store;
  - likely duplicates: existing features of the same class within --distance
    metres of a proposed point, or inside a proposed line's or polygon's
    bounds grown by that distance;
  - how many changesets it needs at the OSM API 0.6 limit of 10,000 changes;
  - the past imports in the store nearest to it in class mix and tag
    completeness, what followed them (the audit's effects, as a range per
    layer) and the keys they neglected that the proposal also lacks.

It ends with the review points of the community's import guidelines. The
figures are a first screen for local review, not a conflation or a decision.`,
		Args:        cli.ExactArgs(1),
		Annotations: map[string]string{cli.AnnInterrupted: cli.InterruptedReadOnly},
		RunE:        func(cmd *cobra.Command, args []string) error { return runAssess(cmd, g, &o, args[0]) },
	}
	f := cmd.Flags()
	f.StringVar(&o.rules, "rules", "", "rule `FILE` (default: the built-in rules; see loadwake rules show)")
	f.StringVar(&o.units, "units", "tiles:14", `spatial units: "tiles:Z" or a GeoJSON file of polygons`)
	f.StringVar(&o.unitID, "unit-id", "id", "GeoJSON property holding each unit's id")
	f.StringVar(&o.unitName, "unit-name", "name", "GeoJSON property `PROP` holding each unit's name")
	f.Float64Var(&o.distance, "distance", proposal.DefaultDuplicateDistance, "metres within which an existing feature of the same class is a likely duplicate")
	f.IntVar(&o.nearest, "nearest", proposal.DefaultNearestImports, "past imports to compare with")
	f.BoolVar(&o.noAudit, "no-audit", false, "do not audit the nearest past imports (faster; no expected effects or neglected keys)")
	f.IntVar(&o.draws, "draws", 999, "bootstrap draws of the past imports' audits")
	cli.AddFileFlag(f, &o.json, "json", "the assessment as JSON")
	cli.AddFileFlag(f, &o.md, "md", "the assessment as Markdown")
	cli.AddOutFlag(f, &o.out, "the report (Markdown and HTML to post)")
	return cmd
}

func runAssess(cmd *cobra.Command, g *cli.Globals, o *assessOptions, path string) error {
	switch {
	case o.distance <= 0:
		return cli.Usagef("--distance must be positive")
	case o.nearest < 1:
		return cli.Usagef("--nearest must be at least 1")
	case o.draws < 99:
		return cli.Usagef("--draws must be at least 99")
	}
	outs, err := cli.NewOutputs(cmd, o.json, o.md)
	if err != nil {
		return err
	}
	ctx, out := cmd.Context(), outs.Text
	r, err := cli.LoadRules(o.rules)
	if err != nil {
		return err
	}
	p, err := proposal.ReadFile(ctx, path, r, proposal.Options{})
	if err != nil {
		printPartialProfile(out, p)
		return err
	}
	st, err := cli.OpenStore(g)
	if err != nil {
		return err
	}
	defer st.Close()
	units, err := cli.StoreUnits(ctx, st, o.units, o.unitID, o.unitName, p.Bound, time.Time{})
	if err != nil {
		return err
	}
	eo := did.DefaultOptions()
	eo.Draws = o.draws
	done := cli.NewProgress(cmd, g).Step("assess " + filepath.Base(path) + " against past imports")
	a, err := audit.Assess(ctx, st, r, p, audit.AssessOptions{SkipPast: o.noAudit,
		Proposal: proposal.AssessOptions{Distance: o.distance, Units: units, Nearest: o.nearest},
		Audit:    audit.Options{Estimate: eo, UnitSpec: o.units}})
	done()
	if err != nil {
		return err
	}
	if err := a.WriteMarkdown(out); err != nil {
		return err
	}
	if err := outs.Write(o.json, a.WriteJSON); err != nil {
		return err
	}
	if err := outs.Write(o.md, a.WriteMarkdown); err != nil {
		return err
	}
	if o.out != "" {
		return cli.WriteReports(out, o.out, report.Input{Assessment: a, Provenance: audit.NewProvenance(cli.Generator(ctx, st, false))})
	}
	return nil
}

// printPartialProfile prints the profile of what was read of a proposal
// before an error, when anything was.
func printPartialProfile(w io.Writer, p *proposal.Proposal) {
	if p == nil || len(p.Features) == 0 {
		return
	}
	pr := p.Profile()
	fmt.Fprintf(w, "partial profile of the first %d features read before the error:\n", pr.Features)
	for _, c := range pr.Classes {
		fmt.Fprintf(w, "  %-28s %7d features (%d points, %d lines, %d polygons)\n", c.Class, c.Features, c.Points, c.Lines, c.Polygons)
	}
}
