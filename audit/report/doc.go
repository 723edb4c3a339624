// Package report turns an audit into files a reviewer can read and post:
// report.md (plain Markdown for a wiki page or a mail), report.html (one
// self-contained page with inline CSS and inline SVG charts, loading nothing
// from the network), report.json (the audit JSON contract), units.geojson
// (every spatial unit with its role and the import's effects) and panel.csv
// (the study panel).
//
// Every string that comes from OpenStreetMap data (tag keys and values,
// account names, changeset comments, unit ids) is escaped for the format it
// lands in: html/template escaping for HTML, backslash escapes for Markdown.
//
// Every report opens with its answer: one plain sentence per layer, then at
// most three warnings (the rest folded or listed further down), then the
// import and the months actually compared; a glossary defines the terms.
//
// The charts are drawn by package chart and written as charts/NAME.svg
// (inlined in report.html) and charts/NAME.png beside it.
//
// WriteOverview writes the overview of every import in a store
// (audit.AuditAll) as overview.html (one table that sorts by any column
// with radio buttons and CSS grid order, no script), overview.md,
// overview.csv and overview.json.
package report
