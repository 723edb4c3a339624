package audit

import (
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/study"
)

// WriteUnitSummary prints how many units play each role in a study.
func WriteUnitSummary(w io.Writer, st *study.Study) error {
	c := st.Counts("")
	_, err := fmt.Fprintf(w, "units: %d treated, %d matched controls, %d unmatched, %d dropped, %d excluded (of %d)\n",
		c.Treated, c.Controls, c.Unmatched, c.Dropped, c.Excluded, c.Total)
	return err
}

// WriteBalance prints the balance table: standardized mean differences of
// each covariate before and after matching, flagged at |SMD| >= 0.1.
func WriteBalance(w io.Writer, rows []match.BalanceRow) error {
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "COVARIATE\tMEAN TREATED\tMEAN CONTROL\tSMD BEFORE\tSMD AFTER\t")
	for _, b := range rows {
		flag := ""
		if b.MatchedImbalanced {
			flag = "  <- above 0.1"
		}
		fmt.Fprintf(tw, "%s\t%.3f\t%.3f\t%+.3f\t%+.3f%s\t\n", b.Name, b.MeanTreated, b.MatchedMeanControl, orZero(b.SMD), orZero(b.MatchedSMD), flag)
	}
	return tw.Flush()
}

// WriteEffects prints one short table per layer: each estimator's relative
// effect with its 95% interval, the ATT, p-value, pre-trend p-value, method
// and unit counts.
func (r *Report) WriteEffects(w io.Writer) error {
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	last := ""
	for _, e := range r.LayerEffects() {
		if e.Layer != last {
			if last != "" {
				fmt.Fprintln(tw, "\t\t\t\t\t\t\t")
			}
			fmt.Fprintf(tw, "%s\tRELATIVE EFFECT [95%% CI]\tATT/MONTH\tP\tPRE-TREND P\tMETHOD\tUNITS T/C\t\n", upper(e.Layer))
			last = e.Layer
		}
		fmt.Fprintf(tw, "  %s\t%s\t%+.3f\t%s\t%s\t%s\t%d/%d\t\n", e.Estimator, relText(e), e.ATT, pText(e.PValue),
			pPtr(e.PreTrendP), e.Method, e.TreatedUnits, e.ControlUnits)
	}
	return tw.Flush()
}

func upper(s string) string {
	b := []byte(s)
	for i, c := range b {
		if 'a' <= c && c <= 'z' {
			b[i] = c - 32
		}
	}
	return string(b)
}

// relText formats a relative effect and its interval as percentages, or the
// ATT interval when no relative effect was given.
func relText(e did.Effect) string {
	if e.RelativeEffect == nil {
		return fmt.Sprintf("n/a (ATT CI %+.2f to %+.2f)", e.CI95[0], e.CI95[1])
	}
	return fmt.Sprintf("%+.1f%% [%+.1f%%, %+.1f%%]", 100**e.RelativeEffect, 100*e.CI95[0], 100*e.CI95[1])
}

func pText(p float64) string {
	if math.IsNaN(p) {
		return "-"
	}
	if p < 0.001 {
		return "<0.001"
	}
	return fmt.Sprintf("%.3f", p)
}

func pPtr(p *float64) string {
	if p == nil {
		return "-"
	}
	return pText(*p)
}
