package chart

import (
	"bytes"
	"fmt"
	"html"
	"regexp"
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

// Renderer draws a finished plot at w×h points into one image format; label
// names the chart in errors and, where the format has one, in its title. SVG
// and PNG are Renderers.
type Renderer func(p *plot.Plot, w, h vg.Length, label string) ([]byte, error)

// PNG draws p at w×h points as a PNG image at PNGDPI on a white background,
// for forums and wikis that do not take SVG.
func PNG(p *plot.Plot, w, h vg.Length, label string) ([]byte, error) {
	c := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(PNGDPI))
	p.Draw(draw.New(c))
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("chart: %q as PNG: %w", label, err)
	}
	return buf.Bytes(), nil
}

// fontFamily matches the font-family that gonum/plot's SVG canvas writes.
var fontFamily = regexp.MustCompile(`font-family:([^;"]+)`)

// SVG draws p at w×h points and returns SVG markup fit to be inlined in
// HTML: no XML declaration or generator comment, a viewBox that scales, a
// role and title for screen readers, and a local font stack, so text renders
// without loading any font.
func SVG(p *plot.Plot, w, h vg.Length, label string) ([]byte, error) {
	wt, err := p.WriterTo(w, h, "svg")
	if err != nil {
		return nil, fmt.Errorf("chart: %q: %w", label, err)
	}
	var buf bytes.Buffer
	if _, err := wt.WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("chart: %q: %w", label, err)
	}
	return tidySVG(buf.Bytes(), label), nil
}

func tidySVG(b []byte, label string) []byte {
	s := string(b)
	if i := strings.Index(s, "<svg"); i >= 0 {
		s = s[i:]
	}
	s = fontFamily.ReplaceAllString(s, "font-family:'Liberation Sans',Arial,Helvetica,sans-serif")
	// Width and height become CSS-scalable; the viewBox keeps the proportions.
	title := "<title>" + html.EscapeString(label) + "</title>"
	s = strings.Replace(s, "<svg ", `<svg role="img" aria-label="`+html.EscapeString(label)+`" class="chart" `, 1)
	if i := strings.Index(s, ">"); i >= 0 {
		s = s[:i+1] + "\n" + title + s[i+1:]
	}
	return []byte(strings.TrimSpace(s) + "\n")
}
