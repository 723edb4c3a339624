package cli

import "github.com/spf13/cobra"

// NoArgs rejects positional arguments as a usage error.
func NoArgs(cmd *cobra.Command, args []string) error {
	if len(args) > 0 {
		return Usagef("%s takes no arguments, got %q", cmd.CommandPath(), args[0])
	}
	return nil
}

// ExactArgs is cobra.ExactArgs with a usage error.
func ExactArgs(n int) cobra.PositionalArgs {
	return func(_ *cobra.Command, args []string) error {
		if len(args) != n {
			return Usagef("want %d argument(s), got %d", n, len(args))
		}
		return nil
	}
}
