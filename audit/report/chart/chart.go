package chart

import (
	"image/color"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/vg"

	"github.com/loadwake/loadwake/audit/study"
)

// Colours of the Okabe–Ito palette (Okabe & Ito 2008, "Color Universal
// Design") and three greys, chosen so that readers with the common
// colour-vision deficiencies can still tell the groups apart: every pair a
// chart contrasts keeps a CIEDE2000 difference of at least minDeltaE2000
// under simulated protanopia, deuteranopia and tritanopia (cvd_test.go).
var (
	okBlack     = color.NRGBA{0x00, 0x00, 0x00, 0xff}
	okOrange    = color.NRGBA{0xe6, 0x9f, 0x00, 0xff}
	okSkyBlue   = color.NRGBA{0x56, 0xb4, 0xe9, 0xff}
	okGreen     = color.NRGBA{0x00, 0x9e, 0x73, 0xff}
	okBlue      = color.NRGBA{0x00, 0x72, 0xb2, 0xff}
	okVermilion = color.NRGBA{0xd5, 0x5e, 0x00, 0xff}
	okYellow    = color.NRGBA{0xf0, 0xe4, 0x42, 0xff}
	okPurple    = color.NRGBA{0xcc, 0x79, 0xa7, 0xff}
	okGrey      = color.NRGBA{0xcc, 0xcc, 0xcc, 0xff} // light neutral, outside the palette
	okDarkGrey  = color.NRGBA{0x55, 0x55, 0x55, 0xff} // dark neutral, outside the palette
	okBand      = color.NRGBA{0x56, 0xb4, 0xe9, 0x90} // sky blue, translucent
)

// statusColour is the map fill of each unit role.
func statusColour(s study.UnitStatus) color.Color {
	switch s {
	case study.StatusTreated:
		return okVermilion
	case study.StatusControl:
		return okBlue
	case study.StatusDropped:
		return okYellow
	case study.StatusExcluded:
		return okDarkGrey
	}
	return okGrey
}

// statusLabel is the legend text of each unit role.
func statusLabel(s study.UnitStatus) string {
	switch s {
	case study.StatusTreated:
		return "import area (treated)"
	case study.StatusControl:
		return "matched comparison area"
	case study.StatusDropped:
		return "import area left out (no match)"
	case study.StatusExcluded:
		return "excluded (other or light import)"
	}
	return "unused untouched area"
}

// chartFont is the text face of every chart: Liberation Sans, which gonum/plot
// embeds for measuring text and which is metric-compatible with Arial and
// Helvetica, so the browser's fallback keeps the layout.
func chartFont(size vg.Length) font.Font {
	return font.Font{Typeface: "Liberation", Variant: "Sans", Size: size}
}

// newPlot returns a plot with the report's fonts and a light grid style.
func newPlot(title string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = chartFont(12)
	p.Title.Padding = vg.Points(6)
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = chartFont(10)
		a.Tick.Label.Font = chartFont(9)
		a.Color = color.NRGBA{0x55, 0x55, 0x55, 0xff}
		a.Tick.Color = a.Color
	}
	p.Legend.TextStyle.Font = chartFont(9)
	p.Legend.Top = true
	return p
}

// capital upper-cases the first letter of s.
func capital(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}
