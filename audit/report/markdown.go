package report

import (
	"bytes"
	"fmt"
	"io"

	"github.com/loadwake/loadwake/audit/markdown"
)

// WriteMarkdown writes the report as plain Markdown for a wiki page or a mail:
// warnings first, the headline effect per layer read in plain words, what the
// numbers mean, the areas and their balance, every estimate, the checklist and
// the assessment when given, notes, and the cautions last.
func WriteMarkdown(w io.Writer, in Input) error {
	if err := in.check(); err != nil {
		return err
	}
	v := newView(in)
	e := markdown.Escape
	var b bytes.Buffer
	fmt.Fprintf(&b, "# %s\n\n", e(v.Title))
	prov := in.provenance()
	if prov != nil && prov.Invented {
		fmt.Fprintf(&b, "> **%s**\n\n", e(InventedBanner))
	}
	if v.HasAudit {
		b.WriteString("## In short\n\n")
		if len(v.Answers) == 0 {
			b.WriteString("No layer could be estimated; see the warnings and the table of all estimates.\n")
		}
		for _, a := range v.Answers {
			fmt.Fprintf(&b, "- **%s** (%s): %s\n", e(a.Label), e(a.Layer), e(a.Text))
		}
		b.WriteString("\nCompared with matched areas the import did not touch. Terms are explained under \"What the numbers mean\".\n")
		b.WriteString("\n## Warnings\n\n")
		if len(v.Warnings) == 0 {
			b.WriteString("None.\n")
		}
		for _, s := range v.TopWarnings {
			fmt.Fprintf(&b, "- %s\n", e(s))
		}
		if len(v.MoreWarnings) > 0 {
			fmt.Fprintf(&b, "\n%d more warning(s) are listed under \"More warnings\" below.\n", len(v.MoreWarnings))
		}
		b.WriteString("\n")
	}
	for _, s := range v.Lead {
		fmt.Fprintf(&b, "%s\n", e(s))
	}
	if v.HasAudit {

		b.WriteString("\n## How follow-on editing changed\n\n")
		if len(v.Headline) == 0 {
			b.WriteString("No layer had a headline estimate; see the warnings and the table of all estimates.\n")
		} else {
			fmt.Fprintf(&b, "| Layer | Relative effect (%s) | 95%% interval | Pre-import test |\n|---|---:|---|---|\n", e(v.Estimator))
			for _, h := range v.Headline {
				fmt.Fprintf(&b, "| %s | %s | %s | %s |\n", e(h.Layer), e(h.Effect), e(h.Interval), e(h.PreTrend))
			}
			b.WriteString("\n")
			for _, h := range v.Headline {
				fmt.Fprintf(&b, "- **%s**: %s\n", e(h.Layer), e(h.Reading))
			}
		}

		b.WriteString("\n## What the numbers mean\n\n")
		for _, t := range v.Glossary {
			fmt.Fprintf(&b, "- **%s**: %s\n", e(t.Name), e(t.Text))
		}

		b.WriteString("\n## Areas compared\n\n")
		for _, s := range v.Areas {
			fmt.Fprintf(&b, "%s\n", e(s))
		}
		if len(v.Balance) > 0 {
			b.WriteString("\nBalance before and after matching (standardized mean differences; within ±0.1 counts as alike):\n\n")
			b.WriteString("| Trait | Mean, import areas | Mean, comparison | Difference before | Difference after | After matching |\n|---|---:|---:|---:|---:|---|\n")
			for _, r := range v.Balance {
				fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s |\n", e(r.Covariate), r.Treated, r.Control, r.Before, r.After, r.Flag)
			}
		}

		if len(v.Robust) > 0 {
			fmt.Fprintf(&b, "\n## Robustness checks\n\nOther estimators measure the same change differently; each is compared with the headline (%s).\n\n", e(v.Estimator))
			b.WriteString("| Layer | Check | Headline | Check's estimate | Verdict | Why they can differ |\n|---|---|---:|---:|---|---|\n")
			for _, r := range v.Robust {
				fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s |\n", e(r.Layer), e(r.Estimator), e(r.Headline), e(r.Check), e(r.Verdict), e(r.Explanation))
			}
		}
		if len(v.Estimates) > 0 {
			b.WriteString("\n## All estimates\n\n")
			b.WriteString("| Outcome | Estimator | Effect | 95% interval | ATT per area-month | p | Pre-import p | Method | Areas import/comparison |\n|---|---|---:|---|---:|---:|---:|---|---:|\n")
			for _, r := range v.Estimates {
				fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s | %s | %s | %s |\n", e(r.Outcome), e(r.Estimator), e(r.Effect), e(r.Interval), r.ATT, e(r.P), e(r.PreTrend), e(r.Method), r.Units)
			}
		}
		if len(v.Placebo) > 0 {
			b.WriteString("\nPlacebo (start dates moved back into the time before the import; an effect here signals trouble):\n\n")
			b.WriteString("| Outcome | Shift | ATT | 95% interval | p |\n|---|---|---:|---|---:|\n")
			for _, r := range v.Placebo {
				fmt.Fprintf(&b, "| %s | %s | %s | %s | %s |\n", e(r.Outcome), r.Shift, r.ATT, r.Interval, e(r.P))
			}
		}
	}
	if in.Audit != nil {
		writeRetentionMarkdown(&b, newRetentionView(in.Audit.Retention), e)
	}
	if in.Checklist != nil {
		b.WriteString("\n")
		if err := in.Checklist.WriteMarkdown(&b); err != nil {
			return err
		}
	}
	if in.Assessment != nil {
		b.WriteString("\n")
		if err := in.Assessment.WriteMarkdown(&b); err != nil {
			return err
		}
	}

	if !v.HasAudit && len(v.Glossary) > 0 {
		b.WriteString("\n## What the numbers mean\n\n")
		for _, t := range v.Glossary {
			fmt.Fprintf(&b, "- **%s**: %s\n", e(t.Name), e(t.Text))
		}
	}
	if len(v.MoreWarnings) > 0 {
		b.WriteString("\n## More warnings\n\n")
		for _, s := range v.MoreWarnings {
			fmt.Fprintf(&b, "- %s\n", e(s))
		}
	}
	if len(v.Notes) > 0 {
		b.WriteString("\n## Notes\n\n")
		for _, s := range v.Notes {
			fmt.Fprintf(&b, "- %s\n", e(s))
		}
	}
	writeProvenanceMarkdown(&b, prov)
	b.WriteString("\n## Cautions\n\n")
	for _, s := range v.Cautions {
		fmt.Fprintf(&b, "- %s\n", e(s))
	}
	_, err := w.Write(b.Bytes())
	return err
}
