package chart

import (
	"fmt"
	"image/color"
	"testing"

	colorful "github.com/lucasb-eyer/go-colorful"

	"github.com/loadwake/loadwake/audit/study"
)

// Colour-vision deficiency simulation matrices for full severity (1.0), from
// Machado, Oliveira & Fernandes (2009), "A Physiologically-based Model for
// Simulation of Color Vision Deficiency", IEEE TVCG 15(6), table of severity
// 1.0; applied to linear RGB. Values from memory of the paper's table.
var cvdMatrices = []struct {
	name string
	m    [3][3]float64
}{
	{"normal", [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}},
	{"protanopia", [3][3]float64{{0.152286, 1.052583, -0.204868}, {0.114503, 0.786281, 0.099216}, {-0.003882, -0.048116, 1.051998}}},
	{"deuteranopia", [3][3]float64{{0.367322, 0.860646, -0.227968}, {0.280085, 0.672501, 0.047413}, {-0.011820, 0.042940, 0.968881}}},
	{"tritanopia", [3][3]float64{{1.255528, -0.076749, -0.178779}, {-0.078411, 0.930809, 0.147602}, {0.004733, 0.691367, 0.303900}}},
}

// minDeltaE2000 is the smallest CIEDE2000 colour difference (Sharma, Wu &
// Dalal 2005's formulation, as go-colorful implements it, ×100 to the usual
// scale) two colours that must be told apart may have under each
// simulation. A ΔE00 near 2 is just noticeable side by side; categorical
// chart colours are usually kept 10 or more apart (common practice). 15
// leaves a margin for screens and for map areas that are not side by side;
// before this test, import area and excluded (vermilion and orange) were
// 12.5 apart under deuteranopia.
const minDeltaE2000 = 15

// simulate returns c as a reader with the given deficiency would see it:
// c composited on white, to linear RGB, the matrix, clamped, back to sRGB.
func simulate(c color.Color, m [3][3]float64) colorful.Color {
	r, g, b, a := c.RGBA()
	al := float64(a) / 0xffff
	// Non-premultiplied over white: RGBA() is premultiplied.
	over := func(v uint32) float64 { return float64(v)/0xffff + (1 - al) }
	lin := colorful.Color{R: over(r), G: over(g), B: over(b)}
	lr, lg, lb := lin.LinearRgb()
	v := [3]float64{lr, lg, lb}
	var o [3]float64
	for i := range 3 {
		for j := range 3 {
			o[i] += m[i][j] * v[j]
		}
		o[i] = min(max(o[i], 0), 1)
	}
	return colorful.LinearRgb(o[0], o[1], o[2])
}

// colourPair is two colours a reader must tell apart in one chart.
type colourPair struct {
	chart, a, b string
	ca, cb      color.Color
}

func chartColourPairs() []colourPair {
	white := color.NRGBA{0xff, 0xff, 0xff, 0xff}
	statuses := []study.UnitStatus{study.StatusTreated, study.StatusControl, study.StatusDropped, study.StatusExcluded, study.StatusCandidate}
	var out []colourPair
	for i, s := range statuses {
		for _, u := range statuses[i+1:] {
			out = append(out, colourPair{"map", statusLabel(s), statusLabel(u), statusColour(s), statusColour(u)})
		}
	}
	return append(out,
		colourPair{"event study", "estimate", "95% band", okBlue, okBand},
		colourPair{"event study", "estimate", "import arrives", okBlue, okVermilion},
		colourPair{"event study", "95% band", "import arrives", okBand, okVermilion},
		colourPair{"event study", "95% band", "page", okBand, white},
		colourPair{"balance", "arrow now alike", "arrow still apart", balanceAlike, balanceDiffers},
		colourPair{"balance", "arrow now alike", "alike zone", balanceAlike, balanceZone},
		colourPair{"balance", "arrow still apart", "alike zone", balanceDiffers, balanceZone},
		colourPair{"balance", "start bar", "alike zone", balanceStartBar, balanceZone},
		colourPair{"balance", "alike zone", "page", balanceZone, white},
	)
}

// TestColourVisionDeficiency simulates protanopia, deuteranopia and
// tritanopia on every pair of colours a chart asks readers to tell apart and
// requires a CIEDE2000 difference of at least minDeltaE2000 under each.
func TestColourVisionDeficiency(t *testing.T) {
	for _, p := range chartColourPairs() {
		t.Run(p.chart+": "+p.a+" vs "+p.b, func(t *testing.T) {
			line := ""
			for _, m := range cvdMatrices {
				d := simulate(p.ca, m.m).DistanceCIEDE2000(simulate(p.cb, m.m)) * 100
				line += fmt.Sprintf(" %s %.1f", m.name, d)
				if d < minDeltaE2000 {
					t.Errorf("%s: ΔE00 %.1f < %d", m.name, d, minDeltaE2000)
				}
			}
			t.Log(line)
		})
	}
}
