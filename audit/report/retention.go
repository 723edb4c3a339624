package report

import (
	"bytes"
	"fmt"
	"html/template"
	"math"
	"strings"

	"github.com/loadwake/loadwake/audit/retention"
)

// retentionView is the retention section as plain text, before escaping:
// the Markdown, MediaWiki and HTML writers render the same view. It holds
// figures about groups of newcomers in areas, never about a person.
type retentionView struct {
	Story      []string   // the reading in plain sentences
	Head       []string   // the group table's header
	Rows       [][]string // one row per group
	Tests      []string   // the difference in first-year edits, the hazard ratio, the log-rank test
	Definition string
	Notes      []string
	Cautions   []string
}

const retentionHeading = "Did newcomers keep editing?"

// share formats a share of a group with its count.
func shareText(s retention.Share) string {
	if s.Followed == 0 {
		return "not yet known"
	}
	return fmt.Sprintf("%.0f%% of %d", 100*s.Share, s.Followed)
}

func points(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "n/a"
	}
	return fmt.Sprintf("%+.1f points", 100*x)
}

// newRetentionView reads the retention section; nil when there is none.
func newRetentionView(r *retention.Result) *retentionView {
	if r == nil {
		return nil
	}
	v := &retentionView{Definition: "Who counts: " + r.Definition, Notes: r.Notes, Cautions: r.Cautions}
	v.Head = []string{"Areas", "Started", "Newcomers"}
	for _, h := range r.Horizons {
		v.Head = append(v.Head, fmt.Sprintf("Still editing %d months on", h))
	}
	v.Head = append(v.Head, "Edits in the first year (mean, median)")
	cell := map[[2]string]retention.Group{}
	for _, g := range r.Groups {
		cell[[2]string{g.Areas, g.Period}] = g
		row := []string{capital(g.Areas) + " areas", g.Period + " the import", fmt.Sprint(g.Newcomers)}
		for _, s := range g.Retention {
			row = append(row, shareText(s))
		}
		if g.FollowedYear > 0 {
			row = append(row, fmt.Sprintf("%.1f, %.0f", g.FirstYearEdits, g.FirstYearEditsMedian))
		} else {
			row = append(row, "not yet known")
		}
		v.Rows = append(v.Rows, row)
	}
	year := func(areas, period string) string {
		g := cell[[2]string{areas, period}]
		for _, s := range g.Retention {
			if s.Months == 12 && s.Followed > 0 {
				return fmt.Sprintf("%.0f%% (of %d)", 100*s.Share, s.Followed)
			}
		}
		return "not yet known"
	}
	v.Story = append(v.Story, fmt.Sprintf("Of the accounts that made their first edit in an import area after the import, and that the data follow for a year, %s were still editing 12 months later; before the import, %s. In the comparison areas: %s after, %s before.",
		year("import", "after"), year("import", "before"), year("comparison", "after"), year("comparison", "before")))
	e := r.Retention12
	switch {
	case !e.Computed:
		v.Story = append(v.Story, "Too few newcomers were followed for a year in every group to compare the change.")
	case e.NoInterval:
		v.Story = append(v.Story, fmt.Sprintf("Against the comparison areas' change, the share still editing a year on changed by %s in import areas; with so few areas no interval is reliable, so this cannot tell a change from chance.", points(e.Estimate)))
	default:
		reading := "no change can be ruled out"
		if e.CI95[1] < 0 {
			reading = "fewer newcomers kept editing in import areas than the comparison suggests"
		} else if e.CI95[0] > 0 {
			reading = "more newcomers kept editing in import areas than the comparison suggests"
		}
		v.Story = append(v.Story, fmt.Sprintf("Against the comparison areas' change, the share still editing a year on changed by %s in import areas (95%% interval %s to %s): %s.",
			points(e.Estimate), points(e.CI95[0]), points(e.CI95[1]), reading))
	}
	if f := r.FirstYearEdits; f.Computed {
		iv := "no reliable interval"
		if !f.NoInterval {
			iv = fmt.Sprintf("95%% interval %+.1f to %+.1f", f.CI95[0], f.CI95[1])
		}
		v.Tests = append(v.Tests, fmt.Sprintf("Edits in the first year, the same comparison: %+.1f edits per newcomer (%s).", f.Estimate, iv))
	}
	if h := r.HazardRatio; h.Computed {
		s := fmt.Sprintf("Hazard ratio of stopping, import areas after the import against the comparison: %.2f (95%% interval %.2f to %.2f, p %s); above 1 means newcomers stopped sooner.", h.Estimate, h.CI95[0], h.CI95[1], pval(h.P))
		if h.Note != "" {
			s += " " + capital(h.Note) + "."
		}
		v.Tests = append(v.Tests, s)
	} else if h.Note != "" {
		v.Tests = append(v.Tests, "Hazard ratio of stopping: "+h.Note+".")
	}
	if l := r.LogRank; l.Computed {
		v.Tests = append(v.Tests, fmt.Sprintf("Log-rank test, newcomers after the import in import against comparison areas, within each wave: chi-square %.2f, p %s. It treats newcomers as independent, though newcomers of one area tend to be alike; read it beside the hazard ratio, whose interval allows for that.", l.ChiSq, pval(l.P)))
	}
	v.Tests = append(v.Tests, "Methods: "+e.Method+"; "+r.HazardRatio.Method+".")
	return v
}

func writeRetentionMarkdown(b *bytes.Buffer, v *retentionView, esc func(string) string) {
	if v == nil {
		return
	}
	fmt.Fprintf(b, "\n## %s\n\n", esc(retentionHeading))
	for _, s := range v.Story {
		fmt.Fprintf(b, "%s\n", esc(s))
	}
	b.WriteString("\n|")
	for _, h := range v.Head {
		fmt.Fprintf(b, " %s |", esc(h))
	}
	b.WriteString("\n|---|---|")
	for range v.Head[2:] {
		b.WriteString("---:|")
	}
	b.WriteString("\n")
	for _, r := range v.Rows {
		b.WriteString("|")
		for _, c := range r {
			fmt.Fprintf(b, " %s |", esc(c))
		}
		b.WriteString("\n")
	}
	b.WriteString("\n")
	for _, s := range append(append(append([]string{}, v.Tests...), v.Definition), v.Notes...) {
		fmt.Fprintf(b, "- %s\n", esc(s))
	}
	b.WriteString("\n")
	for _, s := range v.Cautions {
		fmt.Fprintf(b, "> %s\n>\n", esc(s))
	}
}

func writeRetentionWiki(b *bytes.Buffer, v *retentionView, heading func(int, string), list func([]string)) {
	if v == nil {
		return
	}
	heading(2, retentionHeading)
	for _, s := range v.Story {
		fmt.Fprintf(b, "%s\n\n", wikiText(s))
	}
	right := map[int]bool{}
	for i := 2; i < len(v.Head); i++ {
		right[i] = true
	}
	wikiTable(b, v.Head, right, v.Rows)
	list(append(append(append([]string{}, v.Tests...), v.Definition), v.Notes...))
	list(v.Cautions)
}

var retentionPage = template.Must(template.New("retention").Parse(`<section id="retention">
<h2>` + retentionHeading + `</h2>
{{range .Story}}<p>{{.}}</p>
{{end}}<table>
<thead><tr>{{range .Head}}<th>{{.}}</th>{{end}}</tr></thead>
<tbody>{{range .Rows}}
<tr>{{range $i, $c := .}}<td{{if ge $i 2}} class="n"{{end}}>{{$c}}</td>{{end}}</tr>{{end}}
</tbody>
</table>
<ul>{{range .Tests}}
<li>{{.}}</li>{{end}}
<li>{{.Definition}}</li>{{range .Notes}}
<li class="muted">Note: {{.}}</li>{{end}}
</ul>
<ul class="cautions">{{range .Cautions}}
<li>{{.}}</li>{{end}}
</ul>
</section>
`))

// retentionHTML renders the section for the HTML page; empty without one.
func retentionHTML(v *retentionView) (template.HTML, error) {
	if v == nil {
		return "", nil
	}
	var b bytes.Buffer
	if err := retentionPage.Execute(&b, v); err != nil {
		return "", fmt.Errorf("report: retention section: %w", err)
	}
	return template.HTML(b.String()), nil // #nosec: rendered by html/template above
}

// capital upper-cases the first letter of s.
func capital(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}
