// Package poisson is the Poisson pseudo-maximum-likelihood fit behind the
// headline estimator of audit/did (ppml-twfe): E[y | ·] = exp(α_u + γ_t +
// x'β) with one fixed effect per stacked unit and one per stack month
// (Santos Silva & Tenreyro 2006, REStat 88(4); Wooldridge 1999, J.
// Econometrics 90(1)), the fixed effects concentrated out so that each
// Newton step costs one pass over the data, its CR1 covariance, the
// per-cluster scores and Hessian that the score bootstrap of audit/infer
// reuses, and the restricted fit with β held fixed (FitStackedAt). It
// knows nothing of panels or imports: audit/did stacks the panel into
// Blocks. audit/did's tests check it against a dummy-variable fit, itself
// checked against R's glm with sandwich::vcovCL.
package poisson
