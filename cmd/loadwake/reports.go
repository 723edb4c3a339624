package main

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

// writeReports writes the report folder dir (report.md, report.html,
// report.json, units.geojson, panel.csv, and the checklist and assessment
// JSON when given) and tells out where it is.
func writeReports(out io.Writer, dir string, in report.Input) error {
	if err := report.Write(dir, in); err != nil {
		return err
	}
	fmt.Fprintf(out, "wrote the report to %s (%s; open report.html in a browser, paste report.md into a wiki page or mail)\n",
		dir, joinOr(report.Files(in), "no files"))
	return nil
}

// reportInput gathers what a report shows; units may be nil.
func reportInput(rep *audit.Report, units *spatial.Units, cl *checklist.Checklist, a *proposal.Assessment) report.Input {
	in := report.Input{Audit: rep, Checklist: cl, Assessment: a}
	if units != nil {
		in.Units = units
	}
	return in
}

// reportPath names a file inside the report folder, for messages.
func reportPath(dir, name string) string { return filepath.Join(dir, name) }
