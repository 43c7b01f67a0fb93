package survival

import (
	"fmt"
	"math"
)

// RateData holds one count outcome over unequal exposure. All non-nil
// slices must have the length of Count.
type RateData struct {
	// Count is the number of events, a non-negative integer.
	Count []float64
	// Exposure is the time at risk (member-months, days), > 0.
	Exposure []float64
	Treated  []bool
	// Weight holds non-negative weights; nil means all 1.
	Weight []float64
	// Cluster labels dependent rows; nil means independent rows.
	Cluster []int
}

// RateFit compares event rates between the arms.
type RateFit struct {
	// Rate is Σw·y / Σw·E per arm (0 control, 1 treated), events per
	// exposure unit.
	Rate [2]float64
	// RateRatio = Rate[1]/Rate[0]; HC0 and Cluster are on the log scale.
	RateRatio    float64
	HC0, Cluster Interval
	// Diff is (Rate[1] − Rate[0])·Per: the rate difference per Per
	// exposure units (Per = 1000 reads "per 1,000 member-months"), with
	// its HC0 and cluster intervals on the same scale.
	Per, Diff            float64
	DiffHC0, DiffCluster Interval
	// Groups is the number of clusters (0 without clusters).
	Groups int
}

// Rates fits the weighted Poisson regression log μ_i = β₀ + β₁·z_i +
// log E_i, whose maximum-likelihood rates are the arms' weighted rates
// Σw·y/Σw·E (the score equations set the weighted observed and expected
// counts equal in each arm), so the rate ratio is exp(β₁) with no
// iteration. Its sandwich covariance uses the per-row score w_i·x_i·(y_i −
// μ_i): on the log rate of arm a the influence is w_i (y_i − r_a E_i) /
// Σ_a w·y.
//
//   - HC0 = Σ_i u_i², statsmodels GLM(Poisson, offset = log E,
//     var_weights = w).fit(cov_type = "HC0") (with freq_weights statsmodels
//     gives a different, frequency reading of the weights);
//   - Cluster = G/(G−1)·(N−1)/(N−2)·Σ_g (Σ_{i∈g} u_i)², statsmodels
//     cov_type = "cluster" with its default small-sample correction (N rows,
//     G clusters, 2 parameters). Without clusters it equals HC0.
//
// The rate difference (Rate[1] − Rate[0])·per (per = 1000 for "per 1,000
// exposure units") has influence w_i (y_i − r_a E_i)/Σ_a w·E, the HC0 /
// cluster sandwich of statsmodels WLS(y/E ~ z, weights = w·E).
func Rates(d RateData, per float64) (RateFit, error) {
	n := len(d.Count)
	checkLen("exposure", n, len(d.Exposure))
	checkLen("treated", n, len(d.Treated))
	if d.Weight != nil {
		checkLen("weight", n, len(d.Weight))
	}
	if d.Cluster != nil {
		checkLen("cluster", n, len(d.Cluster))
	}
	if !(per > 0) {
		panic(fmt.Sprintf("survival: rate difference per %v exposure units; per must be > 0", per))
	}
	var badC, badE, badW int
	for i := 0; i < n; i++ {
		y, e := d.Count[i], d.Exposure[i]
		if !(y >= 0) || y != math.Trunc(y) || math.IsInf(y, 1) {
			badC++
		}
		if !(e > 0) || math.IsInf(e, 1) {
			badE++
		}
		if d.Weight != nil && (!(d.Weight[i] >= 0) || math.IsInf(d.Weight[i], 1)) {
			badW++
		}
	}
	switch {
	case badC > 0:
		return RateFit{}, fmt.Errorf("rates: %d units have a count that is missing, negative or fractional", badC)
	case badE > 0:
		return RateFit{}, fmt.Errorf("rates: %d units have an exposure that is missing, not finite or not > 0", badE)
	case badW > 0:
		return RateFit{}, fmt.Errorf("rates: %d units have a weight that is missing, negative or not finite", badW)
	}
	// Canonical order for the sums: a rate row is its (count, exposure,
	// arm, weight, cluster), sorted like a survival row.
	ev := make([]bool, n)
	for i := range ev {
		ev[i] = d.Count[i] > 0
	}
	pseudo := Data{Time: d.Exposure, Event: ev, Treated: d.Treated, Weight: d.Weight, Cluster: d.Cluster}
	order := pseudo.canonical()
	var wy, we [2]float64
	var units [2]int
	for _, i := range order {
		a := b2i(d.Treated[i])
		w := pseudo.weight(int(i))
		wy[a] += w * d.Count[i]
		we[a] += w * d.Exposure[i]
		units[a]++
	}
	f, err := armRates(wy, we, units, per)
	if err != nil {
		return RateFit{}, err
	}
	uL, uD := make([]float64, n), make([]float64, n)
	for i := 0; i < n; i++ {
		a := b2i(d.Treated[i])
		r := pseudo.weight(i) * (d.Count[i] - f.Rate[a]*d.Exposure[i])
		sign := 1.0
		if a == 0 {
			sign = -1
		}
		uL[i] = sign * r / wy[a]
		uD[i] = sign * r / we[a] * per
	}
	of, k := clusters(nil, order)
	seL, seD := math.Sqrt(clusterVar(uL, of, k, order)), math.Sqrt(clusterVar(uD, of, k, order))
	f.HC0 = interval(f.RateRatio, seL, true)
	f.DiffHC0 = interval(f.Diff, seD, false)
	f.Cluster, f.DiffCluster = f.HC0, f.DiffHC0
	if d.Cluster != nil {
		of, k = clusters(d.Cluster, order)
		f.Groups = k
		if k < 2 {
			return RateFit{}, fmt.Errorf("rates: %d cluster; a cluster-robust SE needs at least 2", k)
		}
		c := float64(k) / float64(k-1) * float64(n-1) / float64(n-2)
		f.Cluster = interval(f.RateRatio, math.Sqrt(c*clusterVar(uL, of, k, order)), true)
		f.DiffCluster = interval(f.Diff, math.Sqrt(c*clusterVar(uD, of, k, order)), false)
	}
	return f, nil
}

// armRates checks that both arms have exposure and events and returns
// the fit's rates, rate ratio and rate difference (SEs to be filled).
func armRates(wy, we [2]float64, units [2]int, per float64) (RateFit, error) {
	for a, name := range []string{"control", "treated"} {
		if units[a] == 0 || !(we[a] > 0) {
			return RateFit{}, fmt.Errorf("rates: the %s arm has %d units with positive weight; both arms need exposure", name, units[a])
		}
		if !(wy[a] > 0) {
			return RateFit{}, fmt.Errorf("rates: the %s arm has 0 weighted events over %d units; a rate ratio needs events in both arms", name, units[a])
		}
	}
	f := RateFit{Per: per}
	for a := range f.Rate {
		f.Rate[a] = wy[a] / we[a]
	}
	f.RateRatio = f.Rate[1] / f.Rate[0]
	f.Diff = (f.Rate[1] - f.Rate[0]) * per
	return f, nil
}
