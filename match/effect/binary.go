package effect

import (
	"errors"
	"fmt"
	"math"
)

// Contrast names reported in Estimate.Contrast.
const (
	ContrastDifference = "difference"
	ContrastRiskRatio  = "risk_ratio"
	ContrastOddsRatio  = "odds_ratio"
	// Time-to-event and rate outcomes (match/survival).
	ContrastHazardRatio        = "hazard_ratio"
	ContrastSurvivalDifference = "survival_difference"
	ContrastRMSTDifference     = "rmst_difference"
	ContrastRateRatio          = "rate_ratio"
	ContrastRateDifference     = "rate_difference"
)

// RatePer is the exposure a rate difference is expressed per: events per
// 1,000 exposure units (member-months, days).
const RatePer = 1000

// Method names of the ratio contrasts.
const (
	MethodRatioHC0 = "weighted risk ratio, delta-method HC0 sandwich SE of the log ratio"
	MethodRatioCR  = "weighted risk ratio, delta-method cluster-robust SE of the log ratio (CR0 × G/(G−1))"
	MethodOddsHC0  = "weighted odds ratio, delta-method HC0 sandwich SE of the log ratio"
	MethodOddsCR   = "weighted odds ratio, delta-method cluster-robust SE of the log ratio (CR0 × G/(G−1))"
)

// ErrDegenerateRisk marks a binary outcome with no events, or only events,
// in an arm: the risk ratio or odds ratio is 0 or infinite and its log has
// no standard error.
var ErrDegenerateRisk = errors.New("an arm's risk is 0 or 1")

// Contrasts returns three contrasts of a binary outcome (0 = no event,
// 1 = event, NaN = missing), in this order:
//
//   - the risk difference p₁ − p₀, exactly Difference (cluster nil) or
//     ClusteredDifference;
//   - the risk ratio p₁/p₀;
//   - the odds ratio [p₁/(1−p₁)] / [p₀/(1−p₀)],
//
// where p₁ = Σ_T w·y/Σ_T w and p₀ = Σ_C w·y/Σ_C w are the weighted risks.
// The ratios' standard errors are on the log scale by the delta method
// applied to the same sandwich as the difference: each usable row
// contributes the influence term
//
//	ln RR:  w(y − p₁)/(Σ_T w · p₁)            treated,  −w(y − p₀)/(Σ_C w · p₀)            control
//	ln OR:  w(y − p₁)/(Σ_T w · p₁(1 − p₁))    treated,  −w(y − p₀)/(Σ_C w · p₀(1 − p₀))    control
//
// (the difference's term w·r/Σw times d ln p/dp = 1/p, or d logit p/dp =
// 1/(p(1−p))). With cluster nil the variance is the sum of squared terms
// (HC0, White 1980, Econometrica 48:817); otherwise the terms are summed
// within clusters and the squares summed times G/(G−1), as in
// ClusteredDifference. Because the one-indicator model is saturated, these
// equal the HC0 (cluster) sandwich SEs of the coefficient of z in a
// weighted log-binomial (log RR) or logistic (log OR) GLM of y on [1, z];
// testdata/effect/make_contrasts.py checks that with statsmodels. The
// interval exp(ln ratio ± ZCrit·SE) is the usual one for ratios (common
// practice).
//
// Weights, missing outcomes and errors are as in Difference; in addition an
// outcome other than 0, 1 or NaN on a usable row is an error, and an arm
// whose weighted risk is 0 or 1 gives an error wrapping ErrDegenerateRisk
// (use Difference alone then). cluster must be nil or as long as y.
func Contrasts(y []float64, z []bool, w []float64, cluster []int) ([]Estimate, error) {
	const step = "binary contrasts"
	if cluster != nil && len(cluster) != len(y) {
		panic(fmt.Sprintf("effect: %s: len(y) = %d, len(cluster) = %d", step, len(y), len(cluster)))
	}
	a, err := summarise(step, y, z, w)
	if err != nil {
		return nil, err
	}
	for i, yi := range y {
		if use(y, w, i) && yi != 0 && yi != 1 {
			return nil, fmt.Errorf("effect: %s: row %d has outcome %v; a binary outcome must be 0, 1 or missing (NaN)", step, i, yi)
		}
	}
	p1, p0 := a.meanT, a.meanC
	if !(p1 > 0 && p1 < 1 && p0 > 0 && p0 < 1) {
		return nil, fmt.Errorf("effect: %s: weighted risk %v among treated, %v among controls: %w", step, p1, p0, ErrDegenerateRisk)
	}

	var diff Estimate
	if cluster == nil {
		diff, err = Difference(y, z, w)
	} else {
		diff, err = ClusteredDifference(y, z, w, cluster)
	}
	if err != nil {
		return nil, err
	}
	diff.Contrast = ContrastDifference

	// d ln p/dp for each arm: 1/p for the RR, 1/(p(1−p)) for the OR.
	rrT, rrC := 1/p1, 1/p0
	orT, orC := 1/(p1*(1-p1)), 1/(p0*(1-p0))
	var vRR, vOR float64
	if cluster == nil {
		for i := range y {
			if !use(y, w, i) {
				continue
			}
			d := a.influence(y, z, w, i)
			if z[i] {
				vRR += sq(d * rrT)
				vOR += sq(d * orT)
			} else {
				vRR += sq(d * rrC)
				vOR += sq(d * orC)
			}
		}
	} else {
		// Clusters in order of first appearance, as in
		// ClusteredDifference, so sums do not depend on map order.
		slot := make(map[int]int)
		var sRR, sOR []float64
		for i := range y {
			if !use(y, w, i) {
				continue
			}
			k, ok := slot[cluster[i]]
			if !ok {
				k = len(sRR)
				slot[cluster[i]] = k
				sRR = append(sRR, 0)
				sOR = append(sOR, 0)
			}
			d := a.influence(y, z, w, i)
			if z[i] {
				sRR[k] += d * rrT
				sOR[k] += d * orT
			} else {
				sRR[k] += d * rrC
				sOR[k] += d * orC
			}
		}
		g := float64(len(sRR)) // ≥ 2: ClusteredDifference succeeded
		for k := range sRR {
			vRR += sq(sRR[k])
			vOR += sq(sOR[k])
		}
		vRR *= g / (g - 1)
		vOR *= g / (g - 1)
	}

	mRR, mOR := MethodRatioHC0, MethodOddsHC0
	if cluster != nil {
		mRR, mOR = MethodRatioCR, MethodOddsCR
	}
	rr := ratio(a, math.Log(p1)-math.Log(p0), vRR, mRR, ContrastRiskRatio)
	or := ratio(a, math.Log(p1/(1-p1))-math.Log(p0/(1-p0)), vOR, mOR, ContrastOddsRatio)
	return []Estimate{diff, rr, or}, nil
}

func sq(x float64) float64 { return x * x }

// ratio builds the Estimate of a ratio contrast from its log and the
// variance of the log.
func ratio(a arms, logRatio, variance float64, method, contrast string) Estimate {
	se := math.Sqrt(variance)
	e := Estimate{
		Estimate: math.Exp(logRatio),
		SE:       se,
		CILow:    math.Exp(logRatio - ZCrit*se),
		CIHigh:   math.Exp(logRatio + ZCrit*se),
		Z:        logRatio / se,
		NTreated: a.nT, NControl: a.nC, NMissing: a.miss,
		Method:   method,
		Contrast: contrast,
	}
	e.P = math.Erfc(math.Abs(e.Z) / math.Sqrt2)
	return e
}
