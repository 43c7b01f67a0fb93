// Package assign forms matched sets: it decides which control units stand
// in for which treated units.
//
// # Greedy nearest-neighbour matching
//
// Greedy matches on one scalar score, normally the logit of the propensity
// score (Rosenbaum & Rubin 1985, Am Stat 39:33, recommend matching on the
// logit with a caliper; Austin 2011, Pharm Stat 10:150, gives the usual
// caliper width of 0.2 standard deviations of the logit). The caller converts
// such a relative width into the absolute Options.Caliper, so this package
// never has to decide which standard deviation is meant.
//
// The conventions, stated once so that every caller and test reads them the
// same way:
//
//   - Treated units are processed one at a time in Options.Order
//     (high-score-first, low-score-first, seeded random, or unit order:
//     ascending index; equal scores are processed in ascending index).
//     Callers pass units in canonical order (ascending unit id), so the
//     index order is fixed by the data. See Austin
//     (2014), Stat Med 33:1057, for how the order affects greedy matching.
//   - Per treated, k nearest in turn: the unit being processed takes its
//     nearest available control, then its next nearest, up to
//     Options.Controls, before the next treated unit takes any. A treated
//     unit may therefore end with fewer than Options.Controls controls (a
//     partial set); one with no available control at all gets no set.
//   - Distance is d = |score_t - score_c| computed in float64. A control is
//     inside the caliper when d <= Caliper (equality counts as inside).
//     Caliper 0 means no caliper.
//   - Ties in d are broken by the lower input index of the control. This
//     covers equal control scores and controls on opposite sides of the
//     treated score at the same distance.
//   - Units match only within an exact-match stratum (equal stratum values)
//     and only when eligible (for example inside common support).
//   - Without reuse a control serves at most one treated unit; with reuse it
//     may serve any number, and each treated unit simply gets its k nearest.
//   - Output is a deterministic function of the inputs and Options (the
//     random order draws from math/rand/v2's PCG seeded with Options.Seed).
//
// # Cost
//
// Controls are sorted once per stratum by (score, index): O(n log n).
// Without reuse, two union-find arrays with path halving over that sorted
// array ("next unused position to the right / left", Tarjan & van Leeuwen
// 1984, J ACM 31:245) find the nearest unused control on each side of a
// binary-search position in amortised near-constant time. With reuse, the k
// nearest are read off by walking outwards from the binary-search position.
// No step scans all controls for a treated unit.
//
// # Optimal, full matching and subclassification
//
// Optimal (1:k without reuse) and Full (full matching with ratio bounds)
// solve minimum-cost flow problems with the solver in package
// counterpart/match/assign/flow, on a sparse candidate graph: each treated
// unit's nearest k+2 (Full: 2) controls on each side in score order inside
// the caliper, the control of the same rank quantile, and for Full each
// control's nearest treated unit on each side. The answer is then certified
// against every eligible pair, not only the candidates: with the final node
// potentials h, a pair (t, c) outside the graph can only improve the
// matching if its reduced cost |s_t - s_c| + h_t - h_c is negative, and for
// all pairs of t at once that is two range-maximum queries over the
// controls sorted by score (of h_c + s_c on the left of s_t, of h_c - s_c on
// the right), O(n log n) per check. A treated unit with a violating pair
// gets that pair and a doubled window on that side, and the network is
// solved again from zero flow, until no pair violates. Certificate reports
// the rounds, the candidate arcs and whether the proof succeeded. Both
// objectives put the number of unmatched units first (exact integer
// penalties, see Optimal and Full), distance second.
//
// Typical calls (Caliper absolute, on the scale of score):
//
//	sets, cert, err := assign.Optimal(logitPS, treated, stratum, eligible, assign.Options{Controls: 1, Caliper: 0.2 * sdLogit})
//	groups, cert, err := assign.Full(logitPS, treated, stratum, eligible, assign.FullOptions{Caliper: c, MaxControls: 4, MaxTreated: 4})
//	sub, err := assign.Subclasses(ps, treated, eligible, 0) // 5 quantile subclasses
//	w, err := assign.SubclassWeights(sub, treated, assign.ATT)
//
// Speed: Full starts each solve from the nearest-partner cover (package
// flow, warmStart), so its searches stay local; 50,000 units take about
// 0.1 s and time grows roughly linearly. Ratio bounds are slower: the
// certificate widens the candidate windows over more rounds. See the
// benchmarks in bench_test.go.
//
// # Mahalanobis distance inside a propensity caliper
//
// Options.Metric (zero value: the score distance above, unchanged) makes
// Greedy and Optimal rank the controls inside the caliper by a Mahalanobis
// or rank-based Mahalanobis distance on chosen covariates (Rosenbaum &
// Rubin 1985, Am Stat 39:33; Rosenbaum 2010, Design of Observational
// Studies, §8.3); see Metric for the covariance used. The caliper on the
// score still decides which pairs may match, so it is required. Greedy
// then compares each treated unit with every unused control in its
// caliper window (O(window p²) per treated unit); Optimal puts every
// within-caliper pair into the network, which makes its certificate
// complete without widening rounds, and refuses above Metric.MaxPairs
// pairs (default 25 million).
//
// # What this package must not do
//
// It is a pure function of plain slices. It must not touch databases, files,
// the network or the terminal, must not import counterpart/warehouse or any
// database package, and keeps no global state. Length mismatches between
// the input slices are programmer errors and panic; bad data (a non-finite
// score) and bad options are returned as errors.
package assign
