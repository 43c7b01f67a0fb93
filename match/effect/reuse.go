package effect

import (
	"fmt"
	"math"
	"slices"
)

// Reuse is a matching estimate of the effect on the treated with the
// Abadie–Imbens variance that accounts for controls used more than once.
type Reuse struct {
	// Estimate is τ̂ = (1/N₁)·Σ_i (Y_i − Ŷ_i(0)), Ŷ_i(0) the mean outcome
	// of treated unit i's matched controls.
	Estimate float64
	// VarSample is the conditional variance for the sample average effect
	// on the treated (SATT) and VarPopulation the variance for the
	// population effect on the treated (PATT); SESample and SEPopulation
	// are their square roots.
	VarSample, VarPopulation float64
	SESample, SEPopulation   float64
	// NTreated counts matched treated units; NControl counts distinct
	// controls used.
	NTreated, NControl int
}

// MethodReuse names the variance in reports.
const MethodReuse = "matching estimator with reuse, Abadie–Imbens (2006) variance"

// ReuseVariance returns the matching estimate of the effect on the treated
// with the variance of Abadie & Imbens (2006, Econometrica 74:235, §4 and
// Theorem 7; formulas below from memory of that paper) for matching with
// replacement, where a control matched to several treated units makes
// their errors dependent. treated[s] is the treated unit of matched set s
// and controls[s] its matched controls (indices into y, as for
// weights.FromSets); sigma2[i] estimates the conditional outcome variance
// σ²(X_i, W_i) of unit i, for example from ConditionalVariance.
//
// With M_s controls in set s, each control j carries the weight
// k_j = Σ_{s ∋ j} 1/M_s (Abadie–Imbens' K_M(j)/M when every M_s = M) and
// q_j = Σ_{s ∋ j} 1/M_s² (K_M(j)/M²). Then
//
//	V_sample     = (1/N₁²)·[ Σ_treated σ²_i + Σ_controls k_j²·σ²_j ]
//	V_population = (1/N₁²)·[ Σ_treated (Y_i − Ŷ_i(0) − τ̂)² + Σ_controls (k_j² − q_j)·σ²_j ]
//
// For a fixed M, k_j² − q_j = K_M(j)(K_M(j) − 1)/M², Abadie & Imbens'
// estimator of the PATT variance; the first is their conditional (SATT)
// variance V^E with σ² replaced by its estimate. The variable-M form
// follows from the same expansion: set s's squared residual carries
// Σ_{j∈s} σ²_j/M_s² of control noise, which the population formula tops
// up to k_j²σ²_j. Controls never reused contribute k² − q = 0 to the
// correction. The bias-correction of Abadie & Imbens (2011) is not
// applied.
//
// Sets with no controls, out-of-range indices, NaN or infinite outcomes
// and negative or non-finite sigma2 of a used unit are errors; no sets is
// an error. len(sigma2) ≠ len(y) or len(controls) ≠ len(treated) panics.
func ReuseVariance(y []float64, treated []int, controls [][]int, sigma2 []float64) (Reuse, error) {
	const step = "reuse variance"
	if len(sigma2) != len(y) || len(controls) != len(treated) {
		panic(fmt.Sprintf("effect: %s: len(y) = %d, len(sigma2) = %d, len(treated) = %d, len(controls) = %d",
			step, len(y), len(sigma2), len(treated), len(controls)))
	}
	if len(treated) == 0 {
		return Reuse{}, fmt.Errorf("effect: %s: no matched sets", step)
	}
	check := func(s, i int) error {
		if i < 0 || i >= len(y) {
			return fmt.Errorf("effect: %s: set %d refers to unit %d, outside [0, %d)", step, s, i, len(y))
		}
		if math.IsNaN(y[i]) || math.IsInf(y[i], 0) {
			return fmt.Errorf("effect: %s: set %d: unit %d has outcome %v; matched outcomes must be finite", step, s, i, y[i])
		}
		if !(sigma2[i] >= 0) || math.IsInf(sigma2[i], 1) {
			return fmt.Errorf("effect: %s: set %d: unit %d has variance estimate %v; it must be finite and non-negative", step, s, i, sigma2[i])
		}
		return nil
	}
	n1 := float64(len(treated))
	contrast := make([]float64, len(treated))
	k := make(map[int]float64)
	q := make(map[int]float64)
	var order []int // controls in order of first use, for reproducible sums
	var sum float64
	for s, t := range treated {
		if len(controls[s]) == 0 {
			return Reuse{}, fmt.Errorf("effect: %s: set %d (treated unit %d) has no control", step, s, t)
		}
		if err := check(s, t); err != nil {
			return Reuse{}, err
		}
		m := float64(len(controls[s]))
		var y0 float64
		for _, j := range controls[s] {
			if err := check(s, j); err != nil {
				return Reuse{}, err
			}
			if _, seen := k[j]; !seen {
				order = append(order, j)
			}
			y0 += y[j]
			k[j] += 1 / m
			q[j] += 1 / (m * m)
		}
		contrast[s] = y[t] - y0/m
		sum += contrast[s]
	}
	r := Reuse{Estimate: sum / n1, NTreated: len(treated), NControl: len(order)}
	var vs, vp float64
	for s, t := range treated {
		vs += sigma2[t]
		vp += sq(contrast[s] - r.Estimate)
	}
	for _, j := range order {
		vs += k[j] * k[j] * sigma2[j]
		vp += (k[j]*k[j] - q[j]) * sigma2[j]
	}
	r.VarSample = vs / (n1 * n1)
	r.VarPopulation = vp / (n1 * n1)
	r.SESample = math.Sqrt(r.VarSample)
	r.SEPopulation = math.Sqrt(r.VarPopulation)
	return r, nil
}

// ConditionalVariance estimates each unit's conditional outcome variance
// σ²(X_i, W_i) by matching within its own arm (Abadie & Imbens 2006,
// Econometrica 74:235, eq. for σ̂² with J same-arm neighbours; from
// memory):
//
//	σ̂²_i = J/(J + 1) · (Y_i − mean_{l ∈ neighbours[i]} Y_l)²,
//
// J = len(neighbours[i]), the neighbours being the J units of i's own arm
// closest to it in covariates, found by the caller's matcher. A unit with
// no neighbours gets NaN (no estimate); ReuseVariance rejects NaN only for
// units it uses. len(neighbours) ≠ len(y) panics.
func ConditionalVariance(y []float64, neighbours [][]int) []float64 {
	if len(neighbours) != len(y) {
		panic(fmt.Sprintf("effect: conditional variance: len(y) = %d, len(neighbours) = %d", len(y), len(neighbours)))
	}
	out := make([]float64, len(y))
	for i, nb := range neighbours {
		if len(nb) == 0 {
			out[i] = math.NaN()
			continue
		}
		var m float64
		for _, l := range nb {
			m += y[l]
		}
		j := float64(len(nb))
		m /= j
		out[i] = j / (j + 1) * sq(y[i]-m)
	}
	return out
}

// ReuseEstimate is the matching estimate with the Abadie–Imbens (2006)
// population variance. σ²(x) of each unit is estimated from its two
// nearest neighbours in logit(ps) within its own arm (their J = 2);
// treated[s] and controls[s] are matched set s, as for ReuseVariance.
func ReuseEstimate(y []float64, z []bool, logit []float64, treated []int, controls [][]int) (Estimate, error) {
	neighbours := ArmNeighbours(logit, z, y, 2)
	sigma2 := ConditionalVariance(y, neighbours)
	r, err := ReuseVariance(y, treated, controls, sigma2)
	if err != nil {
		return Estimate{}, err
	}
	e := Estimate{Estimate: r.Estimate, SE: r.SEPopulation, NTreated: r.NTreated, NControl: r.NControl, Method: MethodReuse}
	e.CILow, e.CIHigh = e.Estimate-ZCrit*e.SE, e.Estimate+ZCrit*e.SE
	e.Z = e.Estimate / e.SE
	e.P = math.Erfc(math.Abs(e.Z) / math.Sqrt2)
	return e, nil
}

// ArmNeighbours returns, for every unit with an observed outcome, the j
// units of its own arm nearest in logit(ps) (ties by position), found by
// sorting each arm once.
func ArmNeighbours(logit []float64, z []bool, y []float64, j int) [][]int {
	out := make([][]int, len(logit))
	for _, arm := range []bool{true, false} {
		var idx []int
		for i := range logit {
			if z[i] == arm && !math.IsNaN(y[i]) {
				idx = append(idx, i)
			}
		}
		slices.SortFunc(idx, func(a, b int) int {
			switch {
			case logit[a] < logit[b]:
				return -1
			case logit[a] > logit[b]:
				return 1
			}
			return a - b
		})
		for p, i := range idx {
			lo, hi := p-1, p+1
			var nb []int
			for len(nb) < j && (lo >= 0 || hi < len(idx)) {
				switch {
				case lo < 0:
					nb, hi = append(nb, idx[hi]), hi+1
				case hi >= len(idx):
					nb, lo = append(nb, idx[lo]), lo-1
				case logit[i]-logit[idx[lo]] <= logit[idx[hi]]-logit[i]:
					nb, lo = append(nb, idx[lo]), lo-1
				default:
					nb, hi = append(nb, idx[hi]), hi+1
				}
			}
			out[i] = nb
		}
	}
	return out
}
