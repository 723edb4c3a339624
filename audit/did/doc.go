// Package did estimates what followed an import from a panel.Panel of import
// areas and their matched controls: difference-in-differences in its plain
// and staggered forms. Estimate runs, for every outcome, the Poisson model
// with unit and month fixed effects stacked by cohort with clean controls
// (ppml-twfe, the headline: Headline), Callaway & Sant'Anna's group-time
// average effects (cs-att), the linear two-way fixed-effects event study
// (twfe-linear) and the plain before/after comparison (did-2x2), each with
// its interval, pre-trend test and placebo. The headline also gives the
// Poisson event study (relative effect per event month) that the report's
// charts draw, and the only pre-trend test that raises warnings (its leads,
// Holm-adjusted across outcomes); the other estimators are robustness
// checks whose own tests are notes. inference.go says which interval each
// estimator uses at which number of treated clusters; a separated Poisson
// layer fails with ErrSeparated.
//
// Files: estimate.go dispatches; types.go holds the options and results;
// result.go and inference.go the helpers every estimator shares; one file
// per estimator. The package reads only the panel.
package did
