package report

import (
	"bytes"
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/recorder"
)

// TestPNGCharts writes the report folder and checks that every chart has a
// PNG beside its SVG, decodable by image/png, with the pixel size its point
// size gives at PNGDPI (1 point = 1/72 inch, the PostScript point).
func TestPNGCharts(t *testing.T) {
	dir := t.TempDir()
	in := Input{Audit: fixedAudit(), Units: appendixUnits(t)}
	if err := Write(dir, in); err != nil {
		t.Fatal(err)
	}
	charts, err := MakeCharts(in)
	if err != nil {
		t.Fatal(err)
	}
	if len(charts) != 6 {
		t.Fatalf("%d charts, want 6", len(charts))
	}
	for _, c := range charts {
		t.Run(c.Name, func(t *testing.T) {
			b, err := os.ReadFile(filepath.Join(dir, DirCharts, c.Name+".png"))
			if err != nil {
				t.Fatal(err)
			}
			img, err := png.Decode(bytes.NewReader(b))
			if err != nil {
				t.Fatalf("not a PNG: %v", err)
			}
			// Every chart is 16 cm wide (charts.go): 16/2.54 in × 144 dpi.
			if got, want := float64(img.Bounds().Dx()), 16.0/2.54*PNGDPI; got < want-1 || got > want+1 {
				t.Errorf("width %.0f px, want %.0f", got, want)
			}
			if _, err := os.Stat(filepath.Join(dir, DirCharts, c.Name+".svg")); err != nil {
				t.Errorf("no SVG beside the PNG: %v", err)
			}
		})
	}
	if _, ok, err := ChartPNG(in, "no-such-chart"); ok || err != nil {
		t.Errorf("ChartPNG of an unknown name: ok %v err %v", ok, err)
	}
}

// minPNGTextPx is the smallest text height, in pixels, a PNG chart may have.
const minPNGTextPx = 11

// TestPNGTextSize draws every chart on gonum's recording canvas and checks
// that each piece of text is at least minPNGTextPx pixels high at PNGDPI.
func TestPNGTextSize(t *testing.T) {
	in := Input{Audit: fixedAudit(), Units: appendixUnits(t)}
	charts, err := MakeCharts(in)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range charts {
		t.Run(c.Name, func(t *testing.T) {
			var texts int
			smallest := vg.Length(1e9)
			record := func(p *plot.Plot, w, h vg.Length, label string) ([]byte, error) {
				var rc recorder.Canvas
				p.Draw(draw.NewCanvas(&rc, w, h))
				for _, a := range rc.Actions {
					if fs, ok := a.(*recorder.FillString); ok && strings.TrimSpace(fs.String) != "" {
						texts++
						smallest = min(smallest, fs.Size)
					}
				}
				return nil, nil
			}
			if _, _, err := chartIn(in, c.Name, record); err != nil {
				t.Fatal(err)
			}
			if texts == 0 {
				t.Fatal("no text drawn")
			}
			if px := float64(smallest) * PNGDPI / 72; px < minPNGTextPx {
				t.Errorf("smallest text %.1f pt = %.1f px at %d dpi, want >= %d px", float64(smallest), px, PNGDPI, minPNGTextPx)
			}
		})
	}
}
