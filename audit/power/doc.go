// Package power tells, before a rollout starts, which effects its evaluation
// could detect. It reads the candidate units' past activity from the store
// (Activity: a unit-by-month panel of the four layers), fits per layer each
// unit's level, a shared seasonal profile, a shared trend and negative
// binomial over-dispersion (Fit), and simulates the planned evaluation many
// times with planted effects, estimating each invented panel with the audit's
// own headline estimator and inference (did.Estimate, did.Headline), so the
// power is that of the real evaluation (Simulate). Curves turns the
// simulations into power curves and minimum detectable effects with their
// Monte Carlo error; Charts draws them.
package power
