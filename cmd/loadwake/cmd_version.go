package main

import (
	"fmt"
	"runtime/debug"
	"strings"

	"github.com/spf13/cobra"
)

func newVersionCommand() *cobra.Command {
	return &cobra.Command{
		Use:   "version",
		Short: "Print loadwake's version and the source revision it was built from",
		Long: `version prints the module version of the build, the VCS revision and its time
when the binary was built from a checkout ("modified" when the checkout had
uncommitted changes), and the Go version. The same line as loadwake --version.`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			_, err := fmt.Fprintln(cmd.OutOrStdout(), "loadwake", buildVersion())
			return err
		},
	}
}

// buildVersion describes the running binary from its build information.
func buildVersion() string {
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return "unknown (no build information)"
	}
	return versionOf(info)
}

// versionOf is the version line of info: module version, then the VCS
// revision (12 digits), its time and "modified" when present, then Go's version.
func versionOf(info *debug.BuildInfo) string {
	v := info.Main.Version
	if v == "" {
		v = "(devel)"
	}
	parts := []string{v}
	set := map[string]string{}
	for _, s := range info.Settings {
		set[s.Key] = s.Value
	}
	if rev := set["vcs.revision"]; rev != "" {
		parts = append(parts, "revision "+rev[:min(12, len(rev))])
		if t := set["vcs.time"]; t != "" {
			parts = append(parts, t)
		}
		if set["vcs.modified"] == "true" {
			parts = append(parts, "modified")
		}
	}
	if info.GoVersion != "" {
		parts = append(parts, info.GoVersion)
	}
	return strings.Join(parts, ", ")
}
