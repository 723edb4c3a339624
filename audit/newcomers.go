package audit

import (
	"context"
	"fmt"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/retention"
	"github.com/loadwake/loadwake/audit/study"
)

// newcomerRetention follows the newcomers of a study's areas (package
// retention) with the audit's window, draws and seed. A study whose
// newcomers cannot be followed gives no section and a note saying why.
func newcomerRetention(ctx context.Context, src Source, st *study.Study, units study.UnitIndex, ep *episode.Episode,
	others []episode.Episode, so study.Options, eo did.Options) (*retention.Result, string, error) {
	ro := retention.Options{Before: so.Before, After: so.After, Draws: eo.Draws, Seed: eo.Seed,
		OtherImports: append(study.OtherChangesets(ep.ID, others), so.OtherImports...)}
	s, err := retention.Scan(ctx, src, st, units, ro)
	if err != nil {
		if ctx.Err() != nil {
			return nil, "", err
		}
		return nil, fmt.Sprintf("no newcomer retention section: %v", err), nil
	}
	r, err := retention.Estimate(ctx, s, ro)
	if err != nil {
		if ctx.Err() != nil {
			return nil, "", err
		}
		return nil, fmt.Sprintf("no newcomer retention section: %v", err), nil
	}
	return r, "", nil
}
