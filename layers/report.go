package layers

import (
	"fmt"
	"io"
	"sort"
	"text/tabwriter"
)

// WriteSummary prints s as aligned text: versions scanned, events per layer,
// key touches per family and the counts of what could not be placed. The
// order is stable, so the output can be compared between runs.
func WriteSummary(w io.Writer, s Summary) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	row := func(label string, n int64) { fmt.Fprintf(tw, "  %s\t%d\n", label, n) }
	if s.Skipped {
		fmt.Fprintln(tw, "classification up to date (same rules and data); --force re-classifies")
	}
	fmt.Fprintf(tw, "rules sha256 %s\ndata %s\n", s.RulesHash, s.Fingerprint)
	fmt.Fprintln(tw, "versions scanned")
	for _, t := range scanTypes {
		row(string(t), s.Versions[string(t)])
	}
	fmt.Fprintln(tw, "events per layer")
	for _, l := range append(Layers[:], Bookkeeping) {
		row(l.String(), s.Events[l.String()])
	}
	fmt.Fprintln(tw, "key touches per family (attribute and bookkeeping events)")
	fams := make([]string, 0, len(s.Families))
	for f := range s.Families {
		fams = append(fams, f)
	}
	sort.Slice(fams, func(i, j int) bool {
		if s.Families[fams[i]] != s.Families[fams[j]] {
			return s.Families[fams[i]] > s.Families[fams[j]]
		}
		return fams[i] < fams[j]
	})
	for _, f := range fams {
		row(f, s.Families[f])
	}
	fmt.Fprintln(tw, "data quality")
	row("events without location", s.Unlocated)
	row("ways with missing nodes", s.WaysMissingNodes)
	row("provenance-only versions", s.ProvenanceOnly)
	row("accounts", s.Users)
	return tw.Flush()
}
