package report

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/report/chart"
	"github.com/loadwake/loadwake/layers"
)

// ErrInput is the sentinel under errors about an unusable Input.
var ErrInput = errors.New("report: invalid input")

// Shapes are the unit geometries the map and units.geojson draw;
// *spatial.Units meets it.
type Shapes = chart.Shapes

// Input is what a report is made of. At least one of Audit, Checklist and
// Assessment is required; each adds its sections. The charts, report.json,
// units.geojson and panel.csv come from the audit.
type Input struct {
	// Audit is the audit of one import (audit.Run). Its Study, when set,
	// gives panel.csv.
	Audit *audit.Report
	// Units are the study's spatial units, for the map and units.geojson.
	// *spatial.Units meets Shapes.
	Units Shapes
	// Checklist is the import's neglected-tag checklist.
	Checklist *checklist.Checklist
	// Assessment is an assessment of a proposed import.
	Assessment *proposal.Assessment
	// Provenance, when set, is shown instead of the audit's (reports without
	// an audit take theirs from here).
	Provenance *audit.Provenance
}

func (in Input) check() error {
	if in.Audit == nil && in.Checklist == nil && in.Assessment == nil {
		return fmt.Errorf("%w: no audit, checklist or assessment", ErrInput)
	}
	return nil
}

// The files Write creates, by name.
const (
	FileMarkdown   = "report.md"
	FileHTML       = "report.html"
	FileJSON       = "report.json"
	FileUnits      = "units.geojson"
	FilePanel      = "panel.csv"
	FileChecklist  = "checklist.json"
	FileAssessment = "assessment.json"
	DirCharts      = "charts" // each chart as NAME.svg and NAME.png
)

// Files returns the names of the files Write creates for in, in writing order.
func Files(in Input) []string {
	out := []string{FileMarkdown, FileHTML, FileWiki}
	if in.Audit != nil {
		out = append(out, FileJSON)
	}
	if in.Units != nil && in.Audit != nil {
		out = append(out, FileUnits)
	}
	if in.Audit != nil && in.Audit.Study != nil && in.Audit.Study.Panel != nil {
		out = append(out, FilePanel)
	}
	if in.Checklist != nil {
		out = append(out, FileChecklist)
	}
	if in.Assessment != nil {
		out = append(out, FileAssessment)
	}
	return out
}

// Write creates dir if needed and writes the report files into it (see
// Files): report.md, report.html, report.json (AuditReport.WriteJSON),
// units.geojson when Units are given, panel.csv (panel.WriteCSV) when
// the audit carries its study, and checklist.json and assessment.json when
// those are given, and each chart as a standalone SVG file under charts/
// (for a wiki page or a README). Existing files of those names are replaced; each is
// written to a temporary name first and renamed, so a failed run leaves no
// half-written file.
func Write(dir string, in Input) error {
	if err := in.check(); err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	charts, err := MakeCharts(in)
	if err != nil {
		return err
	}
	writers := map[string]func(io.Writer) error{
		FileMarkdown: func(w io.Writer) error { return WriteMarkdown(w, in) },
		FileHTML:     func(w io.Writer) error { return writeHTML(w, in, charts) },
		FileWiki:     func(w io.Writer) error { return WriteWiki(w, in) },
		FileUnits:    func(w io.Writer) error { return WriteUnitsGeoJSON(w, in.Units, in.Audit) },
		FilePanel:    func(w io.Writer) error { return panel.WriteCSV(w, in.Audit.Study.Panel) },
	}
	if in.Audit != nil {
		writers[FileJSON] = in.Audit.WriteJSON
	}
	if in.Checklist != nil {
		writers[FileChecklist] = in.Checklist.WriteJSON
	}
	if in.Assessment != nil {
		writers[FileAssessment] = in.Assessment.WriteJSON
	}
	for _, name := range Files(in) {
		if err := writeAtomic(filepath.Join(dir, name), writers[name]); err != nil {
			return err
		}
	}
	if err := os.MkdirAll(filepath.Join(dir, DirCharts), 0o755); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	for _, c := range charts {
		svg := c.SVG
		if err := writeAtomic(filepath.Join(dir, DirCharts, c.Name+".svg"), func(w io.Writer) error {
			_, err := w.Write(svg)
			return err
		}); err != nil {
			return err
		}
	}
	return writeChartPNGs(dir, in, charts) // charts/NAME.png beside each SVG
}

// writeAtomic writes path through a temporary file in the same folder.
func writeAtomic(path string, write func(io.Writer) error) error {
	var buf bytes.Buffer
	if err := write(&buf); err != nil {
		return fmt.Errorf("report: write %s: %w", path, err)
	}
	tmp := path + ".tmp"
	if err := os.WriteFile(tmp, buf.Bytes(), 0o644); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return fmt.Errorf("report: %w", err)
	}
	return nil
}

// Chart is one rendered chart (chart.Chart).
type Chart = chart.Chart

// MakeCharts renders the charts of a report as SVG (chart.All): one event
// study per layer that has event-study rows, the balance chart when there are
// balance rows, the retention chart, the map when units are given and a
// forest chart per trait of the splits; none without an audit.
func MakeCharts(in Input) ([]Chart, error) {
	if err := in.check(); err != nil {
		return nil, err
	}
	if in.Audit == nil {
		return nil, nil
	}
	out, err := chart.All(in.Audit, in.Units, layerWords)
	if err != nil {
		return nil, err
	}
	if isEvent(in) {
		out = eventCharts(out)
	}
	return out, nil
}

// layerName gives a layer's edits in plain words: a short label for the
// first screen and a phrase for sentences; ok is false for other outcomes.
func layerName(layer string) (label, words string, ok bool) {
	switch layer {
	case layers.Geometry.String():
		return "Moving or reshaping features", "edits that move or reshape existing features", true
	case layers.Attribute.String():
		return "Changing tags", "edits that change the tags of existing features", true
	case layers.NewFeature.String():
		return "Mapping new features", "newly mapped features", true
	case layers.Deletion.String():
		return "Deleting features", "deleted features", true
	}
	return "", "", false
}

// layerWords describes a layer's edits in plain words.
func layerWords(layer string) string {
	if _, words, ok := layerName(layer); ok {
		return words
	}
	return layer + " counts"
}

// layerLabel names a layer's edits in a few plain words.
func layerLabel(layer string) string {
	if label, _, ok := layerName(layer); ok {
		return label
	}
	return layer
}
