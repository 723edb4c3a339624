package cli

import (
	"runtime/debug"
	"strings"
)

// BuildVersion describes the running binary from its build information.
func BuildVersion() string {
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return "unknown (no build information)"
	}
	return VersionOf(info)
}

// VersionOf is the version line of info: module version, then the VCS
// revision (12 digits), its time and "modified" when present, then Go's version.
func VersionOf(info *debug.BuildInfo) string {
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
