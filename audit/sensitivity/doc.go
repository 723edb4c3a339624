// Package sensitivity measures how sure an event-study conclusion is when
// trends may not have been parallel: the relative-magnitudes restriction of
// Rambachan & Roth (2023, "A more credible approach to parallel trends",
// Review of Economic Studies 90(5)). RelativeMagnitudes gives the robust
// confidence set at each M̄, BreakdownValue the largest M̄ at which the
// conclusion holds, and Breakdown.Sentence says it in plain words.
//
// The event-study coefficients are β = τ + δ: the effect τ (zero before the
// start) plus the bias δ from differing trends. With the reference period
// normalised (δ_0 = 0 between the last lead and the first lag), Δ^RM(M̄)
// allows every change of δ from one period to the next after the start to
// be at most M̄ times the largest such change before it:
//
//	|δ_{t+1} − δ_t| ≤ M̄ · max_{s<0} |δ_{s+1} − δ_s|   for t ≥ 0.
//
// The target θ = l'τ_post (for example the mean of the lags) is then only
// partly identified. Inference follows the paper's: Δ^RM(M̄) is the union
// over the pre-period change s that is largest and its sign of polyhedral
// cones
//
//	Δ_{s,±} = {δ: ±(δ_{s+1} − δ_s) ≥ |δ_{r+1} − δ_r| for every pre r,
//	              M̄·±(δ_{s+1} − δ_s) ≥ |δ_{t+1} − δ_t| for every post t},
//
// each cone is tested with the conditional-least-favourable hybrid test of
// Andrews, Roth & Pakes (2023, "Inference for linear conditional moment
// inequalities", Review of Economic Studies 90(6)), and the robust
// confidence set is the union of the cones' sets: θ̄ is kept when some cone
// does not reject it. Each cone's test has size at most α under its own null
// and the true δ lies in at least one cone, so the union covers θ with
// probability at least 1 − α.
//
// The test of a cone Aδ ≤ 0 at θ̄: with τ_post = Γ⁻¹(θ̄, τ̃) (Γ's first row l'),
// the moments Y = Aβ̂ − A_post Γ⁻¹e₁θ̄ must satisfy E[Y] − Xτ̃ ≤ 0 for some
// nuisance τ̃, X = A_post Γ⁻¹[·, 2:]. The statistic is
// η̂ = min_{τ̃} max_j (Y_j − X_jτ̃)/σ_j, found by its dual linear program
// max γ'Y s.t. γ ≥ 0, X'γ = 0, σ'γ = 1. Given the optimal vertex γ̂ and
// the part of Y independent of γ̂'Y, η̂ is normal with mean γ̂'E[Y] ≤ 0
// under the null and variance γ̂'Σ_Yγ̂, truncated to the interval [V^lo,
// V^up] of values for which γ̂ stays optimal; the ends come in closed form
// from the reduced costs of γ̂'s basis when the vertex is non-degenerate,
// otherwise by bisection on the dual program's value (both checked against
// an enumeration of the dual polytope's vertices). A γ̂ with γ̂'Σ_Yγ̂ = 0
// makes η̂ = γ̂'E[Y] exactly, and the test rejects when η̂ > 0. The hybrid
// first rejects when η̂
// exceeds the least-favourable critical value c_LF (the 1 − κ quantile of
// η̂ when E[Y] = 0, κ = α/10, by simulation), then applies the conditional
// test at level (α − κ)/(1 − κ) with V^up cut at c_LF (c_LF is simulated
// only where the decision depends on it; see reject). With LFDraws = 0 the
// plain conditional test at level α is used.
//
// The robust set of each cone is found on a grid of θ̄ (GridPoints over the
// identified set at β̂ widened by 4 standard errors of l'β̂_post each side,
// widened again while an end is kept) and its outermost crossings refined by
// bisection; the reported interval is the hull of the union. The breakdown
// value M̄* is the largest M̄ at which every cone rejects θ̄ = 0, found by
// bisection on M̄: this assumes the robust set grows with M̄, as the cones
// do (Δ_{s,±}(M̄) are nested in M̄), though the finite-sample tests need not
// be exactly monotone.
//
// No worked example of the paper could be reproduced: its applications'
// event-study estimates ship with the authors' R package, which no Debian
// package carries. The checks are brute-force computations instead (see
// the tests) and simulations of coverage.
package sensitivity
