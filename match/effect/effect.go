package effect

import (
	"errors"
	"fmt"
	"math"
)

// ZCrit is the 0.975 quantile of the standard normal distribution, the
// half-width multiplier of a two-sided 95% confidence interval.
const ZCrit = 1.959963984540054

// ErrEmptyArm marks an arm with no unit of positive weight and an observed
// outcome: no difference can be estimated.
var ErrEmptyArm = errors.New("an arm has no usable unit")

// Estimate is one effect estimate with its uncertainty.
type Estimate struct {
	// Estimate is the weighted mean outcome of the treated minus that of
	// the controls.
	Estimate float64
	// SE is the sandwich standard error named in Method.
	SE float64
	// CILow and CIHigh bound the normal 95% interval Estimate ± ZCrit·SE.
	CILow, CIHigh float64
	// Z is Estimate/SE and P its two-sided normal p-value 2·(1 − Φ(|Z|)).
	// A zero SE gives an infinite Z (or NaN when the estimate is 0 too),
	// following IEEE arithmetic.
	Z, P float64
	// NTreated and NControl count the rows used: positive weight and an
	// observed outcome. With matching with reuse a unit can fill several
	// rows. NMissing counts rows of positive weight whose outcome is NaN;
	// they are left out.
	NTreated, NControl, NMissing int
	// Method names the estimator and its standard error.
	Method string
	// Contrast is "" or ContrastDifference for a difference in means or
	// risks. For ContrastRiskRatio and ContrastOddsRatio (set by
	// Contrasts) Estimate is the ratio, SE the standard error of its
	// natural logarithm, the interval exp(ln ratio ± ZCrit·SE) and Z is
	// ln(ratio)/SE.
	Contrast string
}

// Method names reported in Estimate.Method.
const (
	MethodHC0 = "weighted difference in means, HC0 sandwich SE"
	MethodCR  = "weighted difference in means, cluster-robust sandwich SE (CR0 × G/(G−1))"
)

// arms holds the per-arm sums a difference needs.
type arms struct {
	sumT, sumC   float64 // Σw
	meanT, meanC float64 // Σw·y/Σw
	nT, nC, miss int
}

// use reports whether row i enters the estimate.
func use(y, w []float64, i int) bool {
	return weight(w, i) > 0 && !math.IsNaN(y[i])
}

func weight(w []float64, i int) float64 {
	if w == nil {
		return 1
	}
	return w[i]
}

func summarise(step string, y []float64, z []bool, w []float64) (arms, error) {
	if len(y) != len(z) || (w != nil && len(w) != len(y)) {
		panic(fmt.Sprintf("effect: %s: len(y) = %d, len(z) = %d, len(w) = %d", step, len(y), len(z), len(w)))
	}
	var a arms
	var shiftT, shiftC, sdT, sdC float64
	for i, yi := range y {
		wi := weight(w, i)
		if !(wi >= 0) || math.IsInf(wi, 1) {
			return a, fmt.Errorf("effect: %s: row %d has weight %v; weights must be finite and non-negative", step, i, wi)
		}
		if wi == 0 {
			continue
		}
		if math.IsNaN(yi) {
			a.miss++
			continue
		}
		if math.IsInf(yi, 0) {
			return a, fmt.Errorf("effect: %s: row %d has outcome %v; outcomes must be finite or missing (NaN)", step, i, yi)
		}
		// Deviations from the arm's first value: the same mean, less
		// rounding when outcomes sit far from zero.
		if z[i] {
			if a.nT == 0 {
				shiftT = yi
			}
			a.nT++
			a.sumT += wi
			sdT += wi * (yi - shiftT)
		} else {
			if a.nC == 0 {
				shiftC = yi
			}
			a.nC++
			a.sumC += wi
			sdC += wi * (yi - shiftC)
		}
	}
	switch {
	case a.nT == 0:
		return a, fmt.Errorf("effect: %s: no treated unit with positive weight and an observed outcome (%d missing): %w", step, a.miss, ErrEmptyArm)
	case a.nC == 0:
		return a, fmt.Errorf("effect: %s: no control unit with positive weight and an observed outcome (%d missing): %w", step, a.miss, ErrEmptyArm)
	}
	a.meanT = shiftT + sdT/a.sumT
	a.meanC = shiftC + sdC/a.sumC
	return a, nil
}

// influence returns row i's contribution to the linearised estimate,
// w_i·r_i/Σ_T w for a treated row and −w_i·r_i/Σ_C w for a control, where
// r_i is the residual from the row's own arm mean.
func (a arms) influence(y []float64, z []bool, w []float64, i int) float64 {
	wi := weight(w, i)
	if z[i] {
		return wi * (y[i] - a.meanT) / a.sumT
	}
	return -wi * (y[i] - a.meanC) / a.sumC
}

func finish(a arms, variance float64, method string) Estimate {
	e := Estimate{
		Estimate: a.meanT - a.meanC,
		SE:       math.Sqrt(variance),
		NTreated: a.nT, NControl: a.nC, NMissing: a.miss,
		Method: method,
	}
	e.CILow = e.Estimate - ZCrit*e.SE
	e.CIHigh = e.Estimate + ZCrit*e.SE
	e.Z = e.Estimate / e.SE
	e.P = math.Erfc(math.Abs(e.Z) / math.Sqrt2)
	return e
}

// Difference returns the weighted difference in mean outcomes, treated
// minus control,
//
//	τ̂ = Σ_T w·y / Σ_T w − Σ_C w·y / Σ_C w,
//
// which is the coefficient of z in the weighted least-squares regression
// of y on [1, z] with weights w. Its standard error is the HC0
// heteroskedasticity-robust sandwich of that regression (White 1980,
// Econometrica 48:817), (X'WX)⁻¹ (Σ w_i² r_i² x_i x_i') (X'WX)⁻¹, whose
// z-entry for this saturated design reduces to
//
//	Var(τ̂) = Σ_T w²r² / (Σ_T w)² + Σ_C w²r² / (Σ_C w)²,
//
// r the residual from the row's own arm's weighted mean. The interval is
// τ̂ ± 1.959963984540054·SE.
//
// Rows with w = 0 are ignored; rows with positive weight and a NaN outcome
// are left out and counted in NMissing. Nil weights mean all ones. An arm
// without a usable row gives an error wrapping ErrEmptyArm; a negative or
// non-finite weight, or an infinite outcome, gives an error naming the row.
func Difference(y []float64, z []bool, w []float64) (Estimate, error) {
	a, err := summarise("difference", y, z, w)
	if err != nil {
		return Estimate{}, err
	}
	var v float64
	for i := range y {
		if use(y, w, i) {
			d := a.influence(y, z, w, i)
			v += d * d
		}
	}
	return finish(a, v, MethodHC0), nil
}

// ClusteredDifference returns the same estimate as Difference with a
// cluster-robust standard error, for samples whose rows are not
// independent: in a matched sample the cluster is the matched set, and
// with matching with reuse one unit fills one row per set it appears in.
//
// The variance is the cluster sandwich of the weighted regression of y on
// [1, z] (Liang & Zeger 1986, Biometrika 73:13; Arellano 1987, Oxf Bull
// Econ Stat 49:431), whose z-entry for this design is
//
//	Var(τ̂) = G/(G−1) · Σ_g ( Σ_{i∈g,T} w_i r_i / Σ_T w − Σ_{i∈g,C} w_i r_i / Σ_C w )²
//
// over the G clusters with at least one usable row. The factor G/(G−1) is
// the usual small-sample correction for few clusters (CR1 without the
// (N−1)/(N−K) term, which for K = 2 exceeds 1 by only 1/(N−2) and whose N is
// ambiguous when rows repeat units). It is what R's
// sandwich::vcovCL(type = "HC0", cadjust = TRUE) computes. Fewer than two
// clusters give an error.
//
// Rows, weights and missing outcomes are treated as in Difference.
func ClusteredDifference(y []float64, z []bool, w []float64, cluster []int) (Estimate, error) {
	if len(cluster) != len(y) {
		panic(fmt.Sprintf("effect: clustered difference: len(y) = %d, len(cluster) = %d", len(y), len(cluster)))
	}
	a, err := summarise("clustered difference", y, z, w)
	if err != nil {
		return Estimate{}, err
	}
	// Clusters are summed in order of first appearance so that the result
	// does not depend on map iteration order.
	slot := make(map[int]int)
	var score []float64
	for i := range y {
		if !use(y, w, i) {
			continue
		}
		k, ok := slot[cluster[i]]
		if !ok {
			k = len(score)
			slot[cluster[i]] = k
			score = append(score, 0)
		}
		score[k] += a.influence(y, z, w, i)
	}
	g := len(score)
	if g < 2 {
		return Estimate{}, fmt.Errorf("effect: clustered difference: %d cluster(s) with usable rows; a cluster-robust SE needs at least 2", g)
	}
	var v float64
	for _, s := range score {
		v += s * s
	}
	v *= float64(g) / float64(g-1)
	return finish(a, v, MethodCR), nil
}
