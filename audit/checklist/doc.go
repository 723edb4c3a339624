// Package checklist lists the attribute keys that imported features went
// without: per feature class and key, the share of imported features carrying
// the key at the end of the window against organically mapped features of
// the class (in the matched areas, or without the import's provenance tag in
// snapshot mode), with Wilson intervals, Newcombe's interval for the
// difference and Benjamini–Hochberg q-values across keys (props.go). The
// Markdown form is one "- [ ]" line per neglected key.
package checklist
