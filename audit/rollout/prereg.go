package rollout

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"strings"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/markdown"
	"github.com/loadwake/loadwake/audit/power"
)

// docWriter writes the pre-registration in one of two markups. text escapes
// text from OSM data; the rest is loadwake's own wording.
type docWriter struct {
	w       *bufio.Writer
	wiki    bool
	heading func(level int, s string)
	text    func(s string) string
}

// WritePreregistration writes the pre-registration in Markdown.
func (pl *Plan) WritePreregistration(w io.Writer) error {
	bw := bufio.NewWriter(w)
	d := &docWriter{w: bw, text: markdown.Escape, heading: func(level int, s string) {
		fmt.Fprintf(bw, "\n%s %s\n\n", strings.Repeat("#", level), s)
	}}
	pl.writeDoc(d)
	return bw.Flush()
}

// WritePreregistrationWiki writes the pre-registration in MediaWiki markup,
// for the proposal's page on the OSM wiki; text from OSM data is wrapped in
// nowiki.
func (pl *Plan) WritePreregistrationWiki(w io.Writer) error {
	bw := bufio.NewWriter(w)
	d := &docWriter{w: bw, wiki: true, text: nowiki, heading: func(level int, s string) {
		eq := strings.Repeat("=", level)
		fmt.Fprintf(bw, "\n%s %s %s\n\n", eq, s, eq)
	}}
	pl.writeDoc(d)
	return bw.Flush()
}

// nowiki makes s inert MediaWiki text: markup characters become entities
// inside a nowiki element, so no value can close it or open a link,
// template or table.
func nowiki(s string) string {
	if s == "" {
		return ""
	}
	r := strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", "\n", " ", "\r", " ")
	return "<nowiki>" + r.Replace(s) + "</nowiki>"
}

func (d *docWriter) para(format string, args ...any) {
	fmt.Fprintf(d.w, format+"\n\n", args...)
}

func (d *docWriter) list(items []string) {
	for _, it := range items {
		fmt.Fprintf(d.w, "* %s\n", it)
	}
	d.w.WriteString("\n")
}

// table writes a table; cells are already escaped.
func (d *docWriter) table(head []string, rows [][]string) {
	if d.wiki {
		d.w.WriteString("{| class=\"wikitable\"\n! " + strings.Join(head, " !! ") + "\n")
		for _, r := range rows {
			d.w.WriteString("|-\n| " + strings.Join(r, " || ") + "\n")
		}
		d.w.WriteString("|}\n\n")
		return
	}
	d.w.WriteString("| " + strings.Join(head, " | ") + " |\n|")
	for range head {
		d.w.WriteString("---|")
	}
	d.w.WriteString("\n")
	for _, r := range rows {
		d.w.WriteString("| " + strings.Join(r, " | ") + " |\n")
	}
	d.w.WriteString("\n")
}

func (d *docWriter) bold(s string) string {
	if d.wiki {
		return "'''" + s + "'''"
	}
	return "**" + s + "**"
}

func pct(v float64) string { return fmt.Sprintf("%+.0f%%", 100*v) }

func (pl *Plan) writeDoc(d *docWriter) {
	title := "Pre-registration: staggered rollout of " + d.text(pl.Proposal)
	if d.wiki {
		fmt.Fprintf(d.w, "= %s =\n\n", title)
	} else {
		fmt.Fprintf(d.w, "# %s\n\n", title)
	}
	d.para("%s %s", d.bold("Before anything else:"), "this document proposes how an import would be loaded and evaluated; it is for the community's review and changes nothing by itself. Community approval, the import guidelines and local review come first, and this plan never replaces them.")
	d.heading(2, "Question")
	d.para("Does loading this import change how much mappers edit the areas it reaches afterwards? The primary outcome is %s follow-on editing: edits of that layer per area and month, leaving out the import's own changesets and accounts and every other import's. The other layers (geometry, attribute, new_feature, deletion) are secondary outcomes, reported but not decided on.",
		d.bold(pl.Outcome))
	d.heading(2, "Units and waves")
	d.para("The proposal's %d features (%d changes) fall in %d areas of %s. The areas were dealt to %d waves at random, stratified by their past activity (%s to %s): areas of like activity were spread over the waves. Waves start %d months apart from %s; the last wave is held back until the evaluation in %s and is the comparison: until then its areas are not yet treated, and the random order makes them a fair comparison.",
		pl.Features, pl.Changes, len(pl.Units), d.text(pl.UnitSpec), pl.Waves, pl.HistoryStart, pl.HistoryEnd, pl.MonthsBetween, pl.Start, pl.Evaluation)
	var rows [][]string
	for _, w := range pl.WaveList {
		role := "treated"
		if w.Comparison {
			role = "comparison until the evaluation"
		}
		rows = append(rows, []string{fmt.Sprint(w.Wave), w.Start, role, fmt.Sprint(w.Units), fmt.Sprint(w.Features), fmt.Sprint(w.Changes),
			fmt.Sprint(w.Changesets), fmt.Sprintf("%.1f", w.MeanActivity), fmt.Sprintf("%+.2f", w.SMD)})
	}
	d.table([]string{"wave", "start", "role", "areas", "features", "changes", "changesets", "past edits per month", "balance (SMD)"}, rows)
	d.para("Balance is the standardized mean difference of log(1 + past edits per month) between a wave and the other waves; within ±0.25 counts as alike for a randomized design with few areas (common practice).")
	for _, w := range pl.WaveList {
		var names []string
		for _, u := range pl.Units {
			if u.Wave == w.Wave {
				s := d.text(u.ID)
				if u.Name != "" {
					s += " (" + d.text(u.Name) + ")"
				}
				names = append(names, s)
			}
		}
		d.para("Wave %d (%s): %s.", w.Wave, w.Start, strings.Join(names, ", "))
	}
	d.heading(2, "Randomization and seed")
	d.para("Procedure %s with seed %s: within each block (sorted), areas are ordered by past edits per month and cut into strata of %d; each stratum gets a random permutation of the waves (the last, smaller stratum a random set of distinct waves), from the PCG random number generator seeded with the seed. Anyone can draw the same plan again with `loadwake plan` and the same proposal, units, history and seed; the evaluation re-draws assignments with this procedure for its randomization p-value.",
		d.text(pl.Procedure), d.bold(fmt.Sprint(pl.Seed)), pl.Waves)
	d.heading(2, "Estimator and inference")
	d.para("The evaluation runs `loadwake audit --plan` in %s: %s, the audit's headline estimator (a Poisson regression stacked by wave, with area and month fixed effects), compares each treated wave with the areas not yet treated, using %d months before each wave. Its interval and p-value come from the audit's own inference (the score bootstrap with the null imposed, or a randomization test when the treated areas are too few), and a randomization-inference p-value re-draws the wave assignment with the procedure above. The level is %.0f%%, two-sided.",
		pl.Evaluation, did.Headline, pl.Before, 100*pl.Alpha)
	pl.writePower(d)
	d.heading(2, "Decision rule and interim looks")
	d.para("Between waves the community may look at the accumulating evidence on the primary outcome without raising false alarms: a look counts only when the headline's standardized estimate (b / se, b the log ratio) crosses the boundary below, which spends the %.0f%% level over the looks like O'Brien and Fleming's boundaries (Lan–DeMets spending). Information is counted in treated area-months.", 100*pl.Alpha)
	rows = rows[:0]
	for _, l := range pl.Looks {
		b := "∞"
		if !math.IsInf(l.Boundary, 0) {
			b = fmt.Sprintf("%.3f", l.Boundary)
		}
		rows = append(rows, []string{l.Month, fmt.Sprintf("%.2f", l.Fraction), fmt.Sprintf("%.4f", l.Spent), b, fmt.Sprintf("%.4f", l.NominalP)})
	}
	d.table([]string{"look", "information", "level spent", "|z| boundary", "nominal p"}, rows)
	d.para("%s if %s follow-on editing in the loaded areas has fallen by more than %.0f%% against the comparison (estimate below %s) and the look's z-statistic is below minus the boundary, the remaining waves pause until the community has discussed the finding. A rise or a smaller fall does not stop the rollout; the final evaluation reports every layer either way. (The threshold of %.0f%% is this plan's default; the community sets its own before the first wave.)",
		d.bold("Decision rule:"), pl.Outcome, 100*pl.Pause, pct(-pl.Pause), 100*pl.Pause)
	d.heading(2, "Cautions")
	d.list(pl.Cautions)
	d.para("Import guidelines: document the import on the wiki, check that the data's licence is compatible with the ODbL, discuss it with the local community and the imports mailing list, upload from a dedicated account, plan conflation with existing data and the handling of duplicates, and have each wave's files reviewed locally before upload.")
	if len(pl.Notes) > 0 {
		d.heading(2, "Notes")
		d.list(pl.Notes)
	}
}

// writePower writes the minimum detectable effects.
func (pl *Plan) writePower(d *docWriter) {
	d.heading(2, "Minimum detectable effects")
	r := pl.Power
	if r == nil {
		d.para("Power was not simulated for this plan: no minimum detectable effects are stated.")
		return
	}
	d.para("Each figure is the smallest change the evaluation would detect in %.0f%% of evaluations at the %.0f%% level, from %d simulated evaluations per design: past activity of these areas fitted per layer (level, seasonality, trend, over-dispersion), effects planted, and each simulated panel estimated with %s and its inference. Monte Carlo error: up to ±%.0f points of power per simulated effect (Wilson intervals in the plan's JSON); the figures are interpolated between simulated effects. \"not reached\" means no simulated change up to %s / %s reached the target.",
		100*r.Target, 100*r.Alpha, r.Worlds, did.Headline, 100*1.96*r.MCError, pct(minEffect(r)), pct(maxEffect(r)))
	var rows [][]string
	for _, c := range r.Curves {
		size := "–"
		for _, p := range c.Points {
			if p.Effect == 0 {
				size = fmt.Sprintf("%.0f%%", 100*p.Power)
			}
		}
		rows = append(rows, []string{d.text(c.Design), c.Layer, mdeText(c.MDEFall), mdeText(c.MDERise), size})
	}
	d.table([]string{"design", "layer", "smallest detectable fall", "smallest detectable rise", "false alarms at no effect"}, rows)
	for _, c := range r.Curves {
		if c.Design == r.Designs[0].Name && c.Layer == pl.Outcome {
			if c.MDEFall == nil || -*c.MDEFall > pl.Pause {
				d.para("%s the plan cannot reliably detect a fall of %.0f%% in %s editing, the decision rule's threshold; more areas, more waves or a longer follow-up (above) would help, or the community may accept a weaker check.",
					d.bold("Note:"), 100*pl.Pause, pl.Outcome)
			}
		}
	}
}

func minEffect(r *power.Result) float64 {
	m := 0.0
	for _, c := range r.Curves {
		for _, p := range c.Points {
			m = math.Min(m, p.Effect)
		}
	}
	return m
}

func maxEffect(r *power.Result) float64 {
	m := 0.0
	for _, c := range r.Curves {
		for _, p := range c.Points {
			m = math.Max(m, p.Effect)
		}
	}
	return m
}
