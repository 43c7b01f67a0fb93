package sensitivity

import (
	"math"

	"counterpart/match/balance"
	"counterpart/match/effect"
)

// RareOutcome is the prevalence under which an odds ratio is read as a
// risk ratio for E-values (VanderWeele & Ding 2017: "rare", under about
// 15 %).
const RareOutcome = 0.15

// OutcomeScale returns what the E-value conversions need about an
// outcome: its pooled unadjusted SD (continuous outcomes; √((s₁² + s₀²)/2))
// and its share of events (binary outcomes), over the non-missing values.
func OutcomeScale(y []float64, z []bool) (sd, prevalence float64) {
	ys := make([]float64, 0, len(y))
	var zz []bool
	var events float64
	for i, v := range y {
		if !math.IsNaN(v) {
			ys = append(ys, v)
			zz = append(zz, z[i])
			events += v
		}
	}
	prevalence = events / float64(len(ys))
	return balance.PooledSD(balance.Variable{Values: ys}, zz), prevalence
}

// EValueFor returns the E-values (VanderWeele & Ding 2017, Ann Intern Med
// 167:268) of one effect row: on a risk ratio directly; on an odds ratio
// through the rare- or common-outcome conversion (prevalence under
// RareOutcome is rare); on a continuous difference through the
// standardised effect d = estimate / sd with RR ≈ exp(0.91·d). A binary
// outcome's (events) risk difference gets none: its risk-ratio row carries
// them. ok is false where no E-value is defined.
func EValueFor(contrast string, estimate, se float64, events bool, sd, prevalence float64) (EValue, bool) {
	var logRR, s float64
	switch contrast {
	case effect.ContrastRiskRatio:
		logRR, s = math.Log(estimate), se
	case effect.ContrastOddsRatio:
		rr, sl := RRFromOR(estimate, se, prevalence < RareOutcome)
		logRR, s = math.Log(rr), sl
	default:
		if events || !(sd > 0) {
			return EValue{}, false
		}
		rr, sl := RRFromSMD(estimate/sd, se/sd)
		logRR, s = math.Log(rr), sl
	}
	ev, err := EValueLog(logRR, s)
	return ev, err == nil
}

// PairGamma is the sensitivity value of matched pairs: the Γ at which the
// upper bound of the one-sided p-value, in the direction of the estimate,
// first exceeds alpha (signed-rank test for continuous outcomes, McNemar's
// test for events; Rosenbaum 2002, Observational Studies, ch. 4). pairs
// hold the treated and control unit of each pair; pairs with a missing
// outcome are left out. ok is false where no Γ is defined.
func PairGamma(y []float64, pairs [][2]int, events bool, estimate, alpha float64) (float64, bool) {
	sign := 1.0
	if estimate < 0 {
		sign = -1
	}
	var diffs []float64
	for _, p := range pairs {
		d := y[p[0]] - y[p[1]]
		if !math.IsNaN(d) {
			diffs = append(diffs, sign*d)
		}
	}
	if events {
		var t, d int
		for _, x := range diffs {
			if x != 0 {
				d++
				if x > 0 {
					t++
				}
			}
		}
		g, err := McNemarGamma(t, d, alpha)
		return g, err == nil
	}
	g, err := SignedRankGamma(diffs, alpha)
	return g, err == nil
}
