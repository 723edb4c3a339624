// Package sequential gives the boundaries of group-sequential interim looks:
// two-sided critical values for K looks at an outcome's accumulating
// evidence, spending the type I error with the Lan–DeMets approximation to
// O'Brien–Fleming boundaries, so that checking between the waves of a
// rollout does not inflate false alarms beyond the planned level.
package sequential
