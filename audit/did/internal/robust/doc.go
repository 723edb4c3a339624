// Package robust is the numerical kit the estimators of audit/did share:
// cluster-robust (CR1) sandwich variances and Wald tests, normal or t(G−1)
// critical values and p-values by the treated cluster count, the joint test
// of event-study leads binned with the Hotelling T² correction (LeadTest),
// wild bootstrap weights (Rademacher, Webb's six-point) and shared draws,
// influence-function inference from cluster sums, the weighted logistic
// regression of the doubly robust propensity score, type 7 quantiles and
// weighted group demeaning. It holds no estimator and knows no panel.
package robust
