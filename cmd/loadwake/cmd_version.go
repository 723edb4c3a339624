package main

import (
	"fmt"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/spf13/cobra"
)

func newVersionCommand() *cobra.Command {
	return &cobra.Command{
		Use:   "version",
		Short: "Print loadwake's version and the source revision it was built from",
		Long: `version prints the module version of the build, the VCS revision and its time
when the binary was built from a checkout ("modified" when the checkout had
uncommitted changes), and the Go version. The same line as loadwake --version.`,
		Args: cli.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			_, err := fmt.Fprintln(cmd.OutOrStdout(), "loadwake", cli.BuildVersion())
			return err
		},
	}
}
