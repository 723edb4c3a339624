package audit

import (
	"context"
	"fmt"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/rules"
)

// AssessOptions configures Assess.
type AssessOptions struct {
	// Proposal tunes the assessment itself; its Units are also the units of
	// the past imports' audits, and nil Episodes means detecting them with the
	// rules.
	Proposal proposal.AssessOptions
	// Audit configures the audits of the nearest past imports.
	Audit Options
	// SkipPast leaves the nearest past imports unaudited: faster, without
	// what followed them or the keys they neglected.
	SkipPast bool
}

// Assess is the whole assessment of a proposal: the store's imports are
// detected (unless given), the proposal is profiled and compared with them
// (proposal.Assess), and the nearest past imports are audited (AssessPast)
// unless opts.SkipPast is set.
func Assess(ctx context.Context, src Source, r *rules.RuleSet, p *proposal.Proposal, opts AssessOptions) (*proposal.Assessment, error) {
	po := opts.Proposal
	if po.Episodes == nil {
		eps, err := episode.Detect(ctx, src, r, episode.Options{})
		if err != nil {
			return nil, fmt.Errorf("detect imports: %w", err)
		}
		po.Episodes = eps
	}
	a, err := proposal.Assess(ctx, src, r, p, po)
	if err != nil {
		return nil, err
	}
	if opts.SkipPast || len(a.Nearest) == 0 || po.Units == nil {
		return a, nil
	}
	err = AssessPast(ctx, a, src, r, PastOptions{Units: po.Units, Episodes: po.Episodes, Audit: opts.Audit})
	return a, err
}
