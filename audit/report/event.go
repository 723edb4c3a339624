package report

import (
	"fmt"
	"strings"

	"github.com/loadwake/loadwake/audit"
)

// Reports of a treatment given as data (audit.RunTreatment) speak of the
// event by its name and of treated areas, never of an import: eventView and
// eventCharts reword the view and the charts that newView and MakeCharts
// build for imports.

// eventWords rewrites import wording into the wording of an event, longest
// phrases first.
func eventWords() *strings.Replacer {
	return strings.NewReplacer(
		"(touched by another import, or too lightly by this one)", "(edited by a detected import inside the window)",
		"excluded (other or light import)", "excluded (edited by an import)",
		"import area left out (no match)", "treated area left out (no match)",
		"import area (treated)", "treated area", "Import area (treated)", "Treated area",
		"the import areas", "the treated areas", "The import areas", "The treated areas",
		"each area's import arrived", "each area's treatment began", "waves of import areas", "waves of treated areas",
		"Import areas", "Treated areas", "import areas", "treated areas",
		"Import area", "Treated area", "import area", "treated area",
		"Pre-import test", "Pre-event test", "pre-import test", "pre-event test",
		"Pre-import", "Pre-event", "pre-import", "pre-event",
		"import arrives", "event begins",
		"the import's", "the event's", "The import's", "The event's",
		"the import", "the event", "The import", "The event",
		"import/comparison", "treated/comparison", "never-imported", "never-treated",
	)
}

// eventView rewords an import's view for the event of r.
func eventView(v view, r *audit.Report) view {
	w := eventWords()
	ev := r.Event
	v.Title = "Follow-on editing after " + ev.Name
	lead := []string{fmt.Sprintf("The event %q is given by the file %s: %d areas listed as treated, each from its own first month, %s to %s. No import detection chose these areas.",
		ev.Name, ev.Source, ev.Listed, ev.FirstMonth, ev.LastMonth)}
	for _, l := range v.Lead[1:] {
		lead = append(lead, w.Replace(l))
	}
	v.Lead = lead
	each := func(s []string) []string {
		for i := range s {
			s[i] = w.Replace(s[i])
		}
		return s
	}
	v.Warnings, v.Areas, v.Notes = each(v.Warnings), each(v.Areas), each(v.Notes)
	for i := range v.Headline {
		v.Headline[i].Reading = w.Replace(v.Headline[i].Reading)
		v.Headline[i].PreTrend = w.Replace(v.Headline[i].PreTrend)
	}
	for i := range v.Robust {
		v.Robust[i].Explanation = w.Replace(v.Robust[i].Explanation)
	}
	for i := range v.Balance {
		v.Balance[i].Covariate = w.Replace(v.Balance[i].Covariate)
	}
	for i := range v.Glossary {
		v.Glossary[i].Name, v.Glossary[i].Text = w.Replace(v.Glossary[i].Name), w.Replace(v.Glossary[i].Text)
	}
	if len(v.Glossary) > 0 {
		v.Glossary[0].Text = fmt.Sprintf("An area listed in %s. Its 'treatment' starts in the month given there and never switches off. Treated areas here: %d.", ev.Source, r.Units.Treated)
	}
	return v
}

// eventCharts rewords the captions and the SVG text of an import's charts
// for the event of r.
func eventCharts(charts []Chart) []Chart {
	w := eventWords()
	for i := range charts {
		charts[i].Caption = w.Replace(charts[i].Caption)
		charts[i].SVG = []byte(w.Replace(string(charts[i].SVG)))
	}
	return charts
}

// isEvent reports whether in's audit follows an event given as data.
func isEvent(in Input) bool { return in.Audit != nil && !in.Audit.IsImport() }
