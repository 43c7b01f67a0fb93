package sensitivity

import (
	"fmt"
	"math"
)

// RareOutcomeRisk is the cumulative risk by the end of follow-up below which
// an outcome counts as rare for the HR → RR conversion (about 15%,
// VanderWeele & Ding 2017, Ann Intern Med 167:268; from memory). A caller
// with Kaplan–Meier risks at the last horizon passes
// rare = max(risk₀, risk₁) < RareOutcomeRisk.
const RareOutcomeRisk = 0.15

// RRFromHR converts a hazard ratio to the approximate risk-ratio scale on
// which E-values are defined (VanderWeele & Ding 2017, Ann Intern Med
// 167:268, table of conversions; the square-root form is studied in
// VanderWeele 2020, Biometrics 76:746 — citation and formula from memory):
//
//   - rare outcome (under about 15% by the end of follow-up): RR ≈ HR;
//   - common outcome: RR ≈ (1 − 0.5^√HR) / (1 − 0.5^√(1/HR)).
//
// The common-outcome map is increasing, sends 1 to 1 and 1/HR to 1/RR, and
// pulls the ratio toward the null. A non-positive HR panics.
func RRFromHR(hr float64, rare bool) float64 {
	if !(hr > 0) {
		panic(fmt.Sprintf("sensitivity: hazard ratio %v; a hazard ratio must be positive", hr))
	}
	if rare || math.IsInf(hr, 1) {
		return hr
	}
	return -math.Expm1(math.Sqrt(hr)*math.Log(0.5)) / -math.Expm1(math.Sqrt(1/hr)*math.Log(0.5))
}

// EValueHR returns the E-values of a hazard ratio given on the log scale
// with the standard error of its logarithm (a Cox fit's log HR and its
// robust SE). The 95% interval exp(log HR ± 1.96·SE) is formed on the
// hazard-ratio scale and each limit is converted with RRFromHR; because the
// conversion is monotone this is the interval of the converted ratio.
// A NaN or infinite input is an error.
func EValueHR(logHR, seLogHR float64, rare bool) (EValue, error) {
	if rare {
		e, err := EValueLog(logHR, seLogHR)
		if err != nil {
			return EValue{}, fmt.Errorf("sensitivity: E-value of hazard ratio: %w", err)
		}
		return e, nil
	}
	if math.IsNaN(logHR) || math.IsInf(logHR, 0) || !(seLogHR >= 0) || math.IsInf(seLogHR, 1) {
		return EValue{}, fmt.Errorf("sensitivity: E-value of hazard ratio: log HR %v with SE %v; both must be finite, SE non-negative", logHR, seLogHR)
	}
	e := EValue{
		RR:     RRFromHR(math.Exp(logHR), false),
		CILow:  RRFromHR(math.Exp(logHR-zCrit*seLogHR), false),
		CIHigh: RRFromHR(math.Exp(logHR+zCrit*seLogHR), false),
	}
	e.Point = EValueRR(e.RR)
	e.CI = EValueCI(e.CILow, e.CIHigh)
	return e, nil
}

// EValueRateRatio returns the E-values of a rate ratio given on the log
// scale with the SE of its logarithm. A rate ratio is taken as a risk ratio,
// the reading VanderWeele & Ding (2017, Ann Intern Med 167:268) give for
// ratio measures of a rare outcome (from memory of that paper); for common
// outcomes it overstates the E-value somewhat.
func EValueRateRatio(logRR, seLogRR float64) (EValue, error) {
	e, err := EValueLog(logRR, seLogRR)
	if err != nil {
		return EValue{}, fmt.Errorf("sensitivity: E-value of rate ratio: %w", err)
	}
	return e, nil
}
