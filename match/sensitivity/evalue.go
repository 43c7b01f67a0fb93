package sensitivity

import (
	"fmt"
	"math"
)

// EValueRR returns the E-value of a risk ratio,
//
//	E = RR + √(RR·(RR − 1)),
//
// the minimum risk ratio that an unmeasured confounder would need with both
// treatment and outcome, conditional on the measured covariates, to fully
// explain away an observed risk ratio RR (VanderWeele & Ding 2017, Ann
// Intern Med 167:268, eq. in the box "E-value"). A protective RR < 1 is
// inverted first (RR ← 1/RR), so the E-value of 0.5 equals that of 2. The
// E-value of RR = 1 is 1: no confounding is needed to explain a null.
//
// A non-positive or NaN RR panics: a risk ratio cannot be one.
func EValueRR(rr float64) float64 {
	if !(rr > 0) {
		panic(fmt.Sprintf("sensitivity: E-value of risk ratio %v; a risk ratio must be positive", rr))
	}
	if math.IsInf(rr, 1) {
		return math.Inf(1)
	}
	if rr < 1 {
		rr = 1 / rr
	}
	return rr + math.Sqrt(rr*(rr-1))
}

// EValueCI returns the E-value of a confidence interval [lo, hi] for a risk
// ratio: the E-value of the limit closer to the null, or 1 when the
// interval contains 1 (VanderWeele & Ding 2017, Ann Intern Med 167:268).
// It is the confounder strength that would move the interval to just
// include the null.
//
// lo > hi or a non-positive limit panics.
func EValueCI(lo, hi float64) float64 {
	if !(lo > 0) || !(hi >= lo) {
		panic(fmt.Sprintf("sensitivity: E-value of interval [%v, %v]; need 0 < lo ≤ hi", lo, hi))
	}
	switch {
	case lo > 1:
		return EValueRR(lo)
	case hi < 1:
		return EValueRR(hi)
	default:
		return 1
	}
}

// RRFromOR converts an odds ratio, with the standard error of its logarithm,
// to the approximate risk-ratio scale on which E-values are defined
// (VanderWeele & Ding 2017, Ann Intern Med 167:268, table of conversions;
// the constants below are from memory of that table):
//
//   - rare outcome (under about 15% in every stratum): RR ≈ OR, so the
//     log-scale SE is unchanged;
//   - common outcome: RR ≈ √OR, so log RR ≈ ½·log OR and SE(log RR) ≈
//     ½·SE(log OR).
//
// A confidence interval on the RR scale is then exp(log RR ± z·SE).
// A non-positive OR panics.
func RRFromOR(or, seLogOR float64, rare bool) (rr, seLogRR float64) {
	if !(or > 0) {
		panic(fmt.Sprintf("sensitivity: odds ratio %v; an odds ratio must be positive", or))
	}
	if rare {
		return or, seLogOR
	}
	return math.Sqrt(or), seLogOR / 2
}

// SMDToRRFactor is the factor in RR ≈ exp(0.91·d) that converts a
// standardised mean difference d of a continuous outcome to an approximate
// risk ratio (VanderWeele & Ding 2017, Ann Intern Med 167:268, after
// Chinn 2000, Stat Med 19:3127; value from memory of that table).
const SMDToRRFactor = 0.91

// RRFromSMD converts a standardised mean difference d (mean difference over
// the outcome's standard deviation) with its standard error to the
// approximate risk-ratio scale of E-values,
//
//	RR ≈ exp(0.91·d),  SE(log RR) ≈ 0.91·SE(d),
//
// (VanderWeele & Ding 2017, Ann Intern Med 167:268; their interval
// exp(0.91·d ± 1.78·SE(d)) is exp(log RR ± 1.96·SE(log RR)), 1.78 ≈
// 0.91 × 1.96).
func RRFromSMD(d, seD float64) (rr, seLogRR float64) {
	return math.Exp(SMDToRRFactor * d), SMDToRRFactor * seD
}

// EValue is the E-value of a point estimate and of its confidence limit
// nearer the null.
type EValue struct {
	// RR and CILow, CIHigh are the estimate and 95% interval on the
	// risk-ratio scale the E-values were computed on.
	RR, CILow, CIHigh float64
	// Point is EValueRR(RR); CI is EValueCI(CILow, CIHigh).
	Point, CI float64
}

// zCrit is the 0.975 quantile of the standard normal distribution.
const zCrit = 1.959963984540054

// EValueLog returns the E-values of a ratio estimate given on the log scale
// with the standard error of its logarithm, the form effect.Contrasts and
// the conversions above produce: the interval is exp(log RR ± 1.96·SE).
// A NaN or infinite input is an error.
func EValueLog(logRR, seLogRR float64) (EValue, error) {
	if math.IsNaN(logRR) || math.IsInf(logRR, 0) || !(seLogRR >= 0) || math.IsInf(seLogRR, 1) {
		return EValue{}, fmt.Errorf("sensitivity: E-value: log ratio %v with SE %v; both must be finite, SE non-negative", logRR, seLogRR)
	}
	e := EValue{
		RR:     math.Exp(logRR),
		CILow:  math.Exp(logRR - zCrit*seLogRR),
		CIHigh: math.Exp(logRR + zCrit*seLogRR),
	}
	e.Point = EValueRR(e.RR)
	e.CI = EValueCI(e.CILow, e.CIHigh)
	return e, nil
}
