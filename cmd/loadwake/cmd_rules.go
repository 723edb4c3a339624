package main

import (
	"errors"
	"fmt"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/rules"
	"github.com/spf13/cobra"
)

// rulesOptions holds the flags of `loadwake rules show`.
type rulesOptions struct {
	rules string // rule file to show instead of the built-in rules
}

func newRulesCommand(g *cli.Globals) *cobra.Command {
	var o rulesOptions
	cmd := &cobra.Command{
		Use:   "rules",
		Short: "Show or check rule files (feature classes, key families, import detection)",
		Long: `A rule file says which tags name a feature's class, which families attribute
keys fall into and which changesets count as imports. Print the built-in rules
with "rules show", edit a copy, check it with "rules check FILE" and pass it to
other commands with --rules FILE.`,
		Args: func(cmd *cobra.Command, args []string) error {
			if len(args) > 0 {
				return cli.Usagef("unknown command %q: the commands of %s are show and check", args[0], cmd.CommandPath())
			}
			return nil
		},
		RunE: func(cmd *cobra.Command, _ []string) error { return cmd.Help() },
	}
	show := &cobra.Command{
		Use:   "show",
		Short: "Print the built-in rules, or the effective rules of --rules FILE",
		Args:  cli.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runRulesShow(cmd, &o)
		},
	}
	show.Flags().StringVar(&o.rules, "rules", "", "rule `FILE` to print as loadwake reads it (defaults filled in, comments dropped)")
	check := &cobra.Command{
		Use:   "check FILE",
		Short: "Check a rule file and print every problem as file:line:col: message",
		Args: func(_ *cobra.Command, args []string) error {
			if len(args) != 1 {
				return cli.Usagef("rules check takes one rule file, got %d arguments", len(args))
			}
			return nil
		},
		RunE: func(cmd *cobra.Command, args []string) error {
			return runRulesCheck(cmd, args[0])
		},
	}
	cmd.AddCommand(show, check)
	return cmd
}

func runRulesShow(cmd *cobra.Command, o *rulesOptions) error {
	out := cmd.OutOrStdout()
	if o.rules == "" {
		fmt.Fprintf(out, "# built-in rules, sha256 %s\n", rules.Default().Hash())
		_, err := out.Write(rules.DefaultYAML())
		return err
	}
	r, err := rules.Load(o.rules)
	if err != nil {
		return err
	}
	fmt.Fprintf(out, "# effective rules of %s, sha256 %s\n", o.rules, r.Hash())
	_, err = out.Write(r.Canonical())
	return err
}

func runRulesCheck(cmd *cobra.Command, file string) error {
	r, err := rules.Load(file)
	var ps *rules.Problems
	switch {
	case errors.As(err, &ps):
		for _, p := range *ps {
			fmt.Fprintln(cmd.OutOrStdout(), p.Error())
		}
		return fmt.Errorf("%s: %d problem(s), listed above (%w)", file, len(*ps), rules.ErrInvalid)
	case err != nil:
		return err
	}
	fmt.Fprintf(cmd.OutOrStdout(), "%s: ok, sha256 %s\n", file, r.Hash())
	return nil
}
