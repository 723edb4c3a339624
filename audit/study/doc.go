// Package study builds the comparison behind an audit of one import: it
// reads the classified events once, in time order, into a unit-by-month
// panel of follow-on activity per layer (leaving out every import's
// changesets and, by default, the import's own accounts), marks the units the
// import reached as treated from the month it arrived, keeps units any other
// import touched out of the controls, and matches each treated unit with
// untouched units on its pre-import activity (package match).
package study
