package power

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"sync"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
)

// Design is one rollout an evaluation could follow. Waves of units start
// MonthsBetween apart, the first Before months after the history ends; the
// last wave is held back until the evaluation, FollowUp months after the
// second-to-last wave starts, and serves as the not-yet-treated comparison.
// UnitCopies repeats every candidate unit (an alternative with more units of
// the same activity); 0 means 1.
type Design struct {
	Name          string `json:"name"`
	Waves         int    `json:"waves"`
	MonthsBetween int    `json:"months_between"`
	FollowUp      int    `json:"follow_up_months"`
	Before        int    `json:"months_before"`
	UnitCopies    int    `json:"unit_copies"`
	// Layers are the layers simulated (nil: every layer of the model); the
	// alternatives usually simulate only the pre-registered outcome.
	Layers []string `json:"layers,omitempty"`
}

// layerIndex returns the model's layers the design simulates.
func (d Design) layerIndex(m *Model) ([]int, error) {
	var out []int
	for l, f := range m.Layers {
		if len(d.Layers) == 0 || slices.Contains(d.Layers, f.Layer) {
			out = append(out, l)
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%w: design %q: none of the layers %v is in the model", ErrPower, d.Name, d.Layers)
	}
	return out, nil
}

// Months returns the evaluation panel's length: Before months, the treated
// waves' starts, and FollowUp months after the last of them.
func (d Design) Months() int { return d.Before + (d.Waves-2)*d.MonthsBetween + d.FollowUp }

// WaveStart returns the panel month wave w (0-based) starts in; the held-back
// last wave starts at Months(), when the evaluation is made.
func (d Design) WaveStart(w int) int {
	if w >= d.Waves-1 {
		return d.Months()
	}
	return d.Before + w*d.MonthsBetween
}

func (d Design) validate() error {
	switch {
	case d.Waves < 2:
		return fmt.Errorf("%w: design %q: at least 2 waves (the last is the comparison)", ErrPower, d.Name)
	case d.MonthsBetween < 1 || d.FollowUp < 1 || d.Before < 2:
		return fmt.Errorf("%w: design %q: months between waves and follow-up at least 1, months before at least 2", ErrPower, d.Name)
	}
	return nil
}

// Assign deals the units (indices into the model's units, repeated for
// UnitCopies) to waves 0..waves−1 with the plan's own procedure and the
// given seed.
type Assign func(units []int, waves int, seed uint64) ([]int, error)

// Options tunes Simulate. The zero value takes the defaults.
type Options struct {
	Worlds  int       // simulated evaluations per design (default 20)
	Effects []float64 // planted relative effects (default DefaultEffects)
	Alpha   float64   // two-sided level (default 0.05)
	Power   float64   // target power of the minimum detectable effect (default 0.8)
	Seed    uint64    // seed of the worlds (default 1)
	Draws   int       // bootstrap draws of each estimate (default 199)
	Workers int       // worlds estimated at once (default GOMAXPROCS)
}

// DefaultEffects are the planted relative effects: falls and rises equally
// spaced in log points, so that each pair has the same size for the
// estimator's log-ratio scale.
var DefaultEffects = []float64{math.Expm1(-0.8), math.Expm1(-0.5), math.Expm1(-0.3), math.Expm1(-0.15), 0,
	math.Expm1(0.15), math.Expm1(0.3), math.Expm1(0.5), math.Expm1(0.8)}

func (o Options) withDefaults() Options {
	if o.Worlds <= 0 {
		o.Worlds = 20
	}
	if len(o.Effects) == 0 {
		o.Effects = DefaultEffects
	}
	if o.Alpha <= 0 {
		o.Alpha = 0.05
	}
	if o.Power <= 0 {
		o.Power = 0.8
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	if o.Draws < 99 {
		o.Draws = 199
	}
	if o.Workers <= 0 {
		o.Workers = runtime.GOMAXPROCS(0)
	}
	return o
}

// Point is the simulated power at one planted effect for one layer and
// design: Detected of Worlds evaluations found an effect of the planted sign
// at the level (p < Alpha; at effect 0, any p < Alpha: the size), with the
// Wilson 95% interval of the rate.
type Point struct {
	Effect   float64    `json:"effect"`
	Detected int        `json:"detected"`
	Worlds   int        `json:"worlds"`
	Power    float64    `json:"power"`
	Wilson95 [2]float64 `json:"wilson95"`
}

// Curve is the power curve of one layer under one design, with its minimum
// detectable falls and rises: the smallest planted effects whose power
// reaches the target, interpolated between the simulated points; nil when no
// simulated effect reaches it.
type Curve struct {
	Design    string   `json:"design"`
	Layer     string   `json:"layer"`
	Points    []Point  `json:"points"`
	MDEFall   *float64 `json:"mde_fall"`
	MDERise   *float64 `json:"mde_rise"`
	Estimated int      `json:"estimated"` // worlds whose estimate was made (the rest: too little activity)
}

// Result is what Simulate found for every design and layer.
type Result struct {
	Designs []Design `json:"designs"`
	Curves  []Curve  `json:"curves"`
	Worlds  int      `json:"worlds"`
	Alpha   float64  `json:"alpha"`
	Target  float64  `json:"power_target"`
	Draws   int      `json:"bootstrap_draws"`
	Seed    uint64   `json:"seed"`
	// MCError is the largest standard error of a simulated power,
	// √(0.25 / Worlds): the Monte Carlo error of each point.
	MCError float64 `json:"monte_carlo_error"`
	Method  string  `json:"method"`
}

// Simulate estimates, for each design, the power of the headline estimator
// (did.Headline with the audit's inference) per layer at each planted
// effect. Each world deals the units to waves with assign, draws counts
// from the model for the evaluation panel (seasonal, trending, negative
// binomial), multiplies the treated units' means from their wave's start by
// 1 + effect, and estimates; the same worlds serve every effect (common
// random numbers), so the curves are smooth in the effect.
func Simulate(ctx context.Context, m *Model, designs []Design, assign Assign, opts Options) (*Result, error) {
	opts = opts.withDefaults()
	if m == nil || len(m.Units) < 2 {
		return nil, fmt.Errorf("%w: at least 2 candidate units needed", ErrPower)
	}
	for _, d := range designs {
		if err := d.validate(); err != nil {
			return nil, err
		}
	}
	res := &Result{Designs: designs, Worlds: opts.Worlds, Alpha: opts.Alpha, Target: opts.Power, Draws: opts.Draws,
		Seed: opts.Seed, MCError: math.Sqrt(0.25 / float64(opts.Worlds)),
		Method: fmt.Sprintf("%s with the audit's inference (%d bootstrap draws), two-sided level %g, detection = p below the level and the planted sign",
			did.Headline, opts.Draws, opts.Alpha)}
	for di, d := range designs {
		li, err := d.layerIndex(m)
		if err != nil {
			return nil, err
		}
		det, est, err := simulateDesign(ctx, m, d, li, assign, opts, uint64(di))
		if err != nil {
			return nil, err
		}
		for l, ml := range li {
			c := Curve{Design: d.Name, Layer: m.Layers[ml].Layer, Estimated: est[l]}
			for e, eff := range opts.Effects {
				k := det[l][e]
				ci, err := checklist.Wilson(k, opts.Worlds, 0.95)
				if err != nil {
					return nil, err
				}
				c.Points = append(c.Points, Point{Effect: eff, Detected: k, Worlds: opts.Worlds,
					Power: float64(k) / float64(opts.Worlds), Wilson95: [2]float64{ci.Lower, ci.Upper}})
			}
			c.MDEFall, c.MDERise = mde(c.Points, opts.Power)
			res.Curves = append(res.Curves, c)
		}
	}
	return res, nil
}

// simulateDesign returns detections per layer and effect, and per layer the
// worlds with an estimate at effect 0.
func simulateDesign(ctx context.Context, m *Model, d Design, li []int, assign Assign, opts Options, di uint64) ([][]int, []int, error) {
	copies := max(1, d.UnitCopies)
	var units []int
	for range copies {
		for u := range m.Units {
			units = append(units, u)
		}
	}
	nl, ne := len(li), len(opts.Effects)
	det := make([][]int, nl)
	for l := range det {
		det[l] = make([]int, ne)
	}
	est := make([]int, nl)
	var mu sync.Mutex
	var firstErr error
	sem := make(chan struct{}, opts.Workers)
	var wg sync.WaitGroup
	for w := range opts.Worlds {
		if ctx.Err() != nil {
			break
		}
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer wg.Done()
			defer func() { <-sem }()
			seed := opts.Seed*1_000_003 + di*10_007 + uint64(w)
			hits, ok, err := oneWorld(ctx, m, d, li, units, assign, opts, seed)
			mu.Lock()
			defer mu.Unlock()
			if err != nil {
				if firstErr == nil {
					firstErr = err
				}
				return
			}
			for l := range hits {
				if ok[l] {
					est[l]++
				}
				for e := range hits[l] {
					if hits[l][e] {
						det[l][e]++
					}
				}
			}
		}()
	}
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	return det, est, firstErr
}

// oneWorld simulates one evaluation of the layers li under every planted
// effect.
func oneWorld(ctx context.Context, m *Model, d Design, li []int, units []int, assign Assign, opts Options, seed uint64) ([][]bool, []bool, error) {
	waves, err := assign(units, d.Waves, seed)
	if err != nil {
		return nil, nil, err
	}
	T, n := d.Months(), len(units)
	p := &panel.Panel{Start: m.End.AddDate(0, -d.Before, 0), Months: T, Units: make([]panel.Unit, n)}
	for i, u := range units {
		first := d.WaveStart(waves[i])
		if first >= T {
			first = -1
		}
		p.Units[i] = panel.Unit{ID: fmt.Sprintf("%s#%d", m.Units[u], i), FirstTreated: first, Weight: 1}
	}
	// Common random numbers: one gamma frailty and one uniform per cell,
	// shared by every effect; the count is the Poisson quantile of the
	// uniform at the cell's mean.
	rng := rand.New(rand.NewPCG(seed, 0x706f776572))
	base := make([][]float64, len(li))
	unif := make([][]float64, len(li))
	names := make([]string, len(li))
	for l, ml := range li {
		f := &m.Layers[ml]
		names[l] = f.Layer
		base[l], unif[l] = make([]float64, n*T), make([]float64, n*T)
		var g distuv.Gamma
		if f.Dispersion > 0 {
			g = distuv.Gamma{Alpha: 1 / f.Dispersion, Beta: 1 / f.Dispersion, Src: rng}
		}
		for i, u := range units {
			for t := range T {
				c := i*T + t
				// The panel starts Before months before the history's
				// end, so its month t is t − Before + 1 after the history's
				// last month.
				mu := f.mean(u, p.MonthTime(t), t-d.Before+1)
				if f.Dispersion > 0 && mu > 0 {
					mu *= g.Rand()
				}
				base[l][c] = mu
				unif[l][c] = rng.Float64()
			}
		}
	}
	hits := make([][]bool, len(li))
	ok := make([]bool, len(li))
	eo := did.DefaultOptions()
	eo.Draws, eo.Seed, eo.Workers = opts.Draws, seed, 1
	eo.Window = did.Window{Pre: d.Before, Post: T}
	for l := range hits {
		hits[l] = make([]bool, len(opts.Effects))
	}
	for e, eff := range opts.Effects {
		p.Outcomes = names
		p.Y = make([][]float64, len(li))
		for l := range li {
			y := make([]float64, n*T)
			for i := range n {
				for t := range T {
					c := i*T + t
					mu := base[l][c]
					if ft := p.Units[i].FirstTreated; ft >= 0 && t >= ft {
						mu *= 1 + eff
					}
					y[c] = poissonQuantile(mu, unif[l][c])
				}
			}
			p.Y[l] = y
		}
		es, err := did.Estimate(ctx, p, eo)
		if err != nil {
			return nil, nil, fmt.Errorf("power: estimate a simulated world: %w", err)
		}
		for _, ef := range es.Effects {
			if ef.Estimator != did.Headline {
				continue
			}
			l := slices.Index(p.Outcomes, ef.Layer)
			if l < 0 || ef.RelativeEffect == nil {
				continue
			}
			if eff == 0 {
				ok[l] = true
			}
			rel := *ef.RelativeEffect
			hits[l][e] = ef.PValue < opts.Alpha && (eff == 0 || (eff < 0) == (rel < 0))
		}
	}
	return hits, ok, nil
}

// poissonQuantile returns the smallest k with P(X ≤ k) ≥ u for X Poisson
// with mean mu.
func poissonQuantile(mu, u float64) float64 {
	if mu <= 0 {
		return 0
	}
	if mu > 500 { // normal approximation with continuity correction
		return math.Max(0, math.Floor(mu+math.Sqrt(mu)*distuv.UnitNormal.Quantile(u)+0.5))
	}
	p := math.Exp(-mu)
	cdf := p
	k := 0.0
	for cdf < u && k < 10*mu+100 {
		k++
		p *= mu / k
		cdf += p
	}
	return k
}

// mde interpolates, on the falls and on the rises separately, the smallest
// effect size whose power reaches target; power is made non-decreasing in
// the effect's size first (the running maximum), since it is so in truth.
func mde(pts []Point, target float64) (fall, rise *float64) {
	side := func(sign float64) *float64 {
		type xy struct{ x, y float64 }
		var s []xy
		for _, p := range pts {
			if p.Effect == 0 {
				s = append(s, xy{0, p.Power})
			} else if p.Effect*sign > 0 {
				s = append(s, xy{math.Abs(math.Log1p(p.Effect)), p.Power})
			}
		}
		slices.SortFunc(s, func(a, b xy) int { return int(math.Copysign(1, a.x-b.x)) })
		for i := 1; i < len(s); i++ {
			s[i].y = math.Max(s[i].y, s[i-1].y)
		}
		for i := 1; i < len(s); i++ {
			if s[i].y >= target {
				a, b := s[i-1], s[i]
				x := b.x
				if b.y > a.y && a.y < target {
					x = a.x + (target-a.y)/(b.y-a.y)*(b.x-a.x)
				}
				v := math.Expm1(sign * x)
				return &v
			}
		}
		return nil
	}
	return side(-1), side(1)
}
