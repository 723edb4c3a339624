package report

import (
	"bytes"
	"fmt"
	"io"
	"path/filepath"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// PNGDPI is the resolution of the PNG charts. gonum/plot sizes text in
// points (1/72 inch), so a font of s points is s·PNGDPI/72 pixels: the
// charts' smallest text, 9 points, is 18 pixels, and a 16 cm chart is 907
// pixels wide, sharp on high-density screens and still small files.
const PNGDPI = 144

// minPNGTextPx is the smallest text height, in pixels, a PNG chart may have.
const minPNGTextPx = 11

// renderFunc draws a finished plot at w×h points into one image format.
type renderFunc func(p *plot.Plot, w, h vg.Length, label string) ([]byte, error)

// renderPNG draws p at w×h points as a PNG image at PNGDPI on a white
// background, for forums and wikis that do not take SVG.
func renderPNG(p *plot.Plot, w, h vg.Length, label string) ([]byte, error) {
	c := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(PNGDPI))
	p.Draw(draw.New(c))
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("report: chart %q as PNG: %w", label, err)
	}
	return buf.Bytes(), nil
}

// ChartPNG renders the chart of the given name (a Chart.Name from
// MakeCharts) as a PNG image; ok is false when in has no such chart.
func ChartPNG(in Input, name string) (png []byte, ok bool, err error) {
	return chartIn(in, name, renderPNG)
}

// chartIn draws the chart of the given name with render.
func chartIn(in Input, name string, render renderFunc) ([]byte, bool, error) {
	if in.Audit == nil {
		return nil, false, nil
	}
	switch {
	case name == "balance":
		return balanceChart(in.Audit.Balance, render)
	case name == "map":
		return mapChart(in.Units, in.Audit.UnitList, render)
	case name == retentionChartName:
		return retentionChart(in.Audit.Retention, render)
	case strings.HasPrefix(name, "by-"):
		return forestPNG(in.Audit, name, render)
	case strings.HasPrefix(name, "event-study-"):
		return eventStudyChart(in.Audit.EventStudy, strings.TrimPrefix(name, "event-study-"), render)
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
