package score

import (
	"fmt"
	"math"
	"slices"
)

// The common-support rules a study may name. Both run modes take their
// interval from SupportInterval, the in-memory one on the score scale and
// the warehouse-scale one on the logit scale, so the rules live here once.
const (
	// SupportNone keeps every unit.
	SupportNone = "none"
	// SupportMinMax keeps the units inside both arms' score ranges,
	// [max of the arms' minima, min of their maxima] (common practice).
	SupportMinMax = "minmax"
	// SupportCrump keeps 0.1 ≤ ps ≤ 0.9 (Crump, Hotz, Imbens & Mitnik
	// 2009, Biometrika 96:187, their rule of thumb).
	SupportCrump = "crump"
)

// SupportRules lists the rule names in the order the study file documents.
var SupportRules = []string{SupportNone, SupportMinMax, SupportCrump}

// Scale says which scale a support interval is expressed on.
type Scale int

const (
	// ScaleScore is the propensity score, in [0, 1].
	ScaleScore Scale = iota
	// ScaleLogit is the linear predictor log(ps/(1−ps)).
	ScaleLogit
)

// SupportInterval returns the kept interval [low, high] of rule on scale,
// given each arm's smallest and largest value on that scale (index 0 the
// comparison arm, 1 the treated). The scales are monotone images of each
// other, so the rule keeps the same units on both up to rounding at the
// boundary.
func SupportInterval(rule string, scale Scale, min, max [2]float64) (low, high float64, err error) {
	switch rule {
	case "", SupportNone:
		if scale == ScaleLogit {
			return math.Inf(-1), math.Inf(1), nil
		}
		return 0, 1, nil
	case SupportMinMax:
		return math.Max(min[0], min[1]), math.Min(max[0], max[1]), nil
	case SupportCrump:
		if scale == ScaleLogit {
			return -math.Log(9), math.Log(9), nil
		}
		return 0.1, 0.9, nil
	}
	return 0, 0, fmt.Errorf("unknown common-support rule %q (want one of %v)", rule, SupportRules)
}

// ArmRanges returns each arm's smallest and largest value of v (index 0
// the comparison arm, 1 the treated): the input SupportInterval needs.
func ArmRanges(v []float64, z []bool) (min, max [2]float64) {
	min = [2]float64{math.Inf(1), math.Inf(1)}
	max = [2]float64{math.Inf(-1), math.Inf(-1)}
	for i, x := range v {
		a := 0
		if z[i] {
			a = 1
		}
		min[a] = math.Min(min[a], x)
		max[a] = math.Max(max[a], x)
	}
	return min, max
}

// SupportBounds returns the kept score interval of rule for scores ps.
// An unknown rule keeps every unit; the study file refuses unknown rules
// before a run starts.
func SupportBounds(rule string, ps []float64, z []bool) (low, high float64) {
	min, max := ArmRanges(ps, z)
	low, high, err := SupportInterval(rule, ScaleScore, min, max)
	if err != nil {
		return 0, 1
	}
	return low, high
}

// SupportMask marks the units whose score lies in rule's interval.
func SupportMask(rule string, ps []float64, z []bool) []bool {
	low, high := SupportBounds(rule, ps, z)
	keep := make([]bool, len(ps))
	for i, p := range ps {
		keep[i] = p >= low && p <= high
	}
	return keep
}

// CStatistic is the area under the ROC curve of the score: the probability
// that a random treated unit scores above a random control, ties counting
// one half (Mann–Whitney form; Hanley & McNeil 1982, Radiology 143:29).
// Each arm is sorted once and the two are merged. NaN when an arm is empty.
func CStatistic(ps []float64, z []bool) float64 {
	var t, c []float64
	for i, p := range ps {
		if z[i] {
			t = append(t, p)
		} else {
			c = append(c, p)
		}
	}
	if len(t) == 0 || len(c) == 0 {
		return math.NaN()
	}
	slices.Sort(t)
	slices.Sort(c)
	var wins float64 // Σ over treated of (#controls below + ½ #controls equal)
	lo, hi := 0, 0   // c[:lo] < v, c[:hi] <= v
	for _, v := range t {
		for lo < len(c) && c[lo] < v {
			lo++
		}
		if hi < lo {
			hi = lo
		}
		for hi < len(c) && c[hi] <= v {
			hi++
		}
		wins += float64(lo) + float64(hi-lo)/2
	}
	return wins / (float64(len(t)) * float64(len(c)))
}
