// Package survival holds the survival statistics of the retention study:
// the Kaplan–Meier estimator with Greenwood's variance and log-log confidence
// bands (KaplanMeier), the log-rank test, stratified or not (LogRank), and
// the Cox proportional-hazards model with stratified baselines, Efron's or
// Breslow's handling of tied times and cluster-robust standard errors (Cox).
//
// Each follows the formulas of Therneau & Grambsch (2000), "Modeling Survival
// Data", chapters 2-3, and is checked against R's survival package on its
// lung data (testdata/R). Efron's ties are the default, as in R's coxph.
// The package knows nothing of OSM: it reads times, event flags, groups,
// strata, clusters and covariates.
package survival
