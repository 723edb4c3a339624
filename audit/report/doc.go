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
// Charts are drawn with gonum.org/v1/plot and rendered to SVG: an event-study
// chart per layer, a balance dot chart and a map of the units. Their colours
// come from the Okabe–Ito palette, which stays distinct for the common forms
// of colour blindness.
package report
