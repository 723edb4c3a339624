// Package infer holds inference primitives for estimates whose uncertainty
// comes from few clusters, and in particular from few treated clusters: the
// case of an import that covers a handful of areas. The difference-in-differences
// estimators build their designs and call these; the package
// itself knows nothing of panels or imports and imports only the standard
// library and gonum.
//
// # Linear models
//
// FitOLS fits y = Xβ + u by weighted least squares with the CR1 cluster-robust
// covariance (Liang & Zeger 1986 with the small-sample factor
// G/(G−1)·(N−1)/(N−K) of R's sandwich::vcovCL(type = "HC1") and Stata's
// vce(cluster)). A one-way fixed effect nested in the clusters may be
// partialled out (Design.Absorb); other fixed effects go into X.
//
// OLS.WildTest is the restricted wild cluster bootstrap-t (WCR) of one linear
// restriction a'β = r with its interval by test inversion. The null is
// imposed on the bootstrap data-generating process, which is what keeps its
// size close to nominal with few clusters (Cameron, Gelbach & Miller 2008,
// Review of Economics and Statistics 90(3); MacKinnon & Webb 2017, Journal of
// Applied Econometrics 32(2)). The algebra follows Roodman, MacKinnon,
// Nielsen & Webb (2019, "Fast and wild: bootstrap inference in Stata using
// boottest", Stata Journal 19(1)): with A = (X'WX)⁻¹, unrestricted cluster
// scores ŝ_g = X_g'W_g û_g and blocks H_g = X_g'W_g X_g, the restricted
// scores are s̃_g = ŝ_g + δ·H_g A a/(a'Aa) with δ = a'β̂ − r, and for weights v
//
//	a'β̂* − r      = Σ_g v_g a'A s̃_g
//	a'A s*_h       = v_h a'A s̃_h − (A H_h A a)'·Σ_g v_g s̃_g
//	SE*²           = CR1 factor · Σ_h (a'A s*_h)²
//
// Every term is affine in δ, so each draw keeps five numbers (numerator and
// the three coefficients of the quadratic SE*²) and the p-value of any other
// null value costs O(B): the interval is found by root finding on that
// p-value function (WildResult.PAt). Setup is O(N·k²), each draw O(G·k).
//
// OLS.Wald is the joint Wald test of q linear restrictions Rβ = r (the
// leads of an event study) with the CR1 covariance, reported as chi-square
// and as W/q against F(q, H − 1), H the smaller of the treated and untreated
// cluster counts (reasons and sources at Wald); OLS.WildWald bootstraps the
// same statistic with the joint null imposed.
//
// # Choosing weights and methods by treated clusters
//
// ChooseWeights picks Webb's six-point weights when the smaller of the
// treated and untreated cluster counts is below WebbBelow (12), Rademacher
// otherwise; with Rademacher weights and 2^G ≤ B draws all sign vectors are
// enumerated. MacKinnon & Webb (2017; 2018, Econometrics Journal 21(2)) show
// that what governs the wild bootstrap's reliability is the number of treated
// clusters, not the total: with one or two treated clusters the restricted
// bootstrap under-rejects severely and its intervals are very wide.
// ChooseMethod adds the step this package's simulation supports: below
// MinTreatedForInterval (4) treated clusters, report the randomization test
// and no interval.
//
// Measured in the simulation (sim_test.go; 1000 null panels per cell, G = 20
// and 40 clusters of 1–12 units, heteroskedastic clustered errors, rejection
// at 5% with Wilson 95% intervals in the tests' log): the CR1 t test on G − 1
// degrees of freedom rejects 50–59% with one treated cluster, 24% with two
// and 9–11% with three or four; WCR rejects 0–0.1% with one or two, 1.5–1.8%
// with three, 3.3–3.5% with four and 4.2–6.2% with 8 to 20; randomization
// 4.1–6.0% throughout.
//
// # Randomization
//
// Randomization is Fisher's exact test of the sharp null of no effect on any
// unit in any period, by re-dealing the observed start periods to other
// eligible units: exact by enumeration when the reassignments are few,
// Monte Carlo with the +1 correction otherwise.
//
// # Poisson and other M-estimators
//
// ScoreBootstrap tests one linear restriction a'β = b0 of a Poisson or other
// M-estimator fitted on clustered data by the wild score bootstrap with the
// null imposed (Kline & Santos 2012, Journal of Econometric Methods 1(1)). A
// ScoreFitter callback refits the model under the restriction; the cluster
// scores at the restricted estimate are perturbed with Rademacher or Webb
// weights (every weight vector when there are at most Draws of them) and the
// p-value is the share of bootstrap score statistics at least as large as the
// observed one. The interval inverts the same test over b0 with the same
// draws, so p-values and intervals always agree; an end that nothing within
// MaxSE standard errors rejects is infinite, as happens with very few treated
// clusters. The small-sample factor G/(G−1)·(N−1)/(N−K), or G/(G−1) without N
// and K, scales the statistic only.
//
// # Sensitivity to parallel trends
//
// RelativeMagnitudes and RMBreakdownValue implement the relative-magnitudes
// restriction Δ^RM(M̄) of Rambachan & Roth (2023, Review of Economic Studies,
// "A more credible approach to parallel trends") on an event study with a
// normalised reference period: the identified set by linear programming, the
// robust confidence set as the union over the restriction's polyhedral cones
// of the sets kept by the conditional–least-favourable hybrid test of
// Andrews, Roth & Pakes (2023), and the breakdown value M̄*, the largest M̄ at
// which that set excludes zero, in plain words by RMBreakdown.Sentence.
//
// # Multiplicity
//
// Holm gives Holm's (1979) step-down adjusted p-values (R's
// p.adjust(method = "holm")) for a family of warnings. Benjamini–Hochberg
// q-values already exist as audit's BHAdjust and are not repeated here.
//
// # Checks
//
// The tests check the CR1 t statistics and Wald statistics against R's
// sandwich::vcovCL on Petersen's data (values made once by
// testdata/R/petersen_infer.R), the bootstrap against a brute-force refit of
// every bootstrap sample, the interval ends against the p-value function, and
// size by simulation (quick version in the normal tests, the long one behind
// the validate build tag).
package infer
