// Package planrun is the command-line side of a rollout plan outside the plan
// command: `audit --plan` (the plan's waves as the treatment, the
// randomization test and the deviations, plan-evaluation.json) and
// `simulate --plan` (an invented world whose import follows the plan's waves).
// The work is done in audit/rollout and audit/sim; this package turns flags
// into their calls.
package planrun
