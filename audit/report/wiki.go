package report

import (
	"bytes"
	"fmt"
	"io"
	"strings"
)

// FileWiki is the MediaWiki page Write creates, for the OSM wiki.
const FileWiki = "report.wiki"

// wikiEscapes are the characters that open markup anywhere in MediaWiki
// wikitext: links ([ ]), templates and parser functions ({ }), table cells
// and pipes (|, !), bold and italic ('), signatures (~), HTML and entities
// (< > &), and the colon of free web addresses (https://...), which
// MediaWiki links without brackets, and of definition lines (; term : text).
// Each becomes a numeric character reference, which the parser shows as the
// character and never reads as markup.
const wikiEscapes = "[]{}|!'~<>&:;"

// wikiLineStart are the characters that open markup at a line start: lists
// (* #), headings (=), rules (-) and preformatted text (a space). wikiText
// escapes them as the first character, since every escaped text is placed
// at a line start or after loadwake's own markup.
const wikiLineStart = "*#=- "

// wikiText escapes text from OSM data (names, tags, accounts) and from
// loadwake's own sentences for MediaWiki: every character in wikiEscapes,
// a first character in wikiLineStart, and each underscore next to another
// (behaviour switches such as __NOTOC__) become numeric character
// references; line breaks and tabs become spaces (a line break could start
// a heading, list or table row); and the magic words ISBN, RFC and PMID lose
// their automatic link by escaping their first letter. The page shows the
// text as written and nothing in it becomes a link, template, table break,
// bold or italic run, signature, heading or HTML.
func wikiText(s string) string {
	var b strings.Builder
	for i, r := range s {
		switch {
		case r == '\n' || r == '\r' || r == '\t':
			b.WriteByte(' ')
		case strings.ContainsRune(wikiEscapes, r),
			i == 0 && strings.ContainsRune(wikiLineStart, r),
			r == '_' && (strings.HasPrefix(s[i+1:], "_") || strings.HasSuffix(s[:i], "_")),
			(r == 'I' || r == 'R' || r == 'P') && magicLinkAt(s[i:]):
			fmt.Fprintf(&b, "&#%d;", r)
		default:
			b.WriteRune(r)
		}
	}
	return b.String()
}

// magicLinkAt reports whether s starts with one of MediaWiki's magic-link
// words followed by a space.
func magicLinkAt(s string) bool {
	for _, w := range []string{"ISBN ", "RFC ", "PMID "} {
		if strings.HasPrefix(s, w) {
			return true
		}
	}
	return false
}

// wikiLink writes an external link [URL text] when the address passes
// safeURL (and so holds no space, bracket or quote that could end the link
// early), else the text alone.
func wikiLink(l provLink) string {
	if safeURL(l.URL) {
		return "[" + l.URL + " " + wikiText(l.Text) + "]"
	}
	return wikiText(l.Text)
}

// wikiTable writes a wikitable with a header row and body rows; every cell
// is escaped with wikiText. right marks the numeric columns, aligned right.
func wikiTable(b *bytes.Buffer, head []string, right map[int]bool, rows [][]string) {
	b.WriteString("{| class=\"wikitable\"\n|-\n")
	for _, h := range head {
		fmt.Fprintf(b, "! %s\n", wikiText(h))
	}
	for _, r := range rows {
		b.WriteString("|-\n")
		for i, c := range r {
			if right[i] {
				fmt.Fprintf(b, "| style=\"text-align:right\" | %s\n", wikiText(c))
			} else {
				fmt.Fprintf(b, "| %s\n", wikiText(c))
			}
		}
	}
	b.WriteString("|}\n")
}

// WriteWiki writes the report as a MediaWiki page for the OSM wiki, with the
// sections and the reading of report.md: the invented-data banner, warnings,
// the headline per layer in plain words, what the numbers mean, the areas
// and their balance, robustness checks, every estimate, the checklist and
// the assessment when given, notes, where the figures come from, and the
// cautions. All text, from OSM data or not, passes through one escaper, so
// no name can become markup; the only links are the provenance block's
// changeset pages and checked web addresses.
func WriteWiki(w io.Writer, in Input) error {
	if err := in.check(); err != nil {
		return err
	}
	v := newView(in)
	e := wikiText
	var b bytes.Buffer
	heading := func(level int, s string) {
		bar := strings.Repeat("=", level)
		fmt.Fprintf(&b, "\n%s %s %s\n", bar, e(s), bar)
	}
	list := func(items []string) {
		for _, s := range items {
			fmt.Fprintf(&b, "* %s\n", e(s))
		}
	}
	fmt.Fprintf(&b, "'''%s'''\n\n", e(v.Title))
	prov := in.provenance()
	if prov != nil && prov.Invented {
		fmt.Fprintf(&b, "<div style=\"border:3px solid #d55e00;padding:0.5em\">'''%s'''</div>\n\n", e(InventedBanner))
	}
	if v.HasAudit {
		heading(2, "In short")
		for _, a := range v.Answers {
			fmt.Fprintf(&b, "* '''%s''' (%s): %s\n", e(a.Label), e(a.Layer), e(a.Text))
		}
		heading(2, "Warnings")
		if len(v.Warnings) == 0 {
			b.WriteString("None.\n")
		}
		list(v.TopWarnings)
		if len(v.MoreWarnings) > 0 {
			b.WriteString(e(fmt.Sprintf("%d more warning(s) are listed under \"More warnings\" below.", len(v.MoreWarnings))) + "\n")
		}
		b.WriteString("\n")
	}
	for _, s := range v.Lead {
		fmt.Fprintf(&b, "%s\n\n", e(s))
	}
	if v.HasAudit {
		writeWikiAudit(&b, v, heading, list)
		writeRetentionWiki(&b, newRetentionView(in.Audit.Retention), heading, list)
	}
	if in.Checklist != nil {
		writeWikiChecklist(&b, in.Checklist.Import, newHTMLChecklist(in.Checklist), heading, list)
	}
	if in.Assessment != nil {
		writeWikiAssessment(&b, newHTMLAssessment(in.Assessment), heading, list)
	}
	if !v.HasAudit && len(v.Glossary) > 0 {
		heading(2, "What the numbers mean")
		for _, t := range v.Glossary {
			fmt.Fprintf(&b, "; %s\n: %s\n", e(t.Name), e(t.Text))
		}
	}
	if len(v.MoreWarnings) > 0 {
		heading(2, "More warnings")
		list(v.MoreWarnings)
	}
	if len(v.Notes) > 0 {
		heading(2, "Notes")
		list(v.Notes)
	}
	if prov != nil {
		heading(2, "Where these figures come from")
		for _, r := range provenanceRows(prov) {
			fmt.Fprintf(&b, "; %s\n: %s", e(r.Label), e(r.Text))
			var links []string
			for _, l := range r.Links {
				links = append(links, wikiLink(l))
			}
			if len(links) > 0 {
				if r.Text != "" {
					b.WriteString(e(": "))
				}
				b.WriteString(strings.Join(links, ", "))
			}
			b.WriteString("\n")
		}
	}
	heading(2, "Cautions")
	list(v.Cautions)
	_, err := w.Write(b.Bytes())
	return err
}

// writeWikiAudit writes the audit's sections of the wiki page.
func writeWikiAudit(b *bytes.Buffer, v view, heading func(int, string), list func([]string)) {
	e := wikiText
	heading(2, "How follow-on editing changed")
	if len(v.Headline) == 0 {
		b.WriteString("No layer had a headline estimate; see the warnings and the table of all estimates.\n")
	} else {
		var rows [][]string
		for _, h := range v.Headline {
			rows = append(rows, []string{h.Layer, h.Effect, h.Interval, h.PreTrend})
		}
		wikiTable(b, []string{"Layer", "Relative effect (" + v.Estimator + ")", "95% interval", "Pre-import test"}, map[int]bool{1: true}, rows)
		b.WriteString("\n")
		for _, h := range v.Headline {
			fmt.Fprintf(b, "* '''%s''': %s\n", e(h.Layer), e(h.Reading))
		}
	}

	heading(2, "What the numbers mean")
	for _, t := range v.Glossary {
		fmt.Fprintf(b, "; %s\n: %s\n", e(t.Name), e(t.Text))
	}

	heading(2, "Areas compared")
	for _, s := range v.Areas {
		fmt.Fprintf(b, "%s\n\n", e(s))
	}
	if len(v.Balance) > 0 {
		b.WriteString(e("Balance before and after matching (standardized mean differences; within ±0.1 counts as alike):") + "\n")
		var rows [][]string
		for _, r := range v.Balance {
			rows = append(rows, []string{r.Covariate, r.Treated, r.Control, r.Before, r.After, r.Flag})
		}
		wikiTable(b, []string{"Trait", "Mean, import areas", "Mean, comparison", "Difference before", "Difference after", "After matching"},
			map[int]bool{1: true, 2: true, 3: true, 4: true}, rows)
	}
	if len(v.Robust) > 0 {
		heading(2, "Robustness checks")
		fmt.Fprintf(b, "%s\n", e("Other estimators measure the same change differently; each is compared with the headline ("+v.Estimator+")."))
		var rows [][]string
		for _, r := range v.Robust {
			rows = append(rows, []string{r.Layer, r.Estimator, r.Headline, r.Check, r.Verdict, r.Explanation})
		}
		wikiTable(b, []string{"Layer", "Check", "Headline", "Check's estimate", "Verdict", "Why they can differ"}, map[int]bool{2: true, 3: true}, rows)
	}
	if len(v.Estimates) > 0 {
		heading(2, "All estimates")
		var rows [][]string
		for _, r := range v.Estimates {
			rows = append(rows, []string{r.Outcome, r.Estimator, r.Effect, r.Interval, r.ATT, r.P, r.PreTrend, r.Method, r.Units})
		}
		wikiTable(b, []string{"Outcome", "Estimator", "Effect", "95% interval", "ATT per area-month", "p", "Pre-import p", "Method", "Areas import/comparison"},
			map[int]bool{2: true, 4: true, 5: true, 6: true, 8: true}, rows)
	}
	if len(v.Placebo) > 0 {
		b.WriteString("\n" + e("Placebo (start dates moved back into the time before the import; an effect here signals trouble):") + "\n")
		var rows [][]string
		for _, r := range v.Placebo {
			rows = append(rows, []string{r.Outcome, r.Shift, r.ATT, r.Interval, r.P})
		}
		wikiTable(b, []string{"Outcome", "Shift", "ATT", "95% interval", "p"}, map[int]bool{2: true, 4: true}, rows)
	}
}

// writeWikiChecklist writes the checklist section of the wiki page.
func writeWikiChecklist(b *bytes.Buffer, imp string, c *htmlChecklist, heading func(int, string), list func([]string)) {
	e := wikiText
	heading(2, "Neglected tags: "+imp)
	fmt.Fprintf(b, "%s\n", e("Imported features compared with "+c.Reference+". Each row is a key the imported features carry markedly less often."))
	if len(c.Rows) == 0 {
		b.WriteString("\nNo key was flagged.\n")
	} else {
		var rows [][]string
		for _, r := range c.Rows {
			rows = append(rows, []string{r.Key, r.Class,
				fmt.Sprintf("%.1f%% of %d", 100*r.ImportShare, r.ImportTotal),
				fmt.Sprintf("%.1f%% of %d", 100*r.ReferenceShare, r.ReferenceTotal),
				fmt.Sprintf("%+.1f (%+.1f to %+.1f)", 100*r.Difference, 100*r.CI95[0], 100*r.CI95[1]),
				fmt.Sprintf("%.2g", r.QValue), fmt.Sprint(r.Affected)})
		}
		wikiTable(b, []string{"Key", "Class", "Imported with key", "Reference with key", "Difference, points (95% interval)", "q", "Imported features without it"},
			map[int]bool{2: true, 3: true, 4: true, 5: true, 6: true}, rows)
	}
	for _, n := range c.Notes {
		fmt.Fprintf(b, "\n%s\n", e("Note: "+n))
	}
	b.WriteString("\n")
	list(c.Cautions)
}

// writeWikiAssessment writes the proposed import's section of the wiki page.
func writeWikiAssessment(b *bytes.Buffer, a *htmlAssessment, heading func(int, string), list func([]string)) {
	e := wikiText
	heading(2, "Proposed import: "+a.Proposal)
	fmt.Fprintf(b, "%s\n", e(fmt.Sprintf("%d proposed features, needing at least %d changeset(s) at the API limit of 10,000 changes each. They reach %d areas, %d of which they would make import areas; %d proposed features have an existing feature of the same class within %.2f m (likely duplicates to check).",
		a.Features, a.Changesets, a.Footprint, a.Treated, a.Duplicates, a.Distance)))
	if len(a.Nearest) > 0 {
		heading(3, "Most similar past imports")
		fmt.Fprintf(b, "%s\n\n", e("Distance compares the mix of feature classes and how completely keys are filled in: 0 is the same profile, 1 nothing in common."))
		for _, n := range a.Nearest {
			fmt.Fprintf(b, "* %s\n", e(fmt.Sprintf("%s: distance %.2f (%d features created)", n.Episode.ID, n.Distance, n.Features)))
		}
	}
	if len(a.Expected) > 0 {
		heading(3, "What followed those imports")
		var rows [][]string
		for _, r := range a.Expected {
			rng := fmt.Sprintf("%+.2f to %+.2f per area-month", r.Low, r.High)
			if r.Relative {
				rng = fmt.Sprintf("%+.0f%% to %+.0f%%", 100*r.Low, 100*r.High)
			}
			rows = append(rows, []string{r.Layer, r.Estimator, rng, strings.Join(r.Imports, ", ")})
		}
		wikiTable(b, []string{"Layer", "Estimator", "Range of 95% intervals", "Past imports"}, map[int]bool{2: true}, rows)
	}
	if len(a.Lacking) > 0 {
		heading(3, "Keys similar imports neglected that the proposal also lacks")
		var rows [][]string
		for _, k := range a.Lacking {
			rows = append(rows, []string{k.Key, k.Class, fmt.Sprintf("%.1f%%", 100*k.ProposalShare),
				fmt.Sprintf("%.1f%% (%s)", 100*k.PastShare, k.Import), fmt.Sprintf("%.1f%%", 100*k.ReferenceShare)})
		}
		wikiTable(b, []string{"Key", "Class", "Proposal", "Past import", "Organic reference"}, map[int]bool{2: true, 3: true, 4: true}, rows)
	}
	for _, n := range a.Notes {
		fmt.Fprintf(b, "\n%s\n", e("Note: "+n))
	}
	heading(3, "Before any upload")
	list(a.Cautions)
}
