// Package match pairs import areas with comparable untouched areas before
// the comparison: nearest-neighbour matching with replacement on Mahalanobis
// distance (Nearest) or on the logit of a propensity score from a logistic
// regression (Propensity, FitLogit), with an optional caliper, and the
// balance table of standardized mean differences before and after matching
// (Balance; Austin 2009).
//
// Results are checked against R's MatchIt and glm on the LaLonde data
// (testdata/R).
package match
