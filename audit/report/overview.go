package report

import (
	"bytes"
	"cmp"
	"encoding/csv"
	"fmt"
	"html/template"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/markdown"
	"github.com/loadwake/loadwake/layers"
)

// The files WriteOverview creates, by name.
const (
	FileOverviewHTML     = "overview.html"
	FileOverviewMarkdown = "overview.md"
	FileOverviewCSV      = "overview.csv"
	FileOverviewJSON     = "overview.json"
)

// OverviewFiles returns the names of the files WriteOverview creates, in
// writing order.
func OverviewFiles() []string {
	return []string{FileOverviewMarkdown, FileOverviewHTML, FileOverviewCSV, FileOverviewJSON}
}

// WriteOverview creates dir if needed and writes the overview of all imports
// into it as overview.md, overview.html, overview.csv and overview.json, each
// through a temporary file.
func WriteOverview(dir string, ov *audit.Overview) error {
	if ov == nil {
		return fmt.Errorf("%w: no overview", ErrInput)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	writers := map[string]func(io.Writer) error{
		FileOverviewMarkdown: func(w io.Writer) error { return WriteOverviewMarkdown(w, ov) },
		FileOverviewHTML:     func(w io.Writer) error { return WriteOverviewHTML(w, ov) },
		FileOverviewCSV:      func(w io.Writer) error { return WriteOverviewCSV(w, ov) },
		FileOverviewJSON:     ov.WriteJSON,
	}
	for _, name := range OverviewFiles() {
		if err := writeAtomic(filepath.Join(dir, name), writers[name]); err != nil {
			return err
		}
	}
	return nil
}

// overviewCell is one layer's effect as the tables show it.
type overviewCell struct {
	Effect   string  // "-27%", or "" when not estimated
	Interval string  // "-35% to -17%", "no reliable interval (p = 0.41)", or why there is none
	Reading  string  // "fewer", "more", "no clear change", "not estimated"
	Sort     float64 // the relative effect (NaN when none)
	Flag     bool    // the interval excludes zero
}

func newOverviewCell(r *audit.OverviewRow, layer string) overviewCell {
	e, ok := r.Effect(layer)
	if !ok {
		c := overviewCell{Reading: "not estimated", Sort: math.NaN()}
		if r.Error != "" {
			c.Reading = "not audited"
		}
		return c
	}
	c := overviewCell{Sort: math.NaN()}
	if e.RelativeEffect != nil {
		c.Effect, c.Sort = wholePct(*e.RelativeEffect), *e.RelativeEffect
		c.Interval = wholePct(e.CI95[0]) + " to " + wholePct(e.CI95[1])
	} else {
		c.Effect, c.Sort = fmt.Sprintf("%+.2f/month", e.ATT), e.ATT
		c.Interval = fmt.Sprintf("%+.2f to %+.2f", e.CI95[0], e.CI95[1])
	}
	switch {
	case e.NoInterval:
		c.Interval = "no reliable interval (randomization p = " + pval(e.PValue) + ")"
		c.Reading, c.Flag = "too few import areas to tell", false
	case e.CI95[0] > 0:
		c.Reading, c.Flag = "more", true
	case e.CI95[1] < 0:
		c.Reading, c.Flag = "fewer", true
	default:
		c.Reading = "no clear change"
	}
	if e.PreTrendFailed {
		c.Reading += "; areas already differed before"
	}
	return c
}

// wholePct formats a share as a signed whole percentage, "0%" when it rounds
// to zero (never "-0%").
func wholePct(x float64) string {
	v := math.Round(100 * x)
	if v == 0 {
		return "0%"
	}
	return fmt.Sprintf("%+.0f%%", v)
}

// overviewLine is one import as the Markdown, HTML and CSV tables show it.
type overviewLine struct {
	Row      *audit.OverviewRow
	Accounts string
	Months   string // when the import ran
	Compared string // the months the panel covers
	Areas    string // "8 import areas: Dunmore, ..." or the reason it was not audited
	Size     int    // versions the import made
	SizeText string
	Cells    []overviewCell // per layer, in layers.Layers order
	Keys     []string       // "building:levels on building=*: 12% vs 63%"
	NoKeys   string         // what the keys column says when Keys is empty
	Order    template.CSS   // the sort ranks, as CSS custom properties
}

// maxAreaNames is how many import areas a row names; the JSON has all.
const maxAreaNames = 5

func newOverviewLines(ov *audit.Overview) []overviewLine {
	out := make([]overviewLine, len(ov.Imports))
	for i := range ov.Imports {
		r := &ov.Imports[i]
		l := overviewLine{Row: r, Accounts: joinOr(r.Accounts, "no named account"), Months: r.FirstMonth + " to " + r.LastMonth,
			Size: r.Created + r.Modified + r.Deleted}
		if r.Window[0] != "" {
			l.Compared = "compared " + r.Window[0] + " to " + r.Window[1]
		}
		l.SizeText = fmt.Sprintf("%d changesets: %d created, %d modified, %d deleted", r.Changesets, r.Created, r.Modified, r.Deleted)
		switch {
		case r.Error != "":
			l.Areas = "not audited: " + r.Error
		default:
			names := r.ImportAreaNames[:min(maxAreaNames, len(r.ImportAreaNames))]
			l.Areas = fmt.Sprintf("%d import areas, %d comparison areas", len(r.ImportAreas), r.ComparisonAreas)
			if len(names) > 0 {
				l.Areas += ": " + strings.Join(names, ", ")
				if len(r.ImportAreaNames) > len(names) {
					l.Areas += fmt.Sprintf(" and %d more", len(r.ImportAreaNames)-len(names))
				}
			}
		}
		for _, ly := range layers.Layers {
			l.Cells = append(l.Cells, newOverviewCell(r, ly.String()))
		}
		l.NoKeys = "none flagged"
		if r.Error != "" {
			l.NoKeys = "not audited"
		}
		for _, k := range r.TopKeys {
			l.Keys = append(l.Keys, fmt.Sprintf("%s on %s: %.0f%% vs %.0f%%", k.Key, k.Class, 100*k.ImportShare, 100*k.ReferenceShare))
		}
		out[i] = l
	}
	setSortOrder(out)
	return out
}

// overviewSort is a sortable column of the HTML table: the key it sorts by
// (NaN: no value, placed last both ways).
type overviewSort struct {
	Name string
	Key  func(l *overviewLine) float64
}

// overviewSorts are the sortable columns, in the table's order.
func overviewSorts() []overviewSort {
	return []overviewSort{
		{"import", func(l *overviewLine) float64 { return monthNumber(l.Row.FirstMonth) }},
		{"areas", func(l *overviewLine) float64 {
			if l.Row.Error != "" {
				return math.NaN()
			}
			return float64(len(l.Row.ImportAreas))
		}},
		{"size", func(l *overviewLine) float64 { return float64(l.Size) }},
		{"geometry", func(l *overviewLine) float64 { return l.Cells[0].Sort }},
		{"attribute", func(l *overviewLine) float64 { return l.Cells[1].Sort }},
		{"new_feature", func(l *overviewLine) float64 { return l.Cells[2].Sort }},
		{"deletion", func(l *overviewLine) float64 { return l.Cells[3].Sort }},
		{"keys", func(l *overviewLine) float64 {
			var n int
			for _, k := range l.Row.TopKeys {
				n = max(n, k.Affected)
			}
			return float64(n)
		}},
		{"warnings", func(l *overviewLine) float64 { return float64(len(l.Row.Warnings)) }},
	}
}

// monthNumber turns YYYY-MM into a number that sorts by time; NaN when it
// does not parse.
func monthNumber(m string) float64 {
	y, mo, ok := strings.Cut(m, "-")
	yi, err1 := strconv.Atoi(y)
	mi, err2 := strconv.Atoi(mo)
	if !ok || err1 != nil || err2 != nil {
		return math.NaN()
	}
	return float64(12*yi + mi)
}

// setSortOrder gives each line its rank under every sortable column, upward
// (--aK) and downward (--dK), rows without a value last both ways, ties in
// table order. The page's CSS turns a chosen rank into the grid order, so
// the table sorts without any script.
func setSortOrder(lines []overviewLine) {
	ranks := make([][]int, len(lines))
	for i := range ranks {
		ranks[i] = make([]int, 2*len(overviewSorts()))
	}
	idx := make([]int, len(lines))
	for k, s := range overviewSorts() {
		for dir := range 2 {
			for i := range idx {
				idx[i] = i
			}
			slices.SortStableFunc(idx, func(a, b int) int {
				x, y := s.Key(&lines[a]), s.Key(&lines[b])
				switch xn, yn := math.IsNaN(x), math.IsNaN(y); {
				case xn && yn:
					return 0
				case xn:
					return 1
				case yn:
					return -1
				}
				if dir == 1 {
					return cmp.Compare(y, x)
				}
				return cmp.Compare(x, y)
			})
			for pos, i := range idx {
				ranks[i][2*k+dir] = pos + 1
			}
		}
	}
	for i := range lines {
		var b strings.Builder
		for k := range overviewSorts() {
			fmt.Fprintf(&b, "--a%d:%d;--d%d:%d;", k, ranks[i][2*k], k, ranks[i][2*k+1])
		}
		lines[i].Order = template.CSS(b.String())
	}
}

// overviewGlossary explains the overview's columns in plain words.
func overviewGlossary(ov *audit.Overview) []term {
	return []term{
		{"Import area", "A unit where the import's objects made up at least the chosen share (the intensity threshold) of the features present when it arrived."},
		{"Comparison areas", "Untouched units matched to the import areas on their editing before the import; they show what the import areas would likely have seen without it."},
		{"Effect per layer", "How much more (+) or less (-) follow-on editing of that kind the import areas saw than expected from their comparison areas, as a share, from " + ov.Estimator + " (a Poisson model of monthly edit counts with area and month effects). Layers: geometry (moving or reshaping features), attribute (changing tags), new_feature (newly mapped features), deletion (deleted features)."},
		{"95% interval", "The range of effects the data support. 'No clear change' means the interval includes zero."},
		{"Neglected keys", "Tags the imported features carry markedly less often than comparable features mapped by hand (false discovery rate q below 0.05, Benjamini–Hochberg), with the share of imported and of comparable features carrying them."},
		{"Warnings", "Checks that cast doubt on an import's figures (for example import and comparison areas already differing before the import); read them in that import's own report (loadwake report --import ID)."},
	}
}

var overviewPage = template.Must(template.Must(template.New("overview").Funcs(pageFuncs).Parse(sharedTemplates)).Parse(`{{template "head" .Title}}
main { max-width: 80rem; }
.sorter { position: absolute; opacity: 0; width: 1px; height: 1px; }
.ov { overflow-x: auto; }
.ov table { display: grid; grid-template-columns: repeat({{.Columns}}, minmax(6.5rem, auto)); }
.ov thead, .ov tbody, .ov tr { display: contents; }
.ov td { order: var(--o, 0); }
.ov th { order: 0; }
.ov th label { display: inline-block; min-width: 1.6rem; text-align: center; border: 1px solid var(--rule); border-radius: 3px; margin: .15rem .1rem 0 0; cursor: pointer; font-weight: 400; background: #fff; }
.ov td small { display: block; color: var(--muted); white-space: normal; }
.ov td.clear { background: #eaf3fa; }
.ov td ul { margin: 0; padding-left: 1rem; }
{{range $k, $s := .Sorts}}#s{{$k}}a:checked ~ .ov tbody tr { --o: var(--a{{$k}}); }
#s{{$k}}d:checked ~ .ov tbody tr { --o: var(--d{{$k}}); }
#s{{$k}}a:checked ~ .ov label[for="s{{$k}}a"], #s{{$k}}d:checked ~ .ov label[for="s{{$k}}d"] { background: var(--calm); color: #fff; border-color: var(--calm); }
#s{{$k}}a:focus-visible ~ .ov label[for="s{{$k}}a"], #s{{$k}}d:focus-visible ~ .ov label[for="s{{$k}}d"] { outline: 3px solid var(--warn); }
{{end}}</style>
</head>
<body>
<main>
<h1>{{.Title}}</h1>
{{if .Invented}}<p class="invented" role="note"><strong>{{inventedBanner}}</strong></p>
{{end}}<p class="lead">{{.Lead}}</p>
<p class="muted">Sort with the ▲ (smallest first) and ▼ (largest first) buttons in each heading; imports without a figure stay last. Terms are explained below the table.</p>
<section id="overview">
{{range $k, $s := .Sorts}}<input type="radio" class="sorter" name="sort" id="s{{$k}}a" aria-label="sort by {{$s.Name}}, smallest first"{{if eq $k 0}} checked{{end}}>
<input type="radio" class="sorter" name="sort" id="s{{$k}}d" aria-label="sort by {{$s.Name}}, largest first">
{{end}}<div class="ov">
<table>
<thead><tr>{{range $k, $h := .Headers}}<th>{{$h}}<br><label for="s{{$k}}a" title="smallest first">▲</label><label for="s{{$k}}d" title="largest first">▼</label></th>{{end}}</tr></thead>
<tbody>{{range .Lines}}
<tr style="{{.Order}}"><td><strong>{{.Row.Import}}</strong><small>{{.Accounts}}</small><small>{{.Months}}</small>{{if .Compared}}<small>{{.Compared}}</small>{{end}}</td><td>{{.Areas}}</td><td class="n">{{.Size}}<small>{{.SizeText}}</small></td>{{range .Cells}}<td class="n{{if .Flag}} clear{{end}}">{{if .Effect}}{{.Effect}}<small>{{.Interval}}</small>{{end}}<small>{{.Reading}}</small></td>{{end}}<td>{{if .Keys}}<ul>{{range .Keys}}<li>{{.}}</li>{{end}}</ul>{{else}}{{.NoKeys}}{{end}}</td><td class="n">{{len .Row.Warnings}}</td></tr>{{end}}
</tbody>
</table>
</div>
</section>
<section id="glossary">
<h2>What the columns mean</h2>
<dl class="glossary">{{range .Glossary}}
<dt>{{.Name}}</dt><dd>{{.Text}}</dd>{{end}}
</dl>
</section>
{{template "provenance" .Provenance}}{{template "cautions" .Cautions}}</main>
</body>
</html>
`))

// overviewHeaders returns the table's column headings, each sortable by the
// overviewSorts entry of the same index.
func overviewHeaders() []string {
	return []string{"Import", "Area", "Size (versions)", "Geometry", "Attribute", "New features", "Deletions", "Neglected keys", "Warnings"}
}

// overviewTitle heads the overview in every format.
const overviewTitle = "Follow-on editing after every import in the store"

// overviewLead is the sentence above the table.
func overviewLead(ov *audit.Overview) string {
	failed := 0
	for _, r := range ov.Imports {
		if r.Error != "" {
			failed++
		}
	}
	s := fmt.Sprintf("%s found in the store, each audited on its own over the units %s, in the months each row names (up to %d before and %d after the import, as far as the store's history reaches). Each layer's figure is how follow-on editing by other mappers changed in the areas the import reached, against matched areas it did not touch.",
		plural(len(ov.Imports), "import", "imports"), orDash(ov.Units), ov.Before, ov.After)
	switch {
	case failed == 1:
		s += " 1 could not be audited; its row says why."
	case failed > 1:
		s += fmt.Sprintf(" %d could not be audited; their rows say why.", failed)
	}
	return s
}

// plural is "1 import" or "N imports".
func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return fmt.Sprintf("%d %s", n, many)
}

// WriteOverviewHTML writes the overview as one self-contained HTML page whose
// table sorts by any column without scripts (radio buttons and CSS grid
// order).
func WriteOverviewHTML(w io.Writer, ov *audit.Overview) error {
	data := struct {
		Title      string
		Lead       string
		Invented   bool
		Columns    int
		Sorts      []struct{ Name string }
		Headers    []string
		Lines      []overviewLine
		Glossary   []term
		Provenance []provRow
		Cautions   []string
	}{Title: overviewTitle, Lead: overviewLead(ov), Columns: len(overviewHeaders()), Headers: overviewHeaders(),
		Lines: newOverviewLines(ov), Glossary: overviewGlossary(ov), Cautions: ov.Cautions}
	for _, s := range overviewSorts() {
		data.Sorts = append(data.Sorts, struct{ Name string }{s.Name})
	}
	if ov.Provenance != nil {
		data.Invented, data.Provenance = ov.Provenance.Invented, provenanceRows(ov.Provenance)
	}
	return overviewPage.Execute(w, data)
}

// WriteOverviewMarkdown writes the overview as a GitHub-flavoured Markdown
// table with the glossary, provenance and cautions.
func WriteOverviewMarkdown(w io.Writer, ov *audit.Overview) error {
	e := markdown.Escape
	var b bytes.Buffer
	fmt.Fprintf(&b, "# %s\n\n", overviewTitle)
	if ov.Provenance != nil && ov.Provenance.Invented {
		fmt.Fprintf(&b, "> **%s**\n\n", e(InventedBanner))
	}
	fmt.Fprintf(&b, "%s\n\n", e(overviewLead(ov)))
	b.WriteString("| " + strings.Join(overviewHeaders(), " | ") + " |\n|---|---|---:|---:|---:|---:|---:|---|---:|\n")
	for _, l := range newOverviewLines(ov) {
		imp := "**" + e(l.Row.Import) + "** " + e(l.Accounts) + ", " + e(l.Months)
		if l.Compared != "" {
			imp += " (" + e(l.Compared) + ")"
		}
		cells := []string{imp, e(l.Areas), strconv.Itoa(l.Size)}
		for _, c := range l.Cells {
			s := e(c.Reading)
			if c.Effect != "" {
				s = e(c.Effect) + " (" + e(c.Interval) + "), " + s
			}
			cells = append(cells, s)
		}
		keys := l.NoKeys
		if len(l.Keys) > 0 {
			ks := make([]string, len(l.Keys))
			for i, k := range l.Keys {
				ks[i] = e(k)
			}
			keys = strings.Join(ks, "; ")
		}
		cells = append(cells, keys, strconv.Itoa(len(l.Row.Warnings)))
		fmt.Fprintf(&b, "| %s |\n", strings.Join(cells, " | "))
	}
	b.WriteString("\n## What the columns mean\n\n")
	for _, t := range overviewGlossary(ov) {
		fmt.Fprintf(&b, "- **%s**: %s\n", e(t.Name), e(t.Text))
	}
	writeProvenanceMarkdown(&b, ov.Provenance)
	b.WriteString("\n## Cautions\n\n")
	for _, c := range ov.Cautions {
		fmt.Fprintf(&b, "- %s\n", e(c))
	}
	_, err := w.Write(b.Bytes())
	return err
}

// WriteOverviewCSV writes one row per import (RFC 4180). Text from
// OpenStreetMap data that a spreadsheet would read as a formula (starting
// with =, +, -, @, a tab or a carriage return) is prefixed with an
// apostrophe, as OWASP's guidance on CSV injection advises.
func WriteOverviewCSV(w io.Writer, ov *audit.Overview) error {
	cw := csv.NewWriter(w)
	head := []string{"import", "accounts", "first_month", "last_month", "changesets", "created", "modified", "deleted",
		"import_areas", "import_area_names", "comparison_areas"}
	for _, l := range layers.Layers {
		n := l.String()
		head = append(head, n+"_relative_effect", n+"_ci95_low", n+"_ci95_high", n+"_no_interval")
	}
	head = append(head, "neglected_keys", "warnings", "error")
	if err := cw.Write(head); err != nil {
		return err
	}
	f := func(x float64) string { return strconv.FormatFloat(x, 'g', 6, 64) }
	for _, l := range newOverviewLines(ov) {
		r := l.Row
		rec := []string{safeCell(r.Import), safeCell(strings.Join(r.Accounts, "; ")), r.FirstMonth, r.LastMonth,
			strconv.Itoa(r.Changesets), strconv.Itoa(r.Created), strconv.Itoa(r.Modified), strconv.Itoa(r.Deleted),
			strconv.Itoa(len(r.ImportAreas)), safeCell(strings.Join(r.ImportAreaNames, "; ")), strconv.Itoa(r.ComparisonAreas)}
		for _, ly := range layers.Layers {
			e, ok := r.Effect(ly.String())
			switch {
			case !ok || e.RelativeEffect == nil:
				rec = append(rec, "", "", "", "")
			default:
				rec = append(rec, f(*e.RelativeEffect), f(e.CI95[0]), f(e.CI95[1]), strconv.FormatBool(e.NoInterval))
			}
		}
		rec = append(rec, safeCell(strings.Join(l.Keys, "; ")), strconv.Itoa(len(r.Warnings)), safeCell(r.Error))
		if err := cw.Write(rec); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// safeCell defuses text a spreadsheet would run as a formula.
func safeCell(s string) string {
	if s != "" && strings.ContainsRune("=+-@\t\r", rune(s[0])) {
		return "'" + s
	}
	return s
}

func joinOr(s []string, none string) string {
	if len(s) == 0 {
		return none
	}
	return strings.Join(s, ", ")
}

// WriteOverviewText writes the overview as a short plain-text table for a
// terminal: one line per import with its areas and each layer's effect.
func WriteOverviewText(w io.Writer, ov *audit.Overview) error {
	var b bytes.Buffer
	fmt.Fprintf(&b, "every import audited over %s, effects from %s with 95%% intervals:\n", orDash(ov.Units), ov.Estimator)
	for _, l := range newOverviewLines(ov) {
		fmt.Fprintf(&b, "%s (%s, %s): ", l.Row.Import, l.Accounts, l.Months)
		if l.Row.Error != "" {
			fmt.Fprintf(&b, "not audited: %s\n", l.Row.Error)
			continue
		}
		fmt.Fprintf(&b, "%d import areas", len(l.Row.ImportAreas))
		for i, c := range l.Cells {
			if c.Effect != "" {
				fmt.Fprintf(&b, "; %s %s [%s]", layers.Layers[i], c.Effect, c.Interval)
			}
		}
		fmt.Fprintf(&b, "; %d neglected keys; %d warnings\n", len(l.Row.TopKeys), len(l.Row.Warnings))
	}
	_, err := w.Write(b.Bytes())
	return err
}
