package report

import (
	"bytes"
	"fmt"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/did"
)

// TestAnswer: the first screen's sentence per layer says the direction,
// the size and where the interval lies, in words.
func TestAnswer(t *testing.T) {
	tests := []struct {
		name string
		e    did.Effect
		want string
	}{
		{"clear drop", did.Effect{RelativeEffect: f64(-0.27), CI95: [2]float64{-0.36, -0.17}, PreTrendP: f64(0.5)},
			"about 27% fewer than expected without the import (likely between 17% and 36% fewer)."},
		{"clear rise", did.Effect{RelativeEffect: f64(0.15), CI95: [2]float64{0.05, 0.24}},
			"about 15% more than expected without the import (likely between 5% and 24% more)."},
		{"no clear change", did.Effect{RelativeEffect: f64(0.03), CI95: [2]float64{-0.07, 0.13}},
			"no clear change (the data allow anything between 7% fewer and 13% more)."},
		{"too few areas", did.Effect{RelativeEffect: f64(-0.2), CI95: [2]float64{-0.2, -0.2}, NoInterval: true, PValue: 0.41, TreatedUnits: 3},
			"about 20% fewer than expected, but 3 import area(s) are too few to give a range; re-dealing the import to other areas gives differences this large with p = 0.410."},
		{"failed pre-import test", did.Effect{RelativeEffect: f64(-0.33), CI95: [2]float64{-0.42, -0.22}, PreTrendP: f64(0.02)},
			"about 33% fewer than expected without the import (likely between 22% and 42% fewer). Doubtful: these areas were already changing differently before the import."},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := Answer(tt.e); got != tt.want {
				t.Errorf("got  %q\nwant %q", got, tt.want)
			}
		})
	}
}

// TestWindowSentence: the lead gives the months actually used, not the
// months asked for, and the estimates' own window.
func TestWindowSentence(t *testing.T) {
	r := fixedAudit()
	r.Window[0] = "2020-01" // the store's history starts 12 months before the import
	r.Estimation.Window = did.Window{Pre: 18, Post: 12}
	got := windowSentence(r)
	for _, want := range []string{"from 2020-01 to 2022-06 (12 months before the import's first month, 12 after its last; 24 were asked for before, but the store's history starts later)",
		"up to 12 months before each area's import with up to 12 months after"} {
		if !strings.Contains(got, want) {
			t.Errorf("%q lacks %q", got, want)
		}
	}
	if strings.Contains(got, "24 months before") {
		t.Errorf("claims the months asked for: %q", got)
	}
}

// TestFirstScreen: the answers come before anything else in every format,
// at most three warnings are shown open and the rest are folded or listed
// further down.
func TestFirstScreen(t *testing.T) {
	in := Input{Audit: fixedAudit()}
	for i := range 4 {
		in.Audit.Warnings = append(in.Audit.Warnings, fmt.Sprintf("extra warning %d", i))
	}
	var h, md, wiki bytes.Buffer
	if err := writeHTML(&h, in, nil); err != nil {
		t.Fatal(err)
	}
	if err := WriteMarkdown(&md, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteWiki(&wiki, in); err != nil {
		t.Fatal(err)
	}
	page := h.String()
	answer, warn, lead := strings.Index(page, `id="answer"`), strings.Index(page, `id="warnings"`), strings.Index(page, `class="lead"`)
	if answer < 0 || answer > warn || warn > lead {
		t.Errorf("HTML order: answer %d, warnings %d, lead %d", answer, warn, lead)
	}
	open := page[warn:strings.Index(page, "<details>")]
	if n := strings.Count(open, "<li>"); n != maxTopWarnings {
		t.Errorf("%d warnings shown open, want %d", n, maxTopWarnings)
	}
	if !strings.Contains(page, "3 more warning(s)") {
		t.Error("the folded warnings are not counted")
	}
	for name, text := range map[string]string{"Markdown": md.String(), "wiki": wiki.String()} {
		short, more := strings.Index(text, "In short"), strings.Index(text, "More warnings")
		if short < 0 || short > strings.Index(text, "Import imp-42 was uploaded") || more < 0 || !strings.Contains(text[more:], "extra warning 3") {
			t.Errorf("%s: answers at %d, more warnings at %d:\n%s", name, short, more, text)
		}
	}
}
