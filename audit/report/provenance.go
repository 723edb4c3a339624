package report

import (
	"bytes"
	"fmt"
	"strings"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/markdown"
)

// InventedBanner heads every report on invented data.
const InventedBanner = "Invented data: this report is about an invented region, accounts and agencies made up by loadwake's simulator. Never upload these data to OpenStreetMap."

// provenance returns the report's provenance: the one given with the input,
// else the audit's; nil when neither has one.
func (in Input) provenance() *audit.Provenance {
	if in.Provenance != nil {
		return in.Provenance
	}
	if in.Audit != nil {
		return in.Audit.Provenance
	}
	return nil
}

// provRow is one line of the provenance block: a label and its text, with an
// optional list of links.
type provRow struct {
	Label string
	Text  string
	Links []provLink
}

type provLink struct{ Text, URL string }

// maxChangesetLinks is how many changesets the block links one by one; the
// JSON has all.
const maxChangesetLinks = 40

// provenanceRows lays out the block the Markdown and HTML reports share.
func provenanceRows(p *audit.Provenance) []provRow {
	var rows []provRow
	add := func(label, text string) {
		if text != "" {
			rows = append(rows, provRow{Label: label, Text: text})
		}
	}
	if p.Import != "" {
		add("Import", p.Import)
		add("Accounts", strings.Join(p.Accounts, ", "))
		cs := provRow{Label: "Changesets", Text: fmt.Sprintf("%d", len(p.Changesets))}
		for i, c := range p.Changesets {
			if i == maxChangesetLinks {
				cs.Text += fmt.Sprintf(" (the first %d linked; all are in report.json)", maxChangesetLinks)
				break
			}
			cs.Links = append(cs.Links, provLink{Text: fmt.Sprint(c.ID), URL: c.URL})
		}
		rows = append(rows, cs)
		add("Source tags", strings.Join(p.SourceTags, "; "))
		if len(p.Documentation) > 0 {
			doc := provRow{Label: "Documentation found in changeset tags"}
			for _, u := range p.Documentation {
				doc.Links = append(doc.Links, provLink{Text: u, URL: u})
			}
			rows = append(rows, doc)
		} else {
			add("Documentation", "none found in the changeset tags; ask the import's authors for its wiki page")
		}
	}
	if p.Window[0] != "" {
		add("Months compared", p.Window[0]+" to "+p.Window[1])
	}
	add("Units", p.Units)
	if p.DataRange[0] != "" {
		add("Data in the store", "edits from "+p.DataRange[0]+" to "+p.DataRange[1])
	}
	add("Made by", strings.TrimSpace(p.Tool+" "+p.Version))
	add("Command", p.CommandLine)
	add("Generated", p.Generated)
	add("Note", p.Note)
	add("Licence", p.Attribution)
	return rows
}

// safeURL keeps only web addresses; anything else from data is shown as
// text, never linked.
func safeURL(u string) bool {
	return (strings.HasPrefix(u, "https://") || strings.HasPrefix(u, "http://")) && !strings.ContainsAny(u, " <>\"'`()[]")
}

// writeProvenanceMarkdown writes the "Where these figures come from" section.
// Links are written only for the OSM website's changeset pages and for web
// addresses from changeset tags that pass safeURL, with the address escaped
// as link text.
func writeProvenanceMarkdown(b *bytes.Buffer, p *audit.Provenance) {
	if p == nil {
		return
	}
	e := markdown.Escape
	b.WriteString("\n## Where these figures come from\n\n")
	for _, r := range provenanceRows(p) {
		fmt.Fprintf(b, "- **%s**: %s", e(r.Label), e(r.Text))
		var links []string
		for _, l := range r.Links {
			if safeURL(l.URL) {
				links = append(links, fmt.Sprintf("[%s](<%s>)", e(l.Text), l.URL))
			} else {
				links = append(links, e(l.Text))
			}
		}
		if len(links) > 0 {
			if r.Text != "" {
				b.WriteString(": ")
			}
			b.WriteString(strings.Join(links, ", "))
		}
		b.WriteString("\n")
	}
}
