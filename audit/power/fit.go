package power

import (
	"fmt"
	"math"
	"time"

	"github.com/loadwake/loadwake/audit/panel"
)

// maxTrend bounds the fitted trend (log growth per month): extrapolating a
// steeper one over years of follow-up would invent activity.
const maxTrend = 0.03

// LayerFit is one layer's activity model: unit u's expected count in month
// t is Level[u] · Season[calendar month of t] · exp(Trend · (t − t₀)) with t₀
// the history's last month, and counts are negative binomial with
// Var = μ + Dispersion·μ² (Dispersion 0: Poisson).
type LayerFit struct {
	Layer      string      `json:"layer"`
	Level      []float64   `json:"-"`               // per unit: expected events in the history's last month, before the seasonal factor
	MeanLevel  float64     `json:"mean_level"`      // mean of Level
	Season     [12]float64 `json:"seasonal_factor"` // by calendar month, January first; mean 1
	Trend      float64     `json:"trend"`           // log growth per month, within ±maxTrend
	Dispersion float64     `json:"dispersion"`      // negative binomial 1/θ, method of moments
	ZeroUnits  int         `json:"zero_units"`      // units with no event of the layer in the history
}

// Model is the fitted activity of a set of candidate units: one LayerFit per
// layer, over the history that ended at End (the month after its last).
type Model struct {
	Units  []string   `json:"units"`
	End    time.Time  `json:"history_end"`
	Months int        `json:"history_months"`
	Layers []LayerFit `json:"layers"`
}

// Fit fits each outcome of the history panel h over its units: levels are
// the trend is the log ratio of the later half's events to the earlier
// half's over the months between the halves' centres (0 with under 24
// months of history, where it cannot be told from the season); seasonal factors are
// the calendar months' shares of the detrended events (pooled over units, 1
// with under 24 months of history); a unit's level is its events over the
// sum of the seasonal and trend factors of the months, its expected count in
// the history's last month before the seasonal factor; the dispersion is the
// method-of-moments estimate Σ[(y − μ)² − y] / Σμ² around the fitted means,
// 0 when negative (Cameron & Trivedi 2013, §3.2, NB2).
func Fit(h *panel.Panel) (*Model, error) {
	if h == nil || h.Months < 2 || len(h.Units) == 0 {
		return nil, fmt.Errorf("%w: at least 2 months and 1 unit of history needed", ErrPower)
	}
	n, T := len(h.Units), h.Months
	m := &Model{End: h.Start.AddDate(0, T, 0), Months: T}
	for _, u := range h.Units {
		m.Units = append(m.Units, u.ID)
	}
	for o, name := range h.Outcomes {
		y := h.Y[o]
		f := LayerFit{Layer: name, Level: make([]float64, n)}
		tot := make([]float64, T)
		all := 0.0
		for u := range n {
			s := 0.0
			for t := range T {
				s += y[u*T+t]
				tot[t] += y[u*T+t]
			}
			if s == 0 {
				f.ZeroUnits++
			}
			all += s
		}
		half := T / 2
		lo, hi := 0.0, 0.0
		for t := range T {
			if t < half {
				lo += tot[t]
			} else if t >= T-half {
				hi += tot[t]
			}
		}
		// With under two years of history a trend cannot be told from the
		// seasonal cycle (half a year of rising activity looks like
		// growth): it is left at 0 rather than extrapolated.
		if lo > 0 && hi > 0 && T >= 24 {
			f.Trend = math.Max(-maxTrend, math.Min(maxTrend, math.Log(hi/lo)/float64(T-half)))
		}
		for i := range f.Season {
			f.Season[i] = 1
		}
		if T >= 24 && all > 0 {
			// Calendar months' shares of the detrended totals.
			var sum, cnt [12]float64
			norm := 0.0
			for t := range T {
				v := tot[t] / math.Exp(f.Trend*float64(t-(T-1)))
				sum[int(h.MonthTime(t).Month())-1] += v
				cnt[int(h.MonthTime(t).Month())-1]++
				norm += v
			}
			norm /= float64(T)
			for i := range f.Season {
				if cnt[i] > 0 {
					f.Season[i] = math.Max(0.1, sum[i]/cnt[i]/norm)
				}
			}
		}
		// Levels at the history's last month: the units' shares of the
		// detrended, deseasonalized total.
		den0 := 0.0
		for t := range T {
			den0 += f.Season[int(h.MonthTime(t).Month())-1] * math.Exp(f.Trend*float64(t-(T-1)))
		}
		for u := range n {
			s := 0.0
			for t := range T {
				s += y[u*T+t]
			}
			f.Level[u] = s / den0
			f.MeanLevel += f.Level[u] / float64(n)
		}
		num, den := 0.0, 0.0
		for u := range n {
			for t := range T {
				mu := f.mean(u, h.MonthTime(t), t-(T-1))
				d := y[u*T+t] - mu
				num += d*d - y[u*T+t]
				den += mu * mu
			}
		}
		if den > 0 && num > 0 {
			f.Dispersion = num / den
		}
		m.Layers = append(m.Layers, f)
	}
	return m, nil
}

// mean is the expected count of unit u in the month starting at month,
// dt months after the history's last month.
func (f *LayerFit) mean(u int, month time.Time, dt int) float64 {
	return f.Level[u] * f.Season[int(month.Month())-1] * math.Exp(f.Trend*float64(dt))
}
