package report

import (
	"io"
	"path/filepath"

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
	return chart.Draw(in.Audit, in.Units, name, render)
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
