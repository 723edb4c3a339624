package cli

import (
	"fmt"
	"io"
	"path/filepath"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/audit/spatial"
)

// WriteReports writes the report folder dir (report.md, report.html,
// report.json, units.geojson, panel.csv, and the checklist and assessment
// JSON when given) and tells out where it is.
func WriteReports(out io.Writer, dir string, in report.Input) error {
	if err := report.Write(dir, in); err != nil {
		return err
	}
	fmt.Fprintf(out, "wrote the report to %s (%s; open report.html in a browser, paste report.md into a wiki page or mail)\n",
		dir, JoinOr(report.Files(in), "no files"))
	return nil
}

// ReportInput gathers what a report shows; units may be nil.
func ReportInput(rep *audit.Report, units *spatial.Units, cl *checklist.Checklist, a *proposal.Assessment) report.Input {
	in := report.Input{Audit: rep, Checklist: cl, Assessment: a}
	if units != nil {
		in.Units = units
	}
	return in
}

// ReportPath names a file inside the report folder, for messages.
func ReportPath(dir, name string) string { return filepath.Join(dir, name) }

// JoinOr joins s with commas, or returns none when s is empty.
func JoinOr(s []string, none string) string {
	if len(s) == 0 {
		return none
	}
	out := s[0]
	for _, x := range s[1:] {
		out += ", " + x
	}
	return out
}
