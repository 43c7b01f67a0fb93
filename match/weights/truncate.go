package weights

import (
	"fmt"
	"math"
	"sort"
)

// Truncate returns a new slice in which each positive weight is winsorised
// to the [lowPct, highPct] percentiles of the positive weights of its own
// arm: below the low percentile it is raised to it, above the high one
// lowered to it. Extreme inverse-probability weights inflate the variance
// far more than they remove bias, and truncating them at percentiles
// (commonly the 1st and 99th) trades a little bias for much less variance
// (Cole & Hernán 2008, Am J Epidemiol 168:656; Lee, Lessler & Stuart 2011,
// PLoS One 6:e18174; both from memory; common practice).
//
// Percentiles are taken within each arm rather than over the whole cohort
// because the arms' weights live on different scales (for ATT weights
// every treated unit has weight 1; for ATE weights the treated carry 1/e
// and the controls 1/(1−e)), so a cohort-wide percentile would cut mostly
// one arm. Only positive weights enter the percentiles, and zero weights
// (units restricted out) stay zero. A percentile p of the n sorted weights
// x₍₁₎ ≤ … ≤ x₍ₙ₎ is linearly interpolated at position h = (n−1)·p/100,
// x₍⌊h⌋+1₎ + (h − ⌊h⌋)(x₍⌊h⌋+2₎ − x₍⌊h⌋+1₎) (Hyndman & Fan 1996, Am Stat
// 50:361, type 7: the default of R's quantile and numpy's percentile).
// Truncate(w, z, 0, 100) returns a copy of w.
//
// 0 ≤ lowPct ≤ highPct ≤ 100 is required and a length mismatch panics; a
// negative, NaN or infinite weight is an error naming the unit, as in
// Check.
func Truncate(w []float64, z []bool, lowPct, highPct float64) ([]float64, error) {
	if len(w) != len(z) {
		panic(fmt.Sprintf("weights: Truncate: len(w) = %d, len(z) = %d", len(w), len(z)))
	}
	if !(lowPct >= 0 && lowPct <= highPct && highPct <= 100) {
		panic(fmt.Sprintf("weights: Truncate: percentiles [%v, %v]; need 0 ≤ low ≤ high ≤ 100", lowPct, highPct))
	}
	if err := Check(w); err != nil {
		return nil, fmt.Errorf("truncate: %w", err)
	}
	out := make([]float64, len(w))
	copy(out, w)
	for _, arm := range []bool{true, false} {
		var xs []float64
		for i, wi := range w {
			if z[i] == arm && wi > 0 {
				xs = append(xs, wi)
			}
		}
		if len(xs) == 0 {
			continue
		}
		sort.Float64s(xs)
		lo, hi := Percentile(xs, lowPct), Percentile(xs, highPct)
		for i, wi := range w {
			if z[i] == arm && wi > 0 {
				out[i] = math.Min(math.Max(wi, lo), hi)
			}
		}
	}
	return out, nil
}

// Percentile returns the p-th percentile (0 ≤ p ≤ 100) of the sorted,
// non-empty slice xs by linear interpolation between order statistics,
// Hyndman & Fan (1996, Am Stat 50:361) type 7, the default of R's quantile
// and numpy's percentile. An empty slice or p outside [0, 100] panics.
func Percentile(xs []float64, p float64) float64 {
	if len(xs) == 0 || !(p >= 0 && p <= 100) {
		panic(fmt.Sprintf("weights: Percentile: %d values, p = %v", len(xs), p))
	}
	h := float64(len(xs)-1) * p / 100
	k := int(math.Floor(h))
	if k >= len(xs)-1 {
		return xs[len(xs)-1]
	}
	return xs[k] + (h-float64(k))*(xs[k+1]-xs[k])
}

// Clip returns a new slice with every positive weight clamped to [lo, hi]
// (common practice, e.g. capping IPW at a fixed value such as 10). Zero
// weights stay zero, because a zero marks a unit restricted out of the
// analysis, not a small weight; NaN passes through for Check to report.
// lo > hi or a negative lo panics.
func Clip(w []float64, lo, hi float64) []float64 {
	if !(lo >= 0 && lo <= hi) {
		panic(fmt.Sprintf("weights: Clip: bounds [%v, %v]; need 0 ≤ lo ≤ hi", lo, hi))
	}
	out := make([]float64, len(w))
	for i, wi := range w {
		if wi > 0 {
			out[i] = math.Min(math.Max(wi, lo), hi)
		} else {
			out[i] = wi
		}
	}
	return out
}
