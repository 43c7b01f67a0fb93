package weights

import (
	"fmt"
	"math"
	"strings"
)

// ATE returns inverse-probability weights for the average treatment effect
// in the whole population:
//
//	w_i = Z_i/e_i + (1−Z_i)/(1−e_i)
//
// Each arm is reweighted to resemble the full cohort (Rosenbaum 1987,
// J Am Stat Assoc 82:387; Hirano, Imbens & Ridder 2003, Econometrica
// 71:1161).
func ATE(ps []float64, z []bool) []float64 {
	return apply("ATE", ps, z, func(e float64, t bool) float64 {
		if t {
			return 1 / e
		}
		return 1 / (1 - e)
	})
}

// ATT returns weights for the average treatment effect on the treated:
//
//	w_i = Z_i + (1−Z_i)·e_i/(1−e_i)
//
// Treated units keep weight 1; controls are reweighted by the odds of
// treatment to resemble the treated (Imbens 2004, Rev Econ Stat 86:4).
func ATT(ps []float64, z []bool) []float64 {
	return apply("ATT", ps, z, func(e float64, t bool) float64 {
		if t {
			return 1
		}
		return e / (1 - e)
	})
}

// ATC returns weights for the average treatment effect on the controls:
//
//	w_i = Z_i·(1−e_i)/e_i + (1−Z_i)
//
// Controls keep weight 1; treated units are reweighted by the odds of
// control to resemble the controls (Imbens 2004, Rev Econ Stat 86:4).
func ATC(ps []float64, z []bool) []float64 {
	return apply("ATC", ps, z, func(e float64, t bool) float64 {
		if t {
			return (1 - e) / e
		}
		return 1
	})
}

// Overlap returns overlap weights:
//
//	w_i = Z_i·(1−e_i) + (1−Z_i)·e_i
//
// They target the population where treatment is most in equipoise, stay
// bounded in [0, 1], and, when e is the maximum-likelihood fit of a
// logistic model with an intercept, make the weighted mean of every model
// covariate exactly equal between arms (Li, Morgan & Zaslavsky 2018,
// J Am Stat Assoc 113:390).
func Overlap(ps []float64, z []bool) []float64 {
	return apply("Overlap", ps, z, func(e float64, t bool) float64 {
		if t {
			return 1 - e
		}
		return e
	})
}

// MatchingWeights returns the matching weights of Li & Greene (2013, Int J
// Biostat 9:215):
//
//	w_i = min(e_i, 1−e_i) / (Z_i·e_i + (1−Z_i)·(1−e_i))
//
// a weighting analogue of 1:1 matching on the score; every weight lies in
// [0, 1].
func MatchingWeights(ps []float64, z []bool) []float64 {
	return apply("MatchingWeights", ps, z, func(e float64, t bool) float64 {
		m := math.Min(e, 1-e)
		if t {
			return m / e
		}
		return m / (1 - e)
	})
}

func apply(name string, ps []float64, z []bool, f func(e float64, t bool) float64) []float64 {
	if len(ps) != len(z) {
		panic(fmt.Sprintf("weights: %s: len(ps) = %d, len(z) = %d", name, len(ps), len(z)))
	}
	w := make([]float64, len(ps))
	for i, e := range ps {
		w[i] = f(e, z[i])
	}
	return w
}

// Stabilize returns a new slice with each weight multiplied by the share of
// the unit's own arm, w_i·P̂(Z = Z_i), as Robins, Hernán & Brumback (2000,
// Epidemiology 11:550) proposed to tame the variance of inverse-probability
// weights without changing the estimand.
//
// The share is computed over the analysis sample, the units with a positive
// weight: P̂(Z=1) = #{i: w_i > 0, Z_i} / #{i: w_i > 0}. Without trimming this
// is the plain treated share of the cohort; after Restrict it is the share
// among the units kept. Zero weights stay zero.
func Stabilize(w []float64, z []bool) []float64 {
	if len(w) != len(z) {
		panic(fmt.Sprintf("weights: Stabilize: len(w) = %d, len(z) = %d", len(w), len(z)))
	}
	var n, nt float64
	for i, wi := range w {
		if wi > 0 {
			n++
			if z[i] {
				nt++
			}
		}
	}
	out := make([]float64, len(w))
	if n == 0 {
		return out
	}
	pt, pc := nt/n, (n-nt)/n
	for i, wi := range w {
		if wi <= 0 {
			continue
		}
		if z[i] {
			out[i] = wi * pt
		} else {
			out[i] = wi * pc
		}
	}
	return out
}

// Restrict returns a new slice equal to w where keep is true and 0 where it
// is false. It is how units outside common support leave the analysis: the
// weights of kept units are not renormalised, because every later stage
// divides by the sum of the weights it uses.
func Restrict(w []float64, keep []bool) []float64 {
	if len(w) != len(keep) {
		panic(fmt.Sprintf("weights: Restrict: len(w) = %d, len(keep) = %d", len(w), len(keep)))
	}
	out := make([]float64, len(w))
	for i, k := range keep {
		if k {
			out[i] = w[i]
		}
	}
	return out
}

// FromSets returns per-unit weights for a matched sample of n units, where
// set s consists of the treated unit treated[s] and its controls
// controls[s] (unit indexes in [0, n)):
//
//	w_i = 1                         if i is the treated unit of a set with controls
//	w_j = Σ_{s ∋ j} 1/k_s           for a control j, k_s = len(controls[s])
//	w   = 0                         for units in no set
//
// The controls of each set carry together the weight of its treated unit,
// so weighted control means are the means of the matched counterparts and
// the weighted difference estimates the ATT on the matched treated
// (common practice; e.g. Stuart 2010, Stat Sci 25:1). A control reused
// across sets sums its shares. A set with no controls contributes nothing:
// its treated unit was not matched and keeps weight 0.
//
// A unit index out of range, a treated unit heading two sets, or a unit
// listed both as a set's treated unit and as a control panics: these are
// errors in the matching code, not in the data.
func FromSets(n int, treated []int, controls [][]int) []float64 {
	if len(treated) != len(controls) {
		panic(fmt.Sprintf("weights: FromSets: len(treated) = %d, len(controls) = %d", len(treated), len(controls)))
	}
	w := make([]float64, n)
	role := make([]byte, n) // 0 none, 't' treated, 'c' control
	check := func(i int) {
		if i < 0 || i >= n {
			panic(fmt.Sprintf("weights: FromSets: unit %d out of range [0, %d)", i, n))
		}
	}
	for s, t := range treated {
		check(t)
		if role[t] != 0 {
			panic(fmt.Sprintf("weights: FromSets: unit %d heads set %d but already appears in another role or set", t, s))
		}
		role[t] = 't'
		k := len(controls[s])
		if k == 0 {
			continue
		}
		w[t] = 1
		share := 1 / float64(k)
		for _, c := range controls[s] {
			check(c)
			if role[c] == 't' {
				panic(fmt.Sprintf("weights: FromSets: unit %d is both a treated unit and a control of set %d", c, s))
			}
			role[c] = 'c'
			w[c] += share
		}
	}
	return w
}

// ESS returns Kish's (1965, Survey Sampling) effective sample size of the
// units of one arm (z_i == arm):
//
//	ESS = (Σ w_i)² / Σ w_i²
//
// It equals the count when all weights are equal and shrinks as the weights
// grow uneven. An arm with no positive weight has ESS 0.
func ESS(w []float64, z []bool, arm bool) float64 {
	if len(w) != len(z) {
		panic(fmt.Sprintf("weights: ESS: len(w) = %d, len(z) = %d", len(w), len(z)))
	}
	var s, s2 float64
	for i, wi := range w {
		if z[i] == arm {
			s += wi
			s2 += wi * wi
		}
	}
	if s2 == 0 {
		return 0
	}
	return s * s / s2
}

// CheckScores returns an error naming the first unit whose score is not
// strictly inside (0, 1). The weight formulas divide by e and 1−e, so such a
// score would give an infinite or undefined weight; it usually means the
// model separates the arms and the analyst should change the covariates or
// restrict the cohort.
func CheckScores(ps []float64) error {
	for i, e := range ps {
		if !(e > 0 && e < 1) {
			return fmt.Errorf("weights: unit %d has propensity score %v, outside (0, 1): the model separates the arms; drop the covariate that predicts treatment perfectly or restrict the cohort", i, e)
		}
	}
	return nil
}

// Check returns an error naming the first weight that is negative, NaN or
// infinite; balance and effect estimates are undefined for such weights.
func Check(w []float64) error {
	for i, wi := range w {
		if !(wi >= 0) || math.IsInf(wi, 1) {
			return fmt.Errorf("weights: unit %d has weight %v; weights must be finite and non-negative", i, wi)
		}
	}
	return nil
}

// Scheme computes one weight per unit from scores and treatment.
type Scheme func(ps []float64, z []bool) []float64

// Def is one weighting scheme as every layer needs it: the study file's
// name, the estimand it targets, the in-memory formula and the same
// formula as SQL for warehouse-scale mode. Adding a scheme is adding one
// Def to Schemes (and its test against a published formula).
type Def struct {
	// Name is the scheme's name in the study file and the tables.
	Name string
	// Estimand is what the weighted difference estimates: att, ate, atc,
	// ato (overlap population) or atm (matching population).
	Estimand string
	// Weights is the formula over scores and treatment.
	Weights Scheme
	// SQLTreated and SQLControl are the same formula as SQL expressions
	// of the score column e, for treated and comparison rows.
	SQLTreated, SQLControl string
}

// Schemes lists every weighting scheme, in the order the study file
// documents them. The formulas are those of the functions above.
var Schemes = []Def{
	{Name: "att", Estimand: "att", Weights: ATT, SQLTreated: "1.0", SQLControl: "e / (1 - e)"},
	{Name: "ate", Estimand: "ate", Weights: ATE, SQLTreated: "1 / e", SQLControl: "1 / (1 - e)"},
	{Name: "atc", Estimand: "atc", Weights: ATC, SQLTreated: "(1 - e) / e", SQLControl: "1.0"},
	{Name: "overlap", Estimand: "ato", Weights: Overlap, SQLTreated: "1 - e", SQLControl: "e"},
	{Name: "matching", Estimand: "atm", Weights: MatchingWeights, SQLTreated: "least(e, 1 - e) / e", SQLControl: "least(e, 1 - e) / (1 - e)"},
}

// Names returns the scheme names ByName accepts, in a fixed order.
func Names() []string {
	out := make([]string, len(Schemes))
	for i, s := range Schemes {
		out[i] = s.Name
	}
	return out
}

// Lookup returns the scheme with the given name. Names are case-sensitive,
// as in the study file.
func Lookup(name string) (Def, error) {
	for _, s := range Schemes {
		if s.Name == name {
			return s, nil
		}
	}
	return Def{}, fmt.Errorf("weights: unknown scheme %q: want one of %s", name, strings.Join(Names(), ", "))
}

// ByName returns the formula of the scheme with the given name.
func ByName(name string) (func(ps []float64, z []bool) []float64, error) {
	d, err := Lookup(name)
	if err != nil {
		return nil, err
	}
	return d.Weights, nil
}

// Estimand returns the estimand a scheme targets ("" for an unknown name).
func Estimand(name string) string {
	d, _ := Lookup(name)
	return d.Estimand
}

// SQL returns the scheme's weight as one SQL expression over the score
// column e and the 0/1 treatment column z.
func (d Def) SQL() string {
	return "CASE WHEN z = 1 THEN " + d.SQLTreated + " ELSE " + d.SQLControl + " END"
}
