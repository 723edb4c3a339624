package report

import (
	"io"
	"path/filepath"
	"testing"

	"github.com/loadwake/loadwake/audit/report/chart"
)

// BenchmarkWrite writes the whole report folder of the fixed audit: six SVG
// charts, Markdown, HTML, JSON and GeoJSON.
func BenchmarkWrite(b *testing.B) {
	in := Input{Audit: fixedAudit(), Units: appendixUnits(b)}
	dir := filepath.Join(b.TempDir(), "r")
	b.ReportAllocs()
	for b.Loop() {
		if err := Write(dir, in); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "reports/s")
}

// BenchmarkEventStudySVG renders one event-study chart.
func BenchmarkEventStudySVG(b *testing.B) {
	rows := fixedAudit().EventStudy
	b.ReportAllocs()
	for b.Loop() {
		if _, ok, err := chart.EventStudy(rows, "attribute", chart.SVG); err != nil || !ok {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "charts/s")
}

// BenchmarkMarkdown writes report.md alone.
func BenchmarkMarkdown(b *testing.B) {
	in := Input{Audit: fixedAudit()}
	b.ReportAllocs()
	for b.Loop() {
		if err := WriteMarkdown(io.Discard, in); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "reports/s")
}
