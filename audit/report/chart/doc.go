// Package chart draws the report's charts from an audit's figures with
// gonum.org/v1/plot: an event-study chart per layer (EventStudy), a balance
// chart with one arrow per trait from its difference before matching to
// after, over the zone where the groups count as alike (Balance), a map of
// the units with import areas outlined, areas named where a name fits and a
// scale bar (Map), a forest plot of the headline by area traits (Forest) and
// the newcomers' Kaplan–Meier curves (Retention).
//
// Each takes a Renderer: SVG gives markup fit to inline in HTML (a viewBox,
// a title for screen readers, a local font stack), PNG an image at PNGDPI.
// Each returns ok false, and no error, when it has nothing to draw. All
// draws every chart an audit has, with the file name and caption the report
// gives it; Draw draws one of them by name in any format.
//
// The colours come from the Okabe–Ito palette; every pair a chart contrasts
// is checked under simulated colour-vision deficiencies (cvd_test.go).
package chart
