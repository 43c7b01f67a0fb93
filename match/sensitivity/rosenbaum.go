package sensitivity

import (
	"errors"
	"fmt"
	"math"
	"sort"
)

// ErrNoPairs marks data with no informative pair: every difference is zero
// (signed rank) or no pair is discordant (McNemar), so no test is possible.
var ErrNoPairs = errors.New("no informative pair")

// SignedRank is the Rosenbaum upper bound of the signed-rank test at one Γ.
type SignedRank struct {
	// Gamma is the sensitivity parameter Γ ≥ 1 the bound was computed at.
	Gamma float64
	// T is Wilcoxon's signed-rank statistic: the sum of the ranks of |d|
	// over the pairs with d > 0.
	T float64
	// Mean and Var are the expectation and variance of T under the
	// extreme distribution p⁺ = Γ/(1+Γ) that bounds its upper tail.
	Mean, Var float64
	// Z is (T − Mean)/√Var and PUpper = 1 − Φ(Z) the upper bound on the
	// one-sided p-value for a positive effect.
	Z, PUpper float64
	// N is the number of non-zero differences ranked; NZero the number
	// of zero differences dropped.
	N, NZero int
}

// ranks holds the statistic's ingredients, which do not depend on Γ.
type ranks struct {
	t, sum, sumSq float64 // T, Σ rank, Σ rank²
	n, nzero      int
}

func rankDiffs(step string, diffs []float64) (ranks, error) {
	var r ranks
	type item struct {
		abs float64
		pos bool
	}
	items := make([]item, 0, len(diffs))
	for i, d := range diffs {
		if math.IsNaN(d) || math.IsInf(d, 0) {
			return r, fmt.Errorf("sensitivity: %s: pair %d has difference %v; differences must be finite", step, i, d)
		}
		if d == 0 {
			r.nzero++
			continue
		}
		items = append(items, item{math.Abs(d), d > 0})
	}
	if len(items) == 0 {
		return r, fmt.Errorf("sensitivity: %s: all %d differences are zero: %w", step, len(diffs), ErrNoPairs)
	}
	sort.Slice(items, func(a, b int) bool { return items[a].abs < items[b].abs })
	// Tied |d| share the average of the ranks they span.
	for lo := 0; lo < len(items); {
		hi := lo + 1
		for hi < len(items) && items[hi].abs == items[lo].abs {
			hi++
		}
		rank := float64(lo+1+hi) / 2
		for k := lo; k < hi; k++ {
			r.sum += rank
			r.sumSq += rank * rank
			if items[k].pos {
				r.t += rank
			}
		}
		lo = hi
	}
	r.n = len(items)
	return r, nil
}

func checkGamma(gamma float64) {
	if !(gamma >= 1) || math.IsInf(gamma, 1) {
		panic(fmt.Sprintf("sensitivity: Γ = %v; Γ must be finite and at least 1", gamma))
	}
}

func (r ranks) bound(gamma float64) SignedRank {
	p := gamma / (1 + gamma)
	s := SignedRank{Gamma: gamma, T: r.t, N: r.n, NZero: r.nzero}
	s.Mean = p * r.sum
	s.Var = p * (1 - p) * r.sumSq
	s.Z = (r.t - s.Mean) / math.Sqrt(s.Var)
	s.PUpper = upperNormal(s.Z)
	return s
}

// upperNormal is 1 − Φ(z), accurate in the far tail.
func upperNormal(z float64) float64 { return 0.5 * math.Erfc(z/math.Sqrt2) }

// SignedRankBound returns Rosenbaum's upper bound on the one-sided p-value
// of Wilcoxon's signed-rank test for matched pairs when the odds of
// treatment within a pair may differ by a factor of at most Γ (Rosenbaum
// 2002, Observational Studies, 2nd ed., §4.3.3). diffs are treated-minus-
// control outcome differences, one per pair; the alternative is a positive
// effect (negate diffs for a negative one).
//
// Zero differences are dropped and the remaining |d| ranked, ties sharing
// their average rank (Wilcoxon's "wilcox" treatment of zeros). With
// T = Σ_{d>0} rank and p⁺ = Γ/(1+Γ), the bounding distribution has
//
//	E(T) = p⁺·Σ rank,  Var(T) = p⁺(1 − p⁺)·Σ rank²,
//
// and the bound is 1 − Φ((T − E)/√Var), the large-sample normal
// approximation without continuity correction. At Γ = 1 this is the
// ordinary signed-rank test's normal approximation with the tie-corrected
// variance (Σ rank²/4 = n(n+1)(2n+1)/24 − Σ(t³ − t)/48).
//
// Γ < 1 panics. A non-finite difference, or no non-zero difference (error
// wrapping ErrNoPairs), is an error.
func SignedRankBound(diffs []float64, gamma float64) (SignedRank, error) {
	checkGamma(gamma)
	r, err := rankDiffs("signed-rank bound", diffs)
	if err != nil {
		return SignedRank{}, err
	}
	return r.bound(gamma), nil
}

func checkAlpha(alpha float64) {
	if !(alpha > 0 && alpha < 0.5) {
		panic(fmt.Sprintf("sensitivity: α = %v; the level must lie in (0, 0.5)", alpha))
	}
}

// normalQuantileUpper returns z with 1 − Φ(z) = a, for 0 < a < 0.5, by
// bisection on erfc to full float64 resolution (z ∈ (0, 40)).
func normalQuantileUpper(a float64) float64 {
	lo, hi := 0.0, 40.0
	for hi-lo > 1e-15*hi {
		mid := (lo + hi) / 2
		if mid == lo || mid == hi {
			break
		}
		if upperNormal(mid) > a {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2
}

// SignedRankGamma returns the sensitivity value of the signed-rank test:
// the Γ at which the upper bound of SignedRankBound equals α. For every
// Γ below it the bound stays below α (the bound increases with Γ: with
// p = p⁺ and T ≤ Σ rank, d/dp of (T − p·Σrank)/√(p(1−p)Σrank²) is
// negative on p ∈ [½, 1)). It returns 1 when the test is not significant
// at α even at Γ = 1.
//
// The crossing is found in closed form rather than by search: with
// z_α = Φ⁻¹(1 − α), S₁ = Σ rank, S₂ = Σ rank², (T − pS₁)² = z_α²·p(1−p)·S₂
// is the quadratic
//
//	(S₁² + z_α²S₂)·p² − (2TS₁ + z_α²S₂)·p + T² = 0,
//
// whose smaller root (the one with T − pS₁ > 0) is p⁺ at the crossing, and
// Γ = p⁺/(1 − p⁺). The result is thus exact to rounding (relative error
// of order 1e-12 in the tests), not limited by a search tolerance. Because
// the normal bound tends to 1/2 as Γ → ∞, the crossing always exists for
// α < 1/2.
//
// α outside (0, 0.5) panics; data errors are those of SignedRankBound.
func SignedRankGamma(diffs []float64, alpha float64) (float64, error) {
	checkAlpha(alpha)
	r, err := rankDiffs("signed-rank sensitivity value", diffs)
	if err != nil {
		return 0, err
	}
	if r.bound(1).PUpper >= alpha {
		return 1, nil
	}
	z := normalQuantileUpper(alpha)
	a := r.sum*r.sum + z*z*r.sumSq
	b := -(2*r.t*r.sum + z*z*r.sumSq)
	c := r.t * r.t
	// Smaller root via the numerically stable form 2c/(−b + √(b²−4ac)).
	disc := b*b - 4*a*c
	if disc < 0 {
		disc = 0
	}
	p := 2 * c / (-b + math.Sqrt(disc))
	return p / (1 - p), nil
}

// McNemar is the Rosenbaum upper bound of McNemar's test at one Γ.
type McNemar struct {
	// Gamma is the sensitivity parameter Γ ≥ 1.
	Gamma float64
	// T counts the discordant pairs in which the treated unit had the
	// event; D counts all discordant pairs.
	T, D int
	// PUpper = P(B ≥ T), B ~ Binomial(D, Γ/(1+Γ)): the upper bound on the
	// one-sided p-value for a positive effect.
	PUpper float64
}

// McNemarBound returns Rosenbaum's upper bound on the one-sided p-value of
// McNemar's test for matched pairs with a binary outcome (Rosenbaum 2002,
// Observational Studies, 2nd ed., §4.3.2). Of the D discordant pairs
// (exactly one unit had the event), T are those where it was the treated
// unit. Under a bias of at most Γ the count T is stochastically no larger
// than Binomial(D, p⁺), p⁺ = Γ/(1+Γ), so
//
//	p ≤ Σ_{k=T}^{D} C(D,k)·p⁺ᵏ(1−p⁺)^{D−k},
//
// summed exactly in log space. At Γ = 1 it is the exact one-sided binomial
// (sign) test of McNemar's statistic.
//
// Γ < 1 or counts with T > D or T < 0 panic; D = 0 is an error wrapping
// ErrNoPairs.
func McNemarBound(t, d int, gamma float64) (McNemar, error) {
	checkGamma(gamma)
	if t < 0 || t > d {
		panic(fmt.Sprintf("sensitivity: McNemar bound: T = %d, D = %d; need 0 ≤ T ≤ D", t, d))
	}
	if d == 0 {
		return McNemar{}, fmt.Errorf("sensitivity: McNemar bound: no discordant pair: %w", ErrNoPairs)
	}
	return McNemar{Gamma: gamma, T: t, D: d, PUpper: binomUpper(t, d, gamma/(1+gamma))}, nil
}

// McNemarPairs counts T and D from paired binary outcomes (treated and
// control event indicators, one entry per pair) and returns McNemarBound.
// A length mismatch panics.
func McNemarPairs(treated, control []bool, gamma float64) (McNemar, error) {
	if len(treated) != len(control) {
		panic(fmt.Sprintf("sensitivity: McNemar pairs: len(treated) = %d, len(control) = %d", len(treated), len(control)))
	}
	var t, d int
	for i := range treated {
		if treated[i] != control[i] {
			d++
			if treated[i] {
				t++
			}
		}
	}
	return McNemarBound(t, d, gamma)
}

// binomUpper returns P(B ≥ t) for B ~ Binomial(n, p), summing the terms
// in log space (log-sum-exp) so that large n neither underflows nor loses
// the small tail.
func binomUpper(t, n int, p float64) float64 {
	if t == 0 {
		return 1
	}
	if p >= 1 {
		return 1
	}
	lp, lq := math.Log(p), math.Log1p(-p)
	lgn, _ := math.Lgamma(float64(n + 1))
	terms := make([]float64, 0, n-t+1)
	maxv := math.Inf(-1)
	for k := t; k <= n; k++ {
		a, _ := math.Lgamma(float64(k + 1))
		b, _ := math.Lgamma(float64(n - k + 1))
		v := lgn - a - b + float64(k)*lp + float64(n-k)*lq
		terms = append(terms, v)
		maxv = math.Max(maxv, v)
	}
	var s float64
	for _, v := range terms {
		s += math.Exp(v - maxv)
	}
	return math.Min(1, math.Exp(maxv)*s)
}

// GammaResolution is the width, in log Γ, of the bracket McNemarGamma
// stops at: a relative error in Γ of about 1e-9.
const GammaResolution = 1e-9

// McNemarGamma returns the sensitivity value of McNemar's test: the Γ at
// which the exact upper bound of McNemarBound equals α. The bound is
// continuous and strictly increasing in Γ (the binomial upper tail
// increases with p⁺), so the crossing is found by bisection on log Γ to a
// bracket width of GammaResolution, i.e. a relative error in Γ of about
// 1e-9. When T = D the bound is p⁺ᴰ and the crossing (Γ/(1+Γ))ᴰ = α is
// solved in closed form. It returns 1 when the test is not significant at
// α even at Γ = 1.
//
// α outside (0, 0.5) panics; D = 0 is an error wrapping ErrNoPairs.
func McNemarGamma(t, d int, alpha float64) (float64, error) {
	checkAlpha(alpha)
	m, err := McNemarBound(t, d, 1)
	if err != nil {
		return 0, err
	}
	if m.PUpper >= alpha {
		return 1, nil
	}
	if t == d {
		// P(B ≥ D) = p⁺ᴰ = α.
		p := math.Pow(alpha, 1/float64(d))
		return p / (1 - p), nil
	}
	lo, hi := 0.0, 1.0 // log Γ
	for binomUpper(t, d, sigmoidExp(hi)) < alpha {
		lo = hi
		hi *= 2
	}
	for hi-lo > GammaResolution {
		mid := (lo + hi) / 2
		if binomUpper(t, d, sigmoidExp(mid)) < alpha {
			lo = mid
		} else {
			hi = mid
		}
	}
	return math.Exp((lo + hi) / 2), nil
}

// sigmoidExp returns Γ/(1+Γ) for Γ = exp(lg).
func sigmoidExp(lg float64) float64 { return 1 / (1 + math.Exp(-lg)) }
