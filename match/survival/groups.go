package survival

import (
	"cmp"
	"fmt"
	"math"
	"slices"
)

// TimeGroup aggregates the units of one arm that share a follow-up time and
// an event status: the rows of a grouped query such as
//
//	select treated, time, event, count(*), sum(w), sum(w*w)
//	from cohort group by treated, time, event
//
// which a warehouse can run over any number of units.
type TimeGroup struct {
	Time    float64
	Treated bool
	Event   bool
	// N is the number of units, W the sum of their weights, W2 the sum of
	// their squared weights (with unit weights W = W2 = N).
	N     int
	W, W2 float64
}

// KaplanMeierGroups is KaplanMeier over grouped rows. The estimates and
// Greenwood SEs depend on the data only through these sums; so does the
// row-level robust SE, because a unit's influence depends only on its arm,
// time and status (Σ_i (w_i·IF)² = IF²·Σw²). Clustered SEs need the rows;
// they are not available here, and Robust is the row-level one.
// Duplicate groups are merged.
func KaplanMeierGroups(g []TimeGroup, horizons []float64) (KMResult, error) {
	d, err := fromGroups(g)
	if err != nil {
		return KMResult{}, fmt.Errorf("kaplan-meier: %w", err)
	}
	return KaplanMeier(d, horizons)
}

// CoxGroups is Cox over grouped rows: the fit, model SE, row-level robust
// SE and PH check depend on the data only through these sums (the score
// residual of a unit is a function of its arm, time and status). Cluster
// equals Robust. Duplicate groups are merged.
func CoxGroups(g []TimeGroup, ties Ties) (CoxFit, error) {
	d, err := fromGroups(g)
	if err != nil {
		return CoxFit{}, fmt.Errorf("cox: %w", err)
	}
	return Cox(d, ties)
}

// fromGroups validates and merges groups and turns each into a pseudo-row.
func fromGroups(g []TimeGroup) (Data, error) {
	bad := 0
	for _, x := range g {
		if x.N < 1 || !(x.W >= 0) || !(x.W2 >= 0) || math.IsInf(x.W, 1) || math.IsInf(x.W2, 1) {
			bad++
		}
	}
	if bad > 0 {
		return Data{}, fmt.Errorf("survival: %d groups have a unit count < 1 or a weight sum that is missing, negative or not finite", bad)
	}
	s := slices.Clone(g)
	slices.SortFunc(s, func(a, b TimeGroup) int {
		if c := cmp.Compare(a.Time, b.Time); c != 0 {
			return c
		}
		if a.Event != b.Event {
			if a.Event {
				return -1
			}
			return 1
		}
		if a.Treated != b.Treated {
			if b.Treated {
				return -1
			}
			return 1
		}
		if c := cmp.Compare(a.W, b.W); c != 0 {
			return c
		}
		if c := cmp.Compare(a.W2, b.W2); c != 0 {
			return c
		}
		return cmp.Compare(a.N, b.N)
	})
	var m []TimeGroup
	for _, x := range s {
		if k := len(m) - 1; k >= 0 && m[k].Time == x.Time && m[k].Event == x.Event && m[k].Treated == x.Treated {
			m[k].N += x.N
			m[k].W += x.W
			m[k].W2 += x.W2
			continue
		}
		m = append(m, x)
	}
	d := Data{Time: make([]float64, len(m)), Event: make([]bool, len(m)), Treated: make([]bool, len(m)),
		Weight: make([]float64, len(m)), count: make([]int, len(m)), sqW: make([]float64, len(m))}
	for i, x := range m {
		d.Time[i], d.Event[i], d.Treated[i] = x.Time, x.Event, x.Treated
		d.Weight[i], d.count[i], d.sqW[i] = x.W, x.N, math.Sqrt(x.W2)
	}
	return d, d.validate()
}

// RateGroup aggregates the units of one arm within one cluster (or, with
// no clusters, of one arm): Σw·y, Σw·E and the squared-weight sums the HC0
// sandwich needs, as one grouped query can return them.
type RateGroup struct {
	Treated bool
	Cluster int
	N       int
	// WY = Σw·y, WE = Σw·E, W2YY = Σw²y², W2YE = Σw²·y·E, W2EE = Σw²E².
	WY, WE, W2YY, W2YE, W2EE float64
}

// RatesGroups is Rates over grouped rows. HC0 needs only the sums; the
// cluster SE treats each distinct Cluster label as one cluster, so it is
// reported only when clustered is true (groups by cluster × arm) and
// equals HC0 otherwise. Groups with the same label and arm are merged.
func RatesGroups(g []RateGroup, per float64, clustered bool) (RateFit, error) {
	if !(per > 0) {
		panic(fmt.Sprintf("survival: rate difference per %v exposure units; per must be > 0", per))
	}
	bad := 0
	for _, x := range g {
		if x.N < 1 {
			bad++
			continue
		}
		for _, v := range []float64{x.WY, x.WE, x.W2YY, x.W2YE, x.W2EE} {
			if !(v >= 0) || math.IsInf(v, 1) {
				bad++
				break
			}
		}
	}
	if bad > 0 {
		return RateFit{}, fmt.Errorf("rates: %d groups have a unit count < 1 or a sum that is missing, negative or not finite", bad)
	}
	s := slices.Clone(g)
	slices.SortFunc(s, func(a, b RateGroup) int {
		if c := cmp.Compare(a.Cluster, b.Cluster); c != 0 {
			return c
		}
		if c := cmp.Compare(b2i(a.Treated), b2i(b.Treated)); c != 0 {
			return c
		}
		return cmp.Compare(a.WY, b.WY)
	})
	var m []RateGroup
	for _, x := range s {
		if k := len(m) - 1; k >= 0 && m[k].Cluster == x.Cluster && m[k].Treated == x.Treated {
			m[k].N += x.N
			m[k].WY += x.WY
			m[k].WE += x.WE
			m[k].W2YY += x.W2YY
			m[k].W2YE += x.W2YE
			m[k].W2EE += x.W2EE
			continue
		}
		m = append(m, x)
	}
	var wy, we [2]float64
	var units [2]int
	n := 0
	for _, x := range m {
		a := b2i(x.Treated)
		wy[a] += x.WY
		we[a] += x.WE
		units[a] += x.N
		n += x.N
	}
	f, err := armRates(wy, we, units, per)
	if err != nil {
		return RateFit{}, err
	}
	// HC0: Σ_rows w²(y − rE)² = Σw²y² − 2r·Σw²yE + r²·Σw²E², per arm.
	var vL, vD float64
	for _, x := range m {
		a := b2i(x.Treated)
		r := f.Rate[a]
		ss := math.Max(0, x.W2YY-2*r*x.W2YE+r*r*x.W2EE)
		vL += ss / (wy[a] * wy[a])
		vD += ss / (we[a] * we[a]) * per * per
	}
	f.HC0 = interval(f.RateRatio, math.Sqrt(vL), true)
	f.DiffHC0 = interval(f.Diff, math.Sqrt(vD), false)
	f.Cluster, f.DiffCluster = f.HC0, f.DiffHC0
	if !clustered {
		return f, nil
	}
	var cL, cD float64
	k := 0
	for i := 0; i < len(m); {
		var sL, sD float64
		j := i
		for ; j < len(m) && m[j].Cluster == m[i].Cluster; j++ {
			x := m[j]
			a := b2i(x.Treated)
			sign := 1.0
			if a == 0 {
				sign = -1
			}
			r := x.WY - f.Rate[a]*x.WE
			sL += sign * r / wy[a]
			sD += sign * r / we[a] * per
		}
		cL += sL * sL
		cD += sD * sD
		k++
		i = j
	}
	if k < 2 {
		return RateFit{}, fmt.Errorf("rates: %d cluster; a cluster-robust SE needs at least 2", k)
	}
	f.Groups = k
	c := float64(k) / float64(k-1) * float64(n-1) / float64(n-2)
	f.Cluster = interval(f.RateRatio, math.Sqrt(c*cL), true)
	f.DiffCluster = interval(f.Diff, math.Sqrt(c*cD), false)
	return f, nil
}
