package report

import (
	"fmt"
	"html/template"
	"io"
	"strings"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

// htmlPage is the data of the HTML template.
type htmlPage struct {
	view
	Charts     []htmlChart
	Checklist  *htmlChecklist
	Assessment *htmlAssessment
	Invented   bool          // the invented-data banner
	Provenance []provRow     // where the figures come from
	Retention  template.HTML // the newcomer retention section (retention.go)
}

type htmlChart struct {
	Name, Caption string
	SVG           template.HTML // rendered by chart.SVG: gonum/plot escapes its text
}

type htmlChecklist struct {
	Reference string
	Rows      []checklist.Row
	Notes     []string
	Cautions  []string
}

type htmlAssessment struct {
	Proposal   string
	Features   int
	Changesets int
	Footprint  int
	Treated    int
	Duplicates int
	Distance   float64
	Nearest    []proposal.ImportMatch
	Expected   []proposal.LayerRange
	Lacking    []proposal.LackingKey
	Notes      []string
	Cautions   []string
}

var pageFuncs = template.FuncMap{
	"inventedBanner": func() string { return InventedBanner },
	"baseCSS":        func() template.CSS { return template.CSS(baseCSS) },
	"safeURL":        safeURL,
	"pct":            func(x float64) string { return fmt.Sprintf("%.1f%%", 100*x) },
	"pp":             func(x float64) string { return fmt.Sprintf("%+.1f", 100*x) },
	"f2":             func(x float64) string { return fmt.Sprintf("%.2f", x) },
	"g2":             func(x float64) string { return fmt.Sprintf("%.2g", x) },
	"rng": func(r proposal.LayerRange) string {
		if r.Relative {
			return fmt.Sprintf("%+.0f%% to %+.0f%%", 100*r.Low, 100*r.High)
		}
		return fmt.Sprintf("%+.2f to %+.2f per area-month", r.Low, r.High)
	},
}

// baseCSS is the style every loadwake page shares: the report and the
// overview of all imports. It loads nothing from elsewhere.
const baseCSS = `:root { --ink: #1d232b; --muted: #5a6470; --rule: #d9dde2; --paper: #fbfaf7; --warn: #d55e00; --calm: #0072b2; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
  font: 16px/1.55 "Liberation Sans", Arial, Helvetica, sans-serif; }
main { max-width: 62rem; margin: 0 auto; padding: 2rem 1.25rem 4rem; }
h1 { font-size: 1.7rem; line-height: 1.25; margin: 0 0 .75rem; border-bottom: 4px solid var(--calm); padding-bottom: .5rem; }
h2 { font-size: 1.25rem; margin: 2.25rem 0 .6rem; }
h3 { font-size: 1.05rem; margin: 1.5rem 0 .4rem; }
p.lead { font-size: 1.05rem; }
.warnings { border-left: 6px solid var(--warn); background: #fff4ea; padding: .6rem 1rem; margin: 1.25rem 0; }
.warnings h2 { margin-top: .2rem; color: #8a3c00; }
details summary { cursor: pointer; color: #8a3c00; margin: .3rem 0; }
.answer { border-left: 6px solid var(--calm); background: #eef5fb; padding: .4rem 1rem; margin: 1rem 0; }
.answer h2 { margin-top: .3rem; }
.answer li { margin: .25rem 0; }
.ok { border-left: 6px solid #009e73; background: #eef8f4; padding: .6rem 1rem; }
table { border-collapse: collapse; width: 100%; margin: .6rem 0 1rem; font-size: .92rem; background: #fff; }
@media (max-width: 48rem) { table { display: block; overflow-x: auto; } main { padding: 1.25rem .75rem 3rem; } }
h1, h2, h3, p, li, dd, dt { overflow-wrap: anywhere; }
th, td { border-bottom: 1px solid var(--rule); padding: .35rem .5rem; text-align: left; vertical-align: top; }
th { background: #eef1f4; font-weight: 600; }
th.n { text-align: right; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.headline td.n { font-size: 1.05rem; font-weight: 600; }
dl.glossary dt { font-weight: 600; margin-top: .6rem; }
dl.glossary dd { margin: .1rem 0 0 1.25rem; color: var(--muted); }
figure { margin: 1.25rem 0 1.75rem; background: #fff; border: 1px solid var(--rule); padding: .75rem; min-width: 0; overflow-x: auto; }
/* Charts are drawn 453.5 units wide with 9-unit text at the smallest: at
   36rem (576 px) or wider that text is at least 11.4 px. Narrower screens
   scroll the figure box sideways rather than shrink the text. */
figure svg { display: block; width: 100%; min-width: 36rem; height: auto; }
figcaption { color: var(--muted); font-size: .9rem; margin-top: .4rem; }
.charts { display: grid; grid-template-columns: minmax(0, 1fr); max-width: 48rem; }
.invented { border: 3px solid var(--warn); background: #fff4ea; padding: .6rem 1rem; }
.provenance dt { font-weight: 600; margin-top: .4rem; }
.provenance dd { margin-left: 1rem; overflow-wrap: anywhere; }
.cautions { border-top: 3px solid var(--ink); margin-top: 2.5rem; padding-top: .5rem; }
.muted { color: var(--muted); }
@media print { body { background: #fff; } figure { break-inside: avoid; } }
`

// sharedTemplates are the parts every loadwake page shares: its head up to
// the page's own style rules (given the title), and the sections it ends
// with: where the figures come from (a list of provRow) and the cautions
// (strings).
const sharedTemplates = `{{define "head"}}<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="generator" content="loadwake">
<title>{{.}}</title>
<style>
{{baseCSS}}{{end}}{{define "provenance"}}{{if .}}<section class="provenance" id="provenance">
<h2>Where these figures come from</h2>
<dl>{{range .}}
<dt>{{.Label}}</dt><dd>{{.Text}}{{if .Links}}{{if .Text}}: {{end}}{{range $i, $l := .Links}}{{if $i}}, {{end}}{{if safeURL $l.URL}}<a href="{{$l.URL}}">{{$l.Text}}</a>{{else}}{{$l.Text}}{{end}}{{end}}{{end}}</dd>{{end}}
</dl>
</section>
{{end}}{{end}}{{define "cautions"}}<section class="cautions" id="cautions">
<h2>Cautions</h2>
<ul>{{range .}}
<li>{{.}}</li>{{end}}
</ul>
</section>
{{end}}`

// page is the report's HTML: inline CSS, inline SVG, no scripts, and nothing
// that loads from elsewhere. Its look is the project's own.
var page = template.Must(template.Must(template.New("report").Funcs(pageFuncs).Parse(sharedTemplates)).Parse(`{{template "head" .Title}}</style>
</head>
<body>
<main>
<h1>{{.Title}}</h1>
{{if .Invented}}<p class="invented" role="note"><strong>{{inventedBanner}}</strong></p>
{{end}}{{if .HasAudit}}<section id="answer" class="answer">
<h2>In short</h2>
{{if .Answers}}<ul>{{range .Answers}}
<li><strong>{{.Label}}</strong> <span class="muted">({{.Layer}})</span>: {{.Text}}</li>{{end}}
</ul>
{{else}}<p>No layer could be estimated; see the warnings and the table of all estimates.</p>
{{end}}<p class="muted">Compared with matched areas the import did not touch, in the import's own areas. Terms are explained under <a href="#glossary">What the numbers mean</a>.</p>
</section>
{{if .Warnings}}<section class="warnings" id="warnings">
<h2>Warnings</h2>
{{if .TopWarnings}}<ul>{{range .TopWarnings}}
<li>{{.}}</li>{{end}}
</ul>
{{end}}{{if .MoreWarnings}}<details>
<summary>{{len .MoreWarnings}} more warning(s), including finer outcomes (key families, contributor groups)</summary>
<ul>{{range .MoreWarnings}}
<li>{{.}}</li>{{end}}
</ul>
</details>
{{end}}</section>
{{else}}<p class="ok" id="warnings">No warnings: the checks that run with every audit raised nothing.</p>
{{end}}{{end}}{{range .Lead}}<p class="lead">{{.}}</p>
{{end}}
{{if .HasAudit}}<section id="headline">
<h2>How follow-on editing changed</h2>
{{if .Headline}}<table class="headline">
<thead><tr><th>Layer</th><th class="n">Relative effect ({{.Estimator}})</th><th class="n">95% interval</th><th>Pre-import test</th></tr></thead>
<tbody>{{range .Headline}}
<tr><td>{{.Layer}}</td><td class="n">{{.Effect}}</td><td class="n">{{.Interval}}</td><td>{{.PreTrend}}</td></tr>{{end}}
</tbody>
</table>
<ul>{{range .Headline}}
<li><strong>{{.Layer}}</strong>: {{.Reading}}</li>{{end}}
</ul>
{{else}}<p>No layer had a headline estimate; see the warnings and the table of all estimates.</p>
{{end}}</section>
<section id="charts">
<h2>Charts</h2>
<div class="charts">
{{range .Charts}}<figure id="chart-{{.Name}}">
{{.SVG}}<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</div>
</section>
<section id="glossary">
<h2>What the numbers mean</h2>
<dl class="glossary">{{range .Glossary}}
<dt>{{.Name}}</dt><dd>{{.Text}}</dd>{{end}}
</dl>
</section>
<section id="areas">
<h2>Areas compared</h2>
{{range .Areas}}<p>{{.}}</p>
{{end}}{{if .Balance}}<table>
<thead><tr><th>Trait</th><th>Mean, import areas</th><th>Mean, comparison</th><th>Difference before</th><th>Difference after</th><th>After matching</th></tr></thead>
<tbody>{{range .Balance}}
<tr><td>{{.Covariate}}</td><td class="n">{{.Treated}}</td><td class="n">{{.Control}}</td><td class="n">{{.Before}}</td><td class="n">{{.After}}</td><td>{{.Flag}}</td></tr>{{end}}
</tbody>
</table>
<p class="muted">Differences are standardized mean differences: the gap between the group means in standard deviations. Within ±0.1 counts as alike.</p>
{{end}}</section>
{{end}}{{if .Robust}}<section id="robustness">
<h2>Robustness checks</h2>
<p>Other estimators measure the same change differently; each is compared with the headline ({{.Estimator}}).</p>
<table>
<thead><tr><th>Layer</th><th>Check</th><th class="n">Headline</th><th class="n">Check's estimate</th><th>Verdict</th><th>Why they can differ</th></tr></thead>
<tbody>{{range .Robust}}
<tr><td>{{.Layer}}</td><td>{{.Estimator}}</td><td class="n">{{.Headline}}</td><td class="n">{{.Check}}</td><td>{{.Verdict}}</td><td>{{.Explanation}}</td></tr>{{end}}
</tbody>
</table>
</section>
{{end}}{{if .Estimates}}<section id="estimates">
<h2>All estimates</h2>
<table>
<thead><tr><th>Outcome</th><th>Estimator</th><th>Effect</th><th>95% interval</th><th>ATT per area-month</th><th>p</th><th>Pre-import p</th><th>Method</th><th>Areas import/comparison</th></tr></thead>
<tbody>{{range .Estimates}}
<tr><td>{{.Outcome}}</td><td>{{.Estimator}}</td><td class="n">{{.Effect}}</td><td class="n">{{.Interval}}</td><td class="n">{{.ATT}}</td><td class="n">{{.P}}</td><td class="n">{{.PreTrend}}</td><td>{{.Method}}</td><td class="n">{{.Units}}</td></tr>{{end}}
</tbody>
</table>
{{if .Placebo}}<h3>Placebo</h3>
<p class="muted">Start dates moved back into the time before the import: an effect here signals anticipation or diverging trends.</p>
<table>
<thead><tr><th>Outcome</th><th>Shift</th><th>ATT</th><th>95% interval</th><th>p</th></tr></thead>
<tbody>{{range .Placebo}}
<tr><td>{{.Outcome}}</td><td>{{.Shift}}</td><td class="n">{{.ATT}}</td><td class="n">{{.Interval}}</td><td class="n">{{.P}}</td></tr>{{end}}
</tbody>
</table>
{{end}}</section>
{{end}}{{.Retention}}{{with .Checklist}}<section id="checklist">
<h2>Neglected tags</h2>
<p>Imported features compared with {{.Reference}}. Each row is a key the imported features carry markedly less often.</p>
{{if .Rows}}<table>
<thead><tr><th>Key</th><th>Class</th><th>Imported with key</th><th>Reference with key</th><th>Difference, points (95% interval)</th><th>q</th><th>Imported features without it</th></tr></thead>
<tbody>{{range .Rows}}
<tr><td>{{.Key}}</td><td>{{.Class}}</td><td class="n">{{pct .ImportShare}} of {{.ImportTotal}}</td><td class="n">{{pct .ReferenceShare}} of {{.ReferenceTotal}}</td><td class="n">{{pp .Difference}} ({{pp (index .CI95 0)}} to {{pp (index .CI95 1)}})</td><td class="n">{{g2 .QValue}}</td><td class="n">{{.Affected}}</td></tr>{{end}}
</tbody>
</table>
{{else}}<p>No key was flagged.</p>
{{end}}{{range .Notes}}<p class="muted">Note: {{.}}</p>
{{end}}<ul>{{range .Cautions}}
<li>{{.}}</li>{{end}}
</ul>
</section>
{{end}}{{with .Assessment}}<section id="assessment">
<h2>Proposed import: {{.Proposal}}</h2>
<p>{{.Features}} proposed features, needing at least {{.Changesets}} changeset(s) at the API limit of 10,000 changes each. They reach {{.Footprint}} areas, {{.Treated}} of which they would make import areas; {{.Duplicates}} proposed features have an existing feature of the same class within {{f2 .Distance}} m (likely duplicates to check).</p>
{{if .Nearest}}<h3>Most similar past imports</h3>
<p class="muted">Distance compares the mix of feature classes and how completely keys are filled in: 0 is the same profile, 1 nothing in common.</p>
<ul>{{range .Nearest}}
<li>{{.Episode.ID}}: distance {{f2 .Distance}} ({{.Features}} features created)</li>{{end}}
</ul>
{{end}}{{if .Expected}}<h3>What followed those imports</h3>
<table>
<thead><tr><th>Layer</th><th>Estimator</th><th>Range of 95% intervals</th><th>Past imports</th></tr></thead>
<tbody>{{range .Expected}}
<tr><td>{{.Layer}}</td><td>{{.Estimator}}</td><td class="n">{{rng .}}</td><td>{{range $i, $x := .Imports}}{{if $i}}, {{end}}{{$x}}{{end}}</td></tr>{{end}}
</tbody>
</table>
{{end}}{{if .Lacking}}<h3>Keys similar imports neglected that the proposal also lacks</h3>
<table>
<thead><tr><th>Key</th><th>Class</th><th>Proposal</th><th>Past import</th><th>Organic reference</th></tr></thead>
<tbody>{{range .Lacking}}
<tr><td>{{.Key}}</td><td>{{.Class}}</td><td class="n">{{pct .ProposalShare}}</td><td class="n">{{pct .PastShare}} ({{.Import}})</td><td class="n">{{pct .ReferenceShare}}</td></tr>{{end}}
</tbody>
</table>
{{end}}{{range .Notes}}<p class="muted">Note: {{.}}</p>
{{end}}<h3>Before any upload</h3>
<ul>{{range .Cautions}}
<li>{{.}}</li>{{end}}
</ul>
</section>
{{end}}{{if not .HasAudit}}{{if .Glossary}}<section id="glossary">
<h2>What the numbers mean</h2>
<dl class="glossary">{{range .Glossary}}
<dt>{{.Name}}</dt><dd>{{.Text}}</dd>{{end}}
</dl>
</section>
{{end}}{{end}}{{if .Notes}}<section id="notes">
<h2>Notes</h2>
<ul>{{range .Notes}}
<li>{{.}}</li>{{end}}
</ul>
</section>
{{end}}{{template "provenance" .Provenance}}{{template "cautions" .Cautions}}</main>
</body>
</html>
`))

// WriteHTML writes the report as one self-contained HTML page: inline CSS and
// inline SVG charts, no scripts, no fonts, images or links that load
// anything.
func WriteHTML(w io.Writer, in Input) error {
	charts, err := MakeCharts(in)
	if err != nil {
		return err
	}
	return writeHTML(w, in, charts)
}

func writeHTML(w io.Writer, in Input, charts []Chart) error {
	if err := in.check(); err != nil {
		return err
	}
	pg := htmlPage{view: newView(in)}
	if p := in.provenance(); p != nil {
		pg.Invented, pg.Provenance = p.Invented, provenanceRows(p)
	}
	for _, c := range charts {
		pg.Charts = append(pg.Charts, htmlChart{Name: c.Name, Caption: c.Caption, SVG: template.HTML(c.SVG)})
	}
	if in.Audit != nil {
		var err error
		if pg.Retention, err = retentionHTML(newRetentionView(in.Audit.Retention)); err != nil {
			return err
		}
	}
	if in.Checklist != nil {
		pg.Checklist = newHTMLChecklist(in.Checklist)
	}
	if in.Assessment != nil {
		pg.Assessment = newHTMLAssessment(in.Assessment)
	}
	return page.Execute(w, pg)
}

// newHTMLChecklist picks the checklist's reference and its flagged rows, as
// the HTML and wiki pages show them.
func newHTMLChecklist(cl *checklist.Checklist) *htmlChecklist {
	hc := &htmlChecklist{Notes: cl.Notes, Cautions: cl.Cautions}
	for _, ref := range []string{checklist.RefMatchedControls, checklist.RefWithoutProvenance, checklist.RefTreatedBefore} {
		if rows := cl.Neglected(ref); len(rows) > 0 || hasRef(cl, ref) {
			hc.Reference, hc.Rows = refWords(ref), rows
			break
		}
	}
	if hc.Reference == "" {
		hc.Reference = "no reference (no class had enough reference features)"
	}
	return hc
}

// newHTMLAssessment is the assessment as the HTML and wiki pages show it.
func newHTMLAssessment(a *proposal.Assessment) *htmlAssessment {
	ha := &htmlAssessment{Proposal: a.Proposal, Features: a.Profile.Features, Changesets: a.Profile.Changesets,
		Footprint: len(a.Footprint), Duplicates: a.DuplicateCount, Distance: a.Distance, Nearest: a.Nearest,
		Expected: a.Expected, Lacking: a.Lacking, Notes: a.Notes, Cautions: a.Cautions}
	for _, f := range a.Footprint {
		if f.Treated {
			ha.Treated++
		}
	}
	return ha
}

// splitWarnings puts the warnings about outcomes finer than the four layers
// (those starting "OUTCOME: " for an outcome that is not a layer) apart.
func splitWarnings(ws []string, effects []did.Effect) (main, other []string) {
	finer := map[string]bool{}
	for _, e := range effects {
		if _, ok := layers.ParseLayer(e.Layer); !ok {
			finer[e.Layer] = true
		}
	}
	for _, w := range ws {
		head, _, ok := strings.Cut(w, ": ")
		if ok && (finer[head] || strings.HasPrefix(head, study.FamilyPrefix)) {
			other = append(other, w)
		} else {
			main = append(main, w)
		}
	}
	return main, other
}

func hasRef(cl *checklist.Checklist, ref string) bool {
	for _, r := range cl.Rows {
		if r.Reference == ref {
			return true
		}
	}
	return false
}

func refWords(ref string) string {
	switch ref {
	case checklist.RefMatchedControls:
		return "organically mapped features of the same class in the matched comparison areas"
	case checklist.RefTreatedBefore:
		return "organically mapped features of the same class in the import areas before the import"
	case checklist.RefWithoutProvenance:
		return "features of the same class without the provenance tag"
	}
	return ref
}
