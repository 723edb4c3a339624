package sim

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
)

// Retention plants newcomers who keep to one district: each starts on a day
// of a month, edits in its home district on the same day of every following
// month while it stays, and stops after each month with a monthly
// probability. Newcomers starting in a treated district in or after its
// import month stop with that probability times HazardRatio. It adds to the
// world's other contributors; Config.Retention nil leaves a world as it was.
type Retention struct {
	PerDistrictMonth float64 `json:"per_district_month"` // mean newcomers starting per district and month
	StopMonthly      float64 `json:"stop_monthly"`       // monthly probability that a newcomer stops
	HazardRatio      float64 `json:"hazard_ratio"`       // multiplier of StopMonthly for newcomers in import areas after the import
	// Frailty is the standard deviation of a district's log multiplier of
	// StopMonthly (districts differ in how long their newcomers stay).
	Frailty       float64 `json:"frailty"`
	EditsPerMonth float64 `json:"edits_per_month"` // mean edits per month while editing (at least 1)
}

// DefaultRetention returns a plan with a third of newcomers still editing a
// year on and a hazard ratio of 1.6 after imports.
func DefaultRetention() Retention {
	return Retention{PerDistrictMonth: 1.5, StopMonthly: 0.09, HazardRatio: 1.6, Frailty: 0.2, EditsPerMonth: 3}
}

func (r Retention) validate() error {
	finite := func(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
	switch {
	case !finite(r.PerDistrictMonth) || r.PerDistrictMonth < 0 || r.PerDistrictMonth > 1000:
		return fmt.Errorf("%w: retention newcomers per district-month must be in [0, 1000], got %v", ErrConfig, r.PerDistrictMonth)
	case !finite(r.StopMonthly) || r.StopMonthly <= 0 || r.StopMonthly >= 1:
		return fmt.Errorf("%w: retention monthly stop probability must be in (0, 1), got %v", ErrConfig, r.StopMonthly)
	case !finite(r.HazardRatio) || r.HazardRatio <= 0 || r.HazardRatio*r.StopMonthly >= 1:
		return fmt.Errorf("%w: retention hazard ratio must be positive and keep the stop probability below 1, got %v", ErrConfig, r.HazardRatio)
	case !finite(r.Frailty) || r.Frailty < 0 || r.Frailty > 2:
		return fmt.Errorf("%w: retention frailty must be in [0, 2], got %v", ErrConfig, r.Frailty)
	case !finite(r.EditsPerMonth) || r.EditsPerMonth < 1 || r.EditsPerMonth > 50:
		return fmt.Errorf("%w: retention edits per month must be in [1, 50], got %v", ErrConfig, r.EditsPerMonth)
	}
	return nil
}

// stop is the monthly stop probability in a district with log multiplier f.
func (r Retention) stop(f float64, after bool) float64 {
	h := r.StopMonthly * math.Exp(f)
	if after {
		h *= r.HazardRatio
	}
	return math.Min(h, 0.999)
}

// RetainedShare returns the planted probability that a newcomer still edits
// k months after its first edit (an edit on that day or later), for
// newcomers in import areas after the import (after true) or anywhere else,
// averaged over the districts' frailty: E[(1 − h)^k], integrated over the
// normal log multiplier on a fine grid of its quantiles.
func (r Retention) RetainedShare(k int, after bool) float64 {
	const grid = 4000
	s := 0.0
	for i := 0; i < grid; i++ {
		z := distuv.UnitNormal.Quantile((float64(i) + 0.5) / grid)
		s += math.Pow(1-r.stop(r.Frailty*z, after), float64(k))
	}
	return s / grid
}

// PlantedDiD returns the planted difference-in-differences of the k-month
// retention share: import areas after minus before, less comparison areas'
// change (none is planted there).
func (r Retention) PlantedDiD(k int) float64 {
	return r.RetainedShare(k, true) - r.RetainedShare(k, false)
}

// retainer is a newcomer of the retention plan while it edits.
type retainer struct {
	uid      int
	district int32
	start    time.Time // first edit; later sessions on the same day of later months
	months   int       // months since the first
	stop     float64   // monthly stop probability
}

// retentionState is the plan's running state: its own random stream, so a
// world's other draws do not depend on it, and the newcomers still editing.
type retentionState struct {
	rng     *rand.Rand
	frailty []float64
	active  []retainer
}

// retentionSessions returns the sessions of the plan's newcomers in study
// month m (none in the baseline month), numbered from seq, adding the month's
// new accounts; they never enter the other contributors' draws.
func (g *gen) retentionSessions(m int, seq int) []session {
	plan := g.cfg.Retention
	if plan == nil || m < 0 {
		return nil
	}
	if g.ret == nil {
		g.ret = &retentionState{rng: rand.New(rand.NewPCG(g.cfg.Seed, 0x6e6577636f6d6572))}
		for range g.districts {
			g.ret.frailty = append(g.ret.frailty, plan.Frailty*g.ret.rng.NormFloat64())
		}
	}
	st := g.ret
	r := st.rng
	pois := func(l float64) int {
		if l <= 0 {
			return 0
		}
		return int(distuv.Poisson{Lambda: l, Src: r}.Rand())
	}
	month := g.cfg.Start.AddDate(0, m, 0)
	var out []session
	next := st.active[:0]
	for _, a := range st.active {
		a.months++
		out = append(out, g.retainerSession(a, a.start.AddDate(0, a.months, 0), seq+len(out), pois))
		if r.Float64() >= a.stop {
			next = append(next, a)
		}
	}
	st.active = next
	for di := range g.districts {
		d := &g.districts[di]
		after := d.start >= 0 && m >= d.start
		for range pois(plan.PerDistrictMonth * g.cfg.Scale) {
			uid := len(g.users) + 1
			g.users = append(g.users, user{uid: uid, name: inventHandle(r, uid)})
			g.cum = append(g.cum, lastOr0(g.cum)) // weight 0: never drawn for other work
			at := month.AddDate(0, 0, r.IntN(28)).Add(time.Duration(r.IntN(20*3600)) * time.Second)
			a := retainer{uid: uid, district: int32(di), start: at, stop: plan.stop(st.frailty[di], after)}
			out = append(out, g.retainerSession(a, at, seq+len(out), pois))
			if r.Float64() >= a.stop {
				st.active = append(st.active, a)
			}
		}
	}
	return out
}

// retainerSession is one month's session of a newcomer: a new feature (an
// edit that always succeeds) and attribute edits.
func (g *gen) retainerSession(a retainer, at time.Time, seq int, pois func(float64) int) session {
	acts := []layer{layerNewFeature}
	for range pois(g.cfg.Retention.EditsPerMonth - 1) {
		acts = append(acts, layerAttribute)
	}
	return session{start: at.Unix(), seq: seq, district: a.district, uid: a.uid, actions: acts, step: 60}
}
