package report

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/layers"
)

// view is the content of a report as plain text, before escaping: the
// Markdown and HTML writers render the same view.
type view struct {
	HasAudit  bool
	Estimator string // the headline estimator
	Title     string
	Lead      []string // sentences describing the import and the panel
	Answers   []answer // one plain sentence per layer, the first thing a reader sees
	Warnings  []string
	// TopWarnings are the first maxTopWarnings general and per-layer
	// warnings, shown on the first screen; MoreWarnings the rest, folded.
	TopWarnings  []string
	MoreWarnings []string
	Headline     []headline
	Glossary     []term
	Areas        []string
	Balance      []balanceRow
	Estimates    []estimateRow
	Robust       []robustRow
	Placebo      []placeboRow
	Notes        []string
	Cautions     []string
}

type headline struct {
	Layer, Effect, Interval, PreTrend, Reading string
}

type term struct{ Name, Text string }

// answer is one layer's result in a sentence: Label names the kind of edit
// in plain words, Layer is its name in the tables.
type answer struct{ Label, Layer, Text string }

// maxTopWarnings is how many warnings the first screen shows.
const maxTopWarnings = 3

// wholeAbs formats |x| as a whole percentage without a sign.
func wholeAbs(x float64) string { return fmt.Sprintf("%.0f%%", math.Abs(math.Round(100*x))) }

// rangeWords says where an interval of shares lies in words: "between 17%
// and 36% fewer", "between 7% fewer and 13% more".
func rangeWords(lo, hi float64) string {
	switch {
	case hi < 0:
		return "between " + wholeAbs(hi) + " and " + wholeAbs(lo) + " fewer"
	case lo > 0:
		return "between " + wholeAbs(lo) + " and " + wholeAbs(hi) + " more"
	}
	return "between " + wholeAbs(lo) + " fewer and " + wholeAbs(hi) + " more"
}

// Answer returns one plain sentence on a layer's headline effect, for the
// first screen of a report: the direction and size of the change against
// the comparison areas and the range the data support.
func Answer(e did.Effect) string {
	var s string
	switch {
	case e.RelativeEffect == nil:
		dir := "more"
		if e.ATT < 0 {
			dir = "fewer"
		}
		s = fmt.Sprintf("about %.2f %s per area and month than the comparison areas suggest (range %s to %s).", math.Abs(e.ATT), dir, num(e.CI95[0]), num(e.CI95[1]))
	case e.NoInterval:
		r := *e.RelativeEffect
		dir := "more"
		if r < 0 {
			dir = "fewer"
		}
		s = fmt.Sprintf("about %s %s than expected, but %d import area(s) are too few to give a range; re-dealing the import to other areas gives differences this large with p = %s.", wholeAbs(r), dir, e.TreatedUnits, pval(e.PValue))
	case e.CI95[0] > 0 || e.CI95[1] < 0:
		r := *e.RelativeEffect
		dir := "more"
		if r < 0 {
			dir = "fewer"
		}
		s = fmt.Sprintf("about %s %s than expected without the import (likely %s).", wholeAbs(r), dir, rangeWords(e.CI95[0], e.CI95[1]))
	default:
		s = fmt.Sprintf("no clear change (the data allow anything %s).", rangeWords(e.CI95[0], e.CI95[1]))
	}
	if e.PreTrendP != nil && *e.PreTrendP < 0.05 {
		s += " Doubtful: these areas were already changing differently before the import."
	}
	return s
}

type balanceRow struct {
	Covariate, Treated, Control, Before, After, Flag string
}

type estimateRow struct {
	Outcome, Estimator, Effect, Interval, ATT, P, PreTrend, Method, Units string
}

type robustRow struct {
	Layer, Estimator, Headline, Check, Verdict, Explanation string
}

type placeboRow struct {
	Outcome, Shift, ATT, Interval, P string
}

// pct formats a share as a signed percentage.
func pct(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "n/a"
	}
	return fmt.Sprintf("%+.1f%%", 100*x)
}

func num(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "n/a"
	}
	return fmt.Sprintf("%+.3f", x)
}

func pval(p float64) string {
	switch {
	case math.IsNaN(p):
		return "-"
	case p < 0.001:
		return "<0.001"
	}
	return fmt.Sprintf("%.3f", p)
}

func pptr(p *float64) string {
	if p == nil {
		return "-"
	}
	return pval(*p)
}

// headlineEstimator is the estimator each layer's headline is read from
// (did.Headline); the others are listed as checks.
const headlineEstimator = did.Headline

// Reading returns a plain-words reading of one effect for a non-statistician.
func Reading(e did.Effect) string {
	what := layerWords(e.Layer)
	var b strings.Builder
	if e.RelativeEffect != nil {
		r := *e.RelativeEffect
		dir := "more"
		if r < 0 {
			dir = "fewer"
		}
		fmt.Fprintf(&b, "Import areas saw about %.0f%% %s %s than they would have without the import, judged by the matched comparison areas", math.Abs(100*r), dir, what)
		if e.NoInterval {
			fmt.Fprintf(&b, ". With %d import area(s) no interval is reliable; a randomization test, which re-deals the import over the comparison areas, gives p = %s:", e.TreatedUnits, pval(e.PValue))
			if e.PValue < 0.05 {
				b.WriteString(" a change this large is rare when the import is dealt to other areas.")
			} else {
				b.WriteString(" changes this large are common when the import is dealt to other areas, so the data are compatible with no change at all.")
			}
			return b.String()
		}
		fmt.Fprintf(&b, " (95%% interval %s to %s).", pct(e.CI95[0]), pct(e.CI95[1]))
	} else {
		dir := "more"
		if e.ATT < 0 {
			dir = "fewer"
		}
		fmt.Fprintf(&b, "Import areas saw about %.2f %s %s per area and month than the comparison suggests (95%% interval %s to %s).", math.Abs(e.ATT), dir, what, num(e.CI95[0]), num(e.CI95[1]))
	}
	switch {
	case e.CI95[0] <= 0 && e.CI95[1] >= 0:
		b.WriteString(" The interval includes zero: the data are compatible with no change at all.")
	case e.CI95[1] < 0:
		b.WriteString(" The whole interval lies below zero: a drop is likely, though its size is uncertain.")
	default:
		b.WriteString(" The whole interval lies above zero: a rise is likely, though its size is uncertain.")
	}
	if e.PreTrendP != nil && *e.PreTrendP < 0.05 {
		fmt.Fprintf(&b, " Caution: the pre-import test failed (p = %s), so import areas were already moving differently before the import and this figure may not be due to it.", pval(*e.PreTrendP))
	}
	return b.String()
}

func effectText(e did.Effect) (effect, interval string) {
	if e.NoInterval && e.RelativeEffect != nil {
		return pct(*e.RelativeEffect), "none reliable (randomization p = " + pval(e.PValue) + ")"
	}
	if e.RelativeEffect != nil {
		return pct(*e.RelativeEffect), pct(e.CI95[0]) + " to " + pct(e.CI95[1])
	}
	return num(e.ATT) + "/month", num(e.CI95[0]) + " to " + num(e.CI95[1])
}

func preTrendText(p *float64) string {
	switch {
	case p == nil:
		return "not available"
	case *p < 0.05:
		return "failed (p = " + pval(*p) + ")"
	}
	return "passed (p = " + pval(*p) + ")"
}

// newView builds the report's content from the input.
func newView(in Input) view {
	r := in.Audit
	if r == nil {
		return partView(in)
	}
	v := view{HasAudit: true, Estimator: headlineEstimator, Title: "Follow-on editing after import " + r.Import.ID}
	acc := "no named account"
	if len(r.Import.Accounts) > 0 {
		acc = strings.Join(r.Import.Accounts, ", ")
	}
	v.Lead = append(v.Lead,
		fmt.Sprintf("Import %s was uploaded by %s in %d changesets from %s to %s: %d objects created, %d modified, %d deleted.",
			r.Import.ID, acc, r.Import.Changesets, r.Import.FirstMonth, r.Import.LastMonth, r.Import.Created, r.Import.Modified, r.Import.Deleted),
		windowSentence(r))
	v.Warnings = append([]string{}, r.Warnings...)
	if in.Assessment == nil && len(v.Warnings) == 0 {
		v.Warnings = nil
	}
	main, other := splitWarnings(v.Warnings, r.Effects)
	v.TopWarnings = main[:min(maxTopWarnings, len(main))]
	v.MoreWarnings = append(slices.Clone(main[len(v.TopWarnings):]), other...)
	for _, l := range layers.Layers {
		if e, ok := r.Headline(l.String()); ok {
			v.Answers = append(v.Answers, answer{Label: layerLabel(l.String()), Layer: l.String(), Text: Answer(e)})
		}
	}

	for _, l := range layers.Layers {
		for _, e := range r.Effects {
			if e.Layer == l.String() && e.Estimator == headlineEstimator {
				eff, iv := effectText(e)
				v.Headline = append(v.Headline, headline{Layer: l.String(), Effect: eff, Interval: iv,
					PreTrend: preTrendText(e.PreTrendP), Reading: Reading(e)})
			}
		}
	}

	v.Glossary = []term{
		{"Import area (treated)", fmt.Sprintf("An area where the import's objects made up at least the chosen share of the features present when it arrived. Its 'treatment' starts in the month the import first edited there. Import areas here: %d.", r.Units.Treated)},
		{"Comparison areas (matching)", fmt.Sprintf("Each import area was paired with the untouched areas most like it before the import, on the traits listed in the balance table, so the comparison areas show what the import areas would likely have seen without the import. Comparison areas picked: %d; the balance table shows how alike the two groups ended up.", r.Units.Controls)},
		{"Relative effect", "The change in follow-on editing in import areas as a share of what they would have had without the import. -30% means about 30% fewer edits of that kind than expected; +20% means about 20% more."},
		{"95% interval", "The range of effects the data support. Read it as the figure's uncertainty: an interval from -40% to -5% says 'fewer, by somewhere between 5% and 40%'. An interval that includes 0% means no change cannot be ruled out."},
		{"Pre-import test (pre-trend)", "Checks whether import areas and comparison areas already moved differently before the import. If it fails (p below 0.05), the comparison is doubtful and the effect may reflect that earlier difference rather than the import."},
		{"p-value", "How often a difference this large would show up by chance if the import had no effect. Small values (below 0.05) are conventionally called significant; they are not proof."},
		{"Intensity", "The import's objects in an area as a share of the area's features (the features already there plus the imported ones). An area becomes an import area when its intensity reaches the chosen threshold; lighter touches are excluded from both groups."},
		{"ATT (average effect on the treated)", "The change the import made in the import areas themselves, in edits per area and month: what they saw minus what the comparison areas say they would have seen. The relative effect expresses it as a share."},
		{"SMD (standardized mean difference)", "How far apart the import areas and the comparison areas were on a trait before the import, in standard deviations of that trait. Within ±0.1 counts as alike."},
		qValueTerm(),
		{"Event study", "The effect month by month, from the months before the import reached an area (where it should be near zero) to the months after."},
		{"Placebo", "The same comparison with the start dates moved back into the time before the import. An 'effect' there points to differences that were not caused by the import."},
		{"Estimators", "Every headline figure, chart and per-area figure comes from one model, " + headlineEstimator + ": it fits the counts with a Poisson model, comparing each wave of import areas only with clean comparison areas, and reads the change as a ratio, which suits edit counts that grow and shrink in proportion. The other estimators are robustness checks: cs-att compares each wave with never-imported comparison areas (Callaway and Sant'Anna's method) in edit counts; twfe-linear is the linear month-by-month regression; did-2x2 is the simple before/after, import/comparison difference. The robustness section says, layer by layer, whether they agree."},
	}

	u := r.Units
	v.Areas = append(v.Areas,
		fmt.Sprintf("Units: %s, %d in all.", orDash(u.Spec), u.Total),
		fmt.Sprintf("%d import areas, %d matched comparison areas, %d untouched areas not used, %d excluded (touched by another import, or too lightly by this one), %d import areas left out (no comparable area or no time before the import).",
			u.Treated, u.Controls, u.Unmatched, u.Excluded, u.Dropped))
	if u.Outside > 0 || u.Unlocated > 0 {
		v.Areas = append(v.Areas, fmt.Sprintf("%d edits fell outside every area and %d had no known location; neither is counted.", u.Outside, u.Unlocated))
	}

	for _, b := range r.Balance {
		flag := "ok"
		if b.FlagAfter {
			flag = "still differs"
		}
		v.Balance = append(v.Balance, balanceRow{Covariate: b.Covariate, Treated: fmt.Sprintf("%.3g", b.MeanTreated),
			Control: fmt.Sprintf("%.3g", b.MatchedMeanControl), Before: num(b.SMDBefore), After: num(b.SMDAfter), Flag: flag})
	}
	for _, e := range r.LayerEffects() {
		v.Estimates = append(v.Estimates, estimateRowOf(e))
	}
	for _, e := range r.Effects {
		if _, ok := layers.ParseLayer(e.Layer); !ok {
			v.Estimates = append(v.Estimates, estimateRowOf(e))
		}
	}
	for _, a := range r.Robustness {
		row := robustRow{Layer: a.Layer, Estimator: a.Estimator, Headline: pct(a.Headline), Check: pct(a.Relative), Verdict: a.Verdict, Explanation: a.Explanation}
		if a.Verdict == audit.VerdictNotComputed {
			row.Check = "n/a"
		}
		v.Robust = append(v.Robust, row)
	}
	for _, p := range r.Placebo {
		v.Placebo = append(v.Placebo, placeboRow{Outcome: p.Layer, Shift: fmt.Sprintf("%d months", p.ShiftMonths),
			ATT: num(p.ATT), Interval: num(p.CI95[0]) + " to " + num(p.CI95[1]), P: pval(p.PValue)})
	}
	v.Notes = append([]string{}, r.Notes...)
	v.Cautions = append([]string{
		"These estimates are evidence, not proof: areas differ in ways no matching captures, and a change after an import can have other causes.",
	}, r.Cautions...)
	v.Notes = append(splitNotes(r), v.Notes...)
	if !r.IsImport() {
		v = eventView(v, r)
	}
	return v
}

// windowSentence says which months were counted and compared: the panel's
// months actually used (the store's history may start later than asked)
// and the event window the estimates read around each area's import.
func windowSentence(r *audit.Report) string {
	before, after := monthsBetween(r.Window[0], r.Import.FirstMonth), monthsBetween(r.Import.LastMonth, r.Window[1])
	s := fmt.Sprintf("Follow-on editing by other mappers is counted per area and month from %s to %s", r.Window[0], r.Window[1])
	if before >= 0 && after >= 0 {
		s += fmt.Sprintf(" (%d months before the import's first month, %d after its last", before, after)
		if before < r.Before {
			s += fmt.Sprintf("; %d were asked for before, but the store's history starts later", r.Before)
		}
		s += ")"
	}
	s += ", and compared between the areas the import reached and matched areas it did not touch."
	if w := r.Estimation.Window; w.Pre > 0 {
		pre := w.Pre
		if before >= 0 {
			pre = min(pre, before)
		}
		s += fmt.Sprintf(" The estimates compare up to %d months before each area's import with up to %d months after it.", pre, w.Post)
	}
	return s
}

// monthsBetween is the number of months from a to b (YYYY-MM); -1 when
// either does not parse.
func monthsBetween(a, b string) int {
	x, y := monthNumber(a), monthNumber(b)
	if math.IsNaN(x) || math.IsNaN(y) {
		return -1
	}
	return int(y - x)
}

// partView is the view of a report without an audit: a checklist or an
// assessment alone, whose own sections carry their content and cautions.
func partView(in Input) view {
	v := view{Title: "Import review"}
	switch {
	case in.Checklist != nil:
		v.Title = "Neglected tags of import " + in.Checklist.Import
	case in.Assessment != nil:
		v.Title = "Assessment of a proposed import: " + in.Assessment.Proposal
	}
	v.Cautions = []string{
		"These figures are evidence, not proof: read them with the local community, and follow the community's import guidelines and local review before any upload or bulk edit.",
	}
	v.Glossary = partGlossary()
	return v
}

// qValueTerm explains the q of the checklist tables.
func qValueTerm() term {
	return term{"q-value", "A p-value adjusted for testing many tags at once (Benjamini–Hochberg): among keys flagged with q below 0.05, at most about 5% are expected to be false alarms."}
}

// partGlossary explains the terms of the checklist and assessment sections
// in a report without an audit (an audit's glossary covers them too).
func partGlossary() []term {
	return []term{
		{"Share with key", "Of the features of a class, how many carry the key, with its 95% interval (Wilson's score interval)."},
		{"Difference, points", "The imported features' share minus the reference features' share, in percentage points, with its 95% interval (Newcombe's hybrid score interval)."},
		qValueTerm(),
		{"Import area", "An area where the proposal's or a past import's objects would make up at least the chosen share of the features there (the intensity threshold)."},
	}
}

func estimateRowOf(e did.Effect) estimateRow {
	eff, iv := effectText(e)
	return estimateRow{Outcome: e.Layer, Estimator: e.Estimator, Effect: eff, Interval: iv, ATT: num(e.ATT),
		P: pval(e.PValue), PreTrend: pptr(e.PreTrendP), Method: e.Method, Units: fmt.Sprintf("%d/%d", e.TreatedUnits, e.ControlUnits)}
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// TopNeglected returns the highest-ranked neglected row of a checklist
// (matched-controls reference first), ok false when none is flagged.
func TopNeglected(cl *checklist.Checklist) (checklist.Row, bool) {
	if cl == nil {
		return checklist.Row{}, false
	}
	for _, ref := range []string{checklist.RefMatchedControls, checklist.RefWithoutProvenance, checklist.RefTreatedBefore} {
		if rows := cl.Neglected(ref); len(rows) > 0 {
			return rows[0], true
		}
	}
	return checklist.Row{}, false
}
