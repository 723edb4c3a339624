package main

import (
	"fmt"
	"io"
	"strings"

	"github.com/paulmach/osm"
	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// checklistOptions holds the flags of `loadwake checklist`.
type checklistOptions struct {
	study       cli.StudyFlags
	provenance  string // snapshot mode: the tag that marks the import's features
	types       string // snapshot mode: object types, e.g. "w" or "n,w"
	minShare    float64
	minFeatures int
	json        string
	md          string
	out         string // write the report folder here
}

func newChecklistCommand(g *cli.Globals) *cobra.Command {
	var o checklistOptions
	cmd := &cobra.Command{
		Use:   "checklist (--units SPEC [--import ID] | --provenance TAG) [--json FILE] [--md FILE] [--out DIR]",
		Short: "List attribute keys an import's features carry less often than comparable features",
		Long: `checklist compares, for each feature class an import created, how many of the
imported features carry each attribute key at the end of the study window with
how many organically mapped features of the same class carry it:

  matched-controls  features in the matched control units of the study
  treated-before    features in the import's units mapped before the import

Keys are considered when at least --min-share (10%) and --min-features (5) of
the reference features carry them; provenance keys (source, tiger:*, ...) and
the class key are skipped. Each row has Wilson 95% intervals for both shares,
Newcombe's interval for their difference, a two-proportion test with
Benjamini-Hochberg q-values across keys, and the shares of features that
gained the key later. A key is flagged when q < 0.05 and the imported share is
lower. Rows are ranked by the deficit times the number of imported features.

On a store made from a snapshot (no history), --provenance selects the
import's features by a tag instead: a key prefix (tiger:*), a key, key=value
or key~regex; they are compared with features of the same class without it.

The Markdown (--md) is a checklist to paste into a review, closing with the
cautions: the figures are evidence for local review; follow the community's
import guidelines before any follow-up edit.`,
		Args:        cli.NoArgs,
		Annotations: map[string]string{cli.AnnInterrupted: cli.InterruptedReadOnly},
		RunE:        func(cmd *cobra.Command, _ []string) error { return runChecklist(cmd, g, &o) },
	}
	o.study.AddFlags(cmd, g)
	f := cmd.Flags()
	f.StringVar(&o.provenance, "provenance", "", "snapshot mode: tag marking the import's features (prefix:*, key, key=value or key~regex)")
	f.StringVar(&o.types, "types", "", "snapshot mode: object types to count, any of n,w,r (default all)")
	f.Float64Var(&o.minShare, "min-share", checklist.DefaultMinShare, "least share of reference features carrying a key for it to be considered")
	f.IntVar(&o.minFeatures, "min-features", checklist.DefaultMinFeatures, "least number of reference features carrying a key (and of reference features per class)")
	cli.AddFileFlag(f, &o.json, "json", "the checklist as JSON")
	cli.AddFileFlag(f, &o.md, "md", "the checklist as Markdown")
	cli.AddOutFlag(f, &o.out, "the report (Markdown and HTML to post)")
	return cmd
}

func runChecklist(cmd *cobra.Command, g *cli.Globals, o *checklistOptions) error {
	if o.minShare < 0 || o.minShare > 1 {
		return cli.Usagef("--min-share must lie between 0 and 1")
	}
	if o.minFeatures < 1 {
		return cli.Usagef("--min-features must be at least 1")
	}
	outs, err := cli.NewOutputs(cmd, o.json, o.md)
	if err != nil {
		return err
	}
	co := checklist.Options{MinShare: o.minShare, MinFeatures: o.minFeatures}
	var cl *checklist.Checklist
	if o.provenance != "" {
		cl, err = snapshotChecklist(cmd, g, o, co)
	} else {
		cl, err = studyChecklist(cmd, g, o, co)
	}
	if err != nil {
		return err
	}
	writeChecklistText(outs.Text, cl)
	if err := outs.Write(o.json, cl.WriteJSON); err != nil {
		return err
	}
	if err := outs.Write(o.md, cl.WriteMarkdown); err != nil {
		return err
	}
	if o.out != "" {
		return cli.WriteReports(outs.Text, o.out, report.Input{Checklist: cl, Provenance: audit.NewProvenance(cli.Generator(cmd.Context(), nil, false))})
	}
	return nil
}

// snapshotChecklist is the checklist of features marked by --provenance, on
// a store from a current extract.
func snapshotChecklist(cmd *cobra.Command, g *cli.Globals, o *checklistOptions, co checklist.Options) (*checklist.Checklist, error) {
	if o.study.ImportID != "" || o.study.Changesets != "" || o.study.Account != "" {
		return nil, cli.Usagef("--provenance selects the import's features by a tag; leave out --import, --changesets and --account")
	}
	if o.study.Units != "" {
		return nil, cli.Usagef("--provenance compares features across the whole store, without units; leave out --units")
	}
	prov, err := checklist.ParseProvenance(o.provenance)
	if err != nil {
		return nil, cli.Usagef("--provenance: %v", err)
	}
	if co.Types, err = parseTypes(o.types); err != nil {
		return nil, err
	}
	r, err := cli.LoadRules(o.study.Rules)
	if err != nil {
		return nil, err
	}
	st, err := cli.OpenStore(g)
	if err != nil {
		return nil, err
	}
	defer st.Close()
	defer cli.NewProgress(cmd, g).Step("checklist of " + o.provenance)()
	return checklist.Snapshot(cmd.Context(), st, r, prov, co)
}

// studyChecklist is the checklist of one import's study over the units.
func studyChecklist(cmd *cobra.Command, g *cli.Globals, o *checklistOptions, co checklist.Options) (*checklist.Checklist, error) {
	if o.types != "" {
		return nil, cli.Usagef("--types applies to --provenance (snapshot mode) only")
	}
	in, err := o.study.Open(cmd, g)
	if err != nil {
		return nil, err
	}
	defer in.Store.Close()
	defer cli.NewProgress(cmd, g).Step("checklist " + in.Episode.ID)()
	return audit.ChecklistOf(cmd.Context(), in.Store, in.Rules, in.Episode, in.All, in.Units, o.study.StudyOptions(), co)
}

// parseTypes reads --types: a comma-separated list of n, w and r.
func parseTypes(s string) ([]osm.Type, error) {
	if s == "" {
		return nil, nil
	}
	var out []osm.Type
	for _, p := range strings.Split(s, ",") {
		switch strings.TrimSpace(p) {
		case "n", "node":
			out = append(out, osm.TypeNode)
		case "w", "way":
			out = append(out, osm.TypeWay)
		case "r", "relation":
			out = append(out, osm.TypeRelation)
		default:
			return nil, cli.Usagef("--types: %q is not n, w or r", p)
		}
	}
	return out, nil
}

// writeChecklistText prints the flagged keys and the cautions.
func writeChecklistText(w io.Writer, cl *checklist.Checklist) {
	fmt.Fprintf(w, "checklist of %s (%s mode)\n", cl.Import, cl.Mode)
	for _, c := range cl.Classes {
		fmt.Fprintf(w, "  %-28s %7d imported", c.Class, c.Imported)
		for _, ref := range []string{checklist.RefMatchedControls, checklist.RefTreatedBefore, checklist.RefWithoutProvenance} {
			if n, ok := c.Reference[ref]; ok {
				fmt.Fprintf(w, "  %7d %s", n, ref)
			}
		}
		fmt.Fprintln(w)
	}
	flagged := 0
	for _, r := range cl.Rows {
		if !r.Neglected {
			continue
		}
		if flagged == 0 {
			fmt.Fprintf(w, "\n  %-24s %-22s %-18s %9s %9s %8s %-17s %8s\n", "class", "key", "reference", "import", "ref", "diff", "95% CI", "q")
		}
		flagged++
		fmt.Fprintf(w, "  %-24s %-22s %-18s %8.1f%% %8.1f%% %+7.1f  [%+6.1f, %+6.1f] %8.2g\n", r.Class, r.Key, r.Reference,
			100*r.ImportShare, 100*r.ReferenceShare, 100*r.Difference, 100*r.CI95[0], 100*r.CI95[1], r.QValue)
	}
	if flagged == 0 {
		fmt.Fprintln(w, "\nno key flagged")
	}
	for _, n := range cl.Notes {
		fmt.Fprintln(w, "note:", n)
	}
	fmt.Fprintln(w)
	for _, c := range cl.Cautions {
		fmt.Fprintln(w, "caution:", c)
	}
}
