package main

import (
	"fmt"
	"io"
	"os"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/spf13/cobra"
)

// importsOptions holds the flags of `loadwake imports`.
type importsOptions struct {
	rules        string // rule file; "" means the built-in rules
	json         string // file for the JSON array of episodes
	changesets   string // file listing the changesets of a named import
	account      string // account of a named import
	includeEmpty bool   // keep matched changesets with no stored versions
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

Episodes are candidates to check against the import's documentation and its
community discussion, not findings about the people behind an account.`,
		Args: cli.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runImports(cmd, g, &o)
		},
	}
	f := cmd.Flags()
	cli.AddImportFlags(cmd, g, nil, &o.changesets, &o.account, &o.rules)
	cli.AddFileFlag(f, &o.json, "json", "the episodes as a JSON array")
	f.BoolVar(&o.includeEmpty, "include-empty", false, "keep matched changesets the store holds no versions of")
	return cmd
}

func runImports(cmd *cobra.Command, g *cli.Globals, o *importsOptions) error {
	if err := cli.CheckImportChoice("", o.changesets, o.account); err != nil {
		return err
	}
	outs, err := cli.NewOutputs(cmd, o.json)
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
	done := cli.NewProgress(cmd, g).Step("find imports")
	eps, err := episode.Detect(cmd.Context(), st, r, opts)
	done()
	if cerr := st.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	if err := episode.Write(outs.Text, eps); err != nil {
		return err
	}
	return outs.Write(o.json, func(w io.Writer) error { return episode.WriteJSON(w, eps) })
}
