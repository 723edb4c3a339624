package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/dustin/go-humanize"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/spf13/cobra"
)

// ingestOptions holds the flags of `loadwake ingest`.
type ingestOptions struct {
	noClassify bool   // skip the classification pass after the ingest
	rules      string // rule file for the classification pass
}

func newIngestCommand(g *cli.Globals) *cobra.Command {
	var o ingestOptions
	cmd := &cobra.Command{
		Use:   "ingest FILE...",
		Short: "Read OpenStreetMap history files into the store",
		Long: `ingest reads OSM files into the history store (--store, created when missing):
PBF snapshots and full histories, OSM XML histories, OsmChange diffs and
changeset metadata, plain or compressed with gzip or bzip2, in any order.
Every version is kept under its type, id and version: ingesting a file again
adds nothing, a history followed by later diffs merges into one history, and a
version stored before with different content is kept and reported as a
conflict. A file already ingested completely (same SHA-256) is skipped.

A file with malformed content is abandoned at the error, which names the file
and position; what was stored before stays consistent and a rerun after the
fix completes without duplicates. Ctrl-C stops between batches likewise.

After the files, the classification pass (loadwake classify) turns the new
versions into edit events with the built-in rules or --rules; --no-classify
leaves that for a later loadwake classify.

OpenStreetMap data is licensed under the ODbL: keep its attribution in
whatever you derive from the store.`,
		Annotations: map[string]string{cli.AnnInterrupted: "ingest stopped between batches: what was stored is kept and consistent; " +
			"rerun the same command to continue (files ingested completely are skipped, nothing is stored twice)"},
		Args: func(_ *cobra.Command, args []string) error {
			if len(args) == 0 {
				return cli.Usagef("ingest needs at least one FILE")
			}
			return nil
		},
		RunE: func(cmd *cobra.Command, args []string) error {
			return runIngest(cmd, g, &o, args)
		},
	}
	cmd.Flags().BoolVar(&o.noClassify, "no-classify", false, "do not classify the edits after ingesting (run loadwake classify later)")
	cmd.Flags().StringVar(&o.rules, "rules", "", "rule file for the classification pass (default: the built-in rules)")
	return cmd
}

func runIngest(cmd *cobra.Command, g *cli.Globals, o *ingestOptions, paths []string) error {
	r, err := cli.LoadRules(o.rules)
	if err != nil {
		return err
	}
	for _, p := range paths {
		if st, err := os.Stat(p); err != nil {
			return fmt.Errorf("input file: %w", err)
		} else if st.IsDir() {
			return fmt.Errorf("input file %s: %w", p, cli.ErrIsDir)
		}
	}
	s, err := ingest.Open(g.Store, ingest.DefaultOptions())
	if err != nil {
		return err
	}
	opts := ingest.IngestOptions{Progress: cli.NewProgress(cmd, g).Ingest()}
	errw := cmd.ErrOrStderr()
	rep, err := ingest.Ingest(cmd.Context(), s, paths, opts)
	printIngestReport(cmd.OutOrStdout(), errw, rep)
	switch {
	case err != nil && cmd.Context().Err() != nil:
		// cli.ExitCode says what an interruption leaves behind.
	case err != nil && !o.noClassify:
		fmt.Fprintln(cmd.OutOrStdout(), "not classified: fix the file the error names and rerun ingest (what was stored is kept)")
	case err == nil && !o.noClassify:
		err = classifyStore(cmd, g, s, r, false)
	}
	if cerr := s.Close(); err == nil {
		err = cerr
	}
	return err
}

// printIngestReport writes a line per file and a summary line to out and the
// conflict examples to errw.
func printIngestReport(out, errw io.Writer, rep ingest.Report) {
	for _, f := range rep.Files {
		name := filepath.Base(f.Path)
		switch {
		case f.Skipped:
			fmt.Fprintf(out, "%s: already ingested (sha256 %.12s), skipped\n", name, f.SHA256)
		case errors.Is(f.Err, context.Canceled):
			fmt.Fprintf(out, "%s: stopped by the interruption after %s new versions (kept)\n", name, humanize.Comma(f.Versions))
		case f.Err != nil:
			fmt.Fprintf(out, "%s: abandoned after %s new versions: %v\n", name, humanize.Comma(f.Versions), f.Err)
		default:
			fmt.Fprintf(out, "%s: %s, %s items: %s new versions, %s new changesets, %s duplicates, %s conflicts (%s)\n",
				name, f.Format, humanize.Comma(f.Items), humanize.Comma(f.Versions), humanize.Comma(f.Changesets),
				humanize.Comma(f.Duplicates), humanize.Comma(f.Conflicts), f.Elapsed.Round(1e6))
		}
	}
	if len(rep.Conflicts) > 0 {
		fmt.Fprintln(errw, "conflicts: these versions were stored before with different content; the stored ones were kept.")
		fmt.Fprintln(errw, "The files disagree about history: check where they come from before relying on these objects.")
		for _, c := range rep.Conflicts {
			fmt.Fprintln(errw, "  "+c.String())
		}
	}
	sum, t := rep.Sum(), rep.Totals
	fmt.Fprintf(out, "ingested %d files: %s new versions, %s conflicts; store now holds %s versions of %s objects, %s changesets\n",
		len(rep.Files), humanize.Comma(sum.Versions), humanize.Comma(sum.Conflicts), humanize.Comma(t.Versions()),
		humanize.Comma(t.Nodes+t.Ways+t.Relations), humanize.Comma(t.Changesets))
}
