package report

import (
	"io"
	"path/filepath"
	"strings"

	"github.com/loadwake/loadwake/audit/report/chart"
)

// PNGDPI is the resolution of the PNG charts (chart.PNGDPI).
const PNGDPI = chart.PNGDPI

// ChartPNG renders the chart of the given name (a Chart.Name from
// MakeCharts) as a PNG image; ok is false when in has no such chart.
func ChartPNG(in Input, name string) (png []byte, ok bool, err error) {
	return chartIn(in, name, chart.PNG)
}

// chartIn draws the chart of the given name with render.
func chartIn(in Input, name string, render chart.Renderer) ([]byte, bool, error) {
	if in.Audit == nil {
		return nil, false, nil
	}
	switch {
	case name == "balance":
		return chart.Balance(in.Audit.Balance, render)
	case name == "map":
		return chart.Map(in.Units, in.Audit.UnitList, render)
	case name == retentionChartName:
		return chart.Retention(in.Audit.Retention, render)
	case strings.HasPrefix(name, "by-"):
		return forestPNG(in.Audit, name, render)
	case strings.HasPrefix(name, "event-study-"):
		return chart.EventStudy(in.Audit.EventStudy, strings.TrimPrefix(name, "event-study-"), render)
	}
	return nil, false, nil
}

// writeChartPNGs writes charts/NAME.png beside each chart's SVG.
func writeChartPNGs(dir string, in Input, charts []Chart) error {
	for _, c := range charts {
		png, ok, err := ChartPNG(in, c.Name)
		if err != nil {
			return err
		}
		if !ok {
			continue
		}
		if err := writeAtomic(filepath.Join(dir, DirCharts, c.Name+".png"), func(w io.Writer) error {
			_, err := w.Write(png)
			return err
		}); err != nil {
			return err
		}
	}
	return nil
}
