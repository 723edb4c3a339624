package report

import (
	"fmt"

	"github.com/loadwake/loadwake/audit"
)

// The headline by area traits (audit.AddSplits): one forest chart per trait,
// a row per layer and group with the group's relative effect (a diamond)
// and its 95% interval (a bar; a hollow diamond and no bar where no interval
// is reliable), and the split's readings in plain words among the notes.

// splitNotes are the report's plain-words lines of the splits, led by what
// guards against fishing.
func splitNotes(r *audit.Report) []string {
	lines := audit.SplitLines(r)
	if len(lines) == 0 {
		return nil
	}
	head := fmt.Sprintf("Effects by area traits: %d splits were declared before estimation (%d tested for a difference); each difference p-value is adjusted by Holm's method across the tested splits, so a split found by trying many is not taken for a finding. Groups with fewer than 4 areas get no interval.",
		r.Splits.Declared, r.Splits.Tested)
	return append([]string{head}, lines...)
}
