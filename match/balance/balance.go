package balance

import (
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"
	"sync/atomic"
)

// Variable is one numeric covariate, or the 0/1 indicator of one level of a
// categorical covariate (Level names the level; Binary is true).
// A numeric covariate that only takes the values 0 and 1 should also be
// marked Binary so that its SMD uses the proportion formula.
type Variable struct {
	Name, Level string
	Binary      bool
	Values      []float64
}

// Label names the variable in messages: "name", or "name=level" for a
// level of a categorical covariate.
func (v Variable) Label() string { return label(v.Name, v.Level) }

func label(name, level string) string {
	if level == "" {
		return name
	}
	return name + "=" + level
}

// Stat is the balance of one variable under one adjustment (or none).
// Means, SDs and the variance ratio use the adjustment's weights; the SMD
// divides by the unadjusted pooled SD (Denom).
type Stat struct {
	Name, Level string
	Binary      bool
	// NT and NC count the units with positive weight in each arm.
	NT, NC int
	// MeanT and MeanC are the weighted means (WeightedMean) of each arm;
	// for a binary variable, the weighted proportions.
	MeanT, MeanC float64
	// SDT and SDC are the square roots of the weighted variances
	// (WeightedVar) of each arm, binary variables included.
	SDT, SDC float64
	// Denom is the unadjusted pooled SD (PooledSD) the SMD divides by.
	Denom float64
	// SMD is (MeanT − MeanC)/Denom (Austin 2009).
	SMD float64
	// VarRatio is SDT²/SDC².
	VarRatio float64
	// KS is the weighted Kolmogorov–Smirnov distance between the arms.
	KS float64
}

// Label names the variable as Variable.Label does.
func (s Stat) Label() string { return label(s.Name, s.Level) }

// WeightedMean returns the weighted mean
//
//	m = Σ w_i·x_i / Σ w_i
//
// over the units with w_i > 0 (a zero-weight unit is ignored even if x_i is
// NaN). It is evaluated as c + Σ w_i·(x_i − c) / Σ w_i with c the first
// value of positive weight, which is the same number up to rounding but
// returns a constant column's value exactly. Nil weights mean all ones.
// With no positive weight the mean is NaN.
func WeightedMean(x, w []float64) float64 {
	checkLen("WeightedMean", x, w)
	// Accumulate deviations from the first value: the same quantity, but
	// a constant column gives its value exactly (and so variance 0) and
	// large offsets lose less precision.
	var sw, swd, shift float64
	first := true
	for i, xi := range x {
		wi := weight(w, i)
		if wi == 0 {
			continue
		}
		if first {
			shift, first = xi, false
		}
		sw += wi
		swd += wi * (xi - shift)
	}
	return shift + swd/sw
}

// WeightedVar returns the weighted variance with the reliability-weight
// (unbiased) correction
//
//	V₁ = Σ w_i,  V₂ = Σ w_i²,  m = Σ w_i·x_i / V₁
//	s² = Σ w_i·(x_i − m)² / (V₁ − V₂/V₁)
//
// over the units with w_i > 0. With all weights equal it is the ordinary
// n−1 sample variance, and it does not change when every weight is
// multiplied by the same constant; it is what R's cov.wt(method =
// "unbiased") and numpy's cov(aweights = w) compute. Nil weights mean all
// ones. Fewer than two units with positive weight give NaN.
func WeightedVar(x, w []float64) float64 {
	checkLen("WeightedVar", x, w)
	m := WeightedMean(x, w)
	var v1, v2, ss float64
	for i, xi := range x {
		wi := weight(w, i)
		if wi == 0 {
			continue
		}
		v1 += wi
		v2 += wi * wi
		d := xi - m
		ss += wi * d * d
	}
	den := v1 - v2/v1
	if !(den > 0) {
		return math.NaN()
	}
	return ss / den
}

// PooledSD returns the unadjusted pooled standard deviation that every SMD
// of v divides by, before and after adjustment (Austin & Stuart 2015, Stat
// Med 34:3661):
//
//	continuous: √((s₁² + s₀²)/2),            s² the n−1 sample variance of the arm
//	binary:     √((p₁(1−p₁) + p₀(1−p₀))/2),   p the proportion of the arm
//
// following Austin (2009, Stat Med 28:3083). Every unit counts with weight
// 1; z marks the treated. An arm with fewer than two units (continuous) or
// no unit (binary) gives NaN.
func PooledSD(v Variable, z []bool) float64 {
	if len(v.Values) != len(z) {
		panic(fmt.Sprintf("balance: PooledSD: %s has %d values, z has %d", v.Label(), len(v.Values), len(z)))
	}
	t := armSummary(v.Values, z, nil, true)
	c := armSummary(v.Values, z, nil, false)
	if v.Binary {
		return math.Sqrt((t.mean*(1-t.mean) + c.mean*(1-c.mean)) / 2)
	}
	return math.Sqrt((t.variance + c.variance) / 2)
}

// Compute returns one Stat per variable, comparing the treated (z true) and
// control arms under weights w (nil: unadjusted, all ones).
//
// denom gives the unadjusted pooled SD of each variable (PooledSD of the
// whole cohort). Pass it when the adjusted rows are not the unadjusted
// cohort, for example when matching with reuse repeats a unit once per
// matched set; nil computes PooledSD from vars and z, ignoring w.
//
// For each variable:
//
//	MeanT, MeanC   WeightedMean of the arm
//	SDT, SDC       √WeightedVar of the arm (binary variables too)
//	SMD            (MeanT − MeanC) / denom
//	VarRatio       SDT² / SDC²
//	KS             max over x of |F_T(x) − F_C(x)|, F the weighted empirical CDF
//	               F(x) = Σ_{x_i ≤ x} w_i / Σ w_i of the arm
//
// A zero denom means the variable is constant in the unadjusted cohort:
// the SMD is then 0 when the means are equal and ±Inf otherwise (the means
// of a constant column are computed exactly, see WeightedMean). A zero control variance
// gives VarRatio 1 when the treated variance is also zero and +Inf
// otherwise. An arm without positive weight gives NaN means and SMD.
func Compute(vars []Variable, z []bool, w []float64, denom []float64) []Stat {
	if w != nil && len(w) != len(z) {
		panic(fmt.Sprintf("balance: Compute: len(w) = %d, len(z) = %d", len(w), len(z)))
	}
	if denom != nil && len(denom) != len(vars) {
		panic(fmt.Sprintf("balance: Compute: len(denom) = %d, len(vars) = %d", len(denom), len(vars)))
	}
	for i, wi := range w {
		if !(wi >= 0) || math.IsInf(wi, 1) {
			panic(fmt.Sprintf("balance: Compute: weight %d is %v; validate weights with weights.Check", i, wi))
		}
	}
	out := make([]Stat, len(vars))
	for k, v := range vars {
		if len(v.Values) != len(z) {
			panic(fmt.Sprintf("balance: Compute: %s has %d values, z has %d", v.Label(), len(v.Values), len(z)))
		}
		d := 0.0
		if denom != nil {
			d = denom[k]
		} else {
			d = PooledSD(v, z)
		}
		out[k] = stat(v, z, w, d, false)
	}
	return out
}

// stat computes one variable's row; skipKS leaves KS of a continuous
// variable to the caller (Prepared computes it from ranks).
func stat(v Variable, z []bool, w []float64, d float64, skipKS bool) Stat {
	t := armSummary(v.Values, z, w, true)
	c := armSummary(v.Values, z, w, false)
	var ks float64
	switch {
	case v.Binary:
		// For a 0/1 variable the CDFs differ only at 0, by |p_T − p_C|.
		ks = math.Abs(t.mean - c.mean)
	case !skipKS:
		ks = KS(v.Values, z, w)
	}
	return Stat{
		Name: v.Name, Level: v.Level, Binary: v.Binary,
		NT: t.n, NC: c.n,
		MeanT: t.mean, MeanC: c.mean,
		SDT: math.Sqrt(t.variance), SDC: math.Sqrt(c.variance),
		Denom:    d,
		SMD:      smd(t.mean, c.mean, d),
		VarRatio: varRatio(t.variance, c.variance),
		KS:       ks,
	}
}

// Prepared holds what every adjustment of one cohort shares: the variables,
// their unadjusted denominators and each continuous variable's dense ranks.
// A run compares many adjustments on the same units, so ranking once lets
// each adjustment's KS be one sequential pass plus a pass over the distinct
// values, instead of a sort (or a random-access walk) per adjustment.
type Prepared struct {
	vars  []Variable
	z     []bool
	denom []float64
	// shift holds each variable's unadjusted arm means (treated, control):
	// the one-pass sums are taken around them, which keeps them accurate.
	shift [][2]float64
	// rank[k][i] is the dense rank of unit i's value among the distinct
	// values of variable k (nil for binary variables); distinct[k] counts
	// those values.
	rank     [][]int32
	distinct []int
}

// Prepare fixes the unadjusted pooled SDs (the SMD denominators) and, when
// withKS is set, ranks each continuous variable once so that Compute can
// report KS; without it Compute leaves a continuous variable's KS NaN (a
// binary variable's KS, |p_T − p_C|, is always reported). KS is the costly
// measure at scale and no gate uses it, so runs ask for it only when a
// report will show it.
func Prepare(vars []Variable, z []bool, withKS bool) *Prepared {
	p := &Prepared{vars: vars, z: z, denom: make([]float64, len(vars)), shift: make([][2]float64, len(vars)),
		rank: make([][]int32, len(vars)), distinct: make([]int, len(vars))}
	parallel(len(vars), func(k int) {
		v := vars[k]
		if len(v.Values) != len(z) {
			panic(fmt.Sprintf("balance: Prepare: %s has %d values, z has %d", v.Label(), len(v.Values), len(z)))
		}
		p.denom[k] = PooledSD(v, z)
		p.shift[k] = [2]float64{armSummary(v.Values, z, nil, true).mean, armSummary(v.Values, z, nil, false).mean}
		if v.Binary || !withKS {
			return
		}
		p.rank[k], p.distinct[k] = denseRanks(v.Values)
	})
	return p
}

// Compute is the package-level Compute with the shared denominators and
// ranks, in parallel across variables; the results agree with Compute to
// rounding.
func (p *Prepared) Compute(w []float64) []Stat {
	if w != nil && len(w) != len(p.z) {
		panic(fmt.Sprintf("balance: Compute: len(w) = %d, len(z) = %d", len(w), len(p.z)))
	}
	for i, wi := range w {
		if !(wi >= 0) || math.IsInf(wi, 1) {
			panic(fmt.Sprintf("balance: Compute: weight %d is %v; validate weights with weights.Check", i, wi))
		}
	}
	out := make([]Stat, len(p.vars))
	parallel(len(p.vars), func(k int) {
		v := p.vars[k]
		t, c := armMoments(v.Values, p.z, w, p.shift[k])
		st := Stat{
			Name: v.Name, Level: v.Level, Binary: v.Binary,
			NT: t.n, NC: c.n,
			MeanT: t.mean, MeanC: c.mean,
			SDT: math.Sqrt(t.variance), SDC: math.Sqrt(c.variance),
			Denom:    p.denom[k],
			SMD:      smd(t.mean, c.mean, p.denom[k]),
			VarRatio: varRatio(t.variance, c.variance),
			KS:       math.NaN(),
		}
		switch {
		case v.Binary:
			st.KS = math.Abs(t.mean - c.mean)
		case p.rank[k] != nil:
			st.KS = ksRanked(p.rank[k], p.distinct[k], p.z, w)
		}
		out[k] = st
	})
	return out
}

// armMoments is armSummary for both arms in one pass: sums of w, w·d,
// w·d² and w² with d = x − shift[arm], giving
//
//	m  = shift + Σw·d/Σw
//	s² = (Σw·d² − (Σw·d)²/Σw) / (Σw − Σw²/Σw)
//
// the same WeightedMean and WeightedVar; shifting by the arm's unadjusted
// mean keeps the one-pass form free of cancellation.
func armMoments(x []float64, z []bool, w []float64, shift [2]float64) (t, c summary) {
	var s0, s1, s2, w2 [2]float64
	var n [2]int
	for i, xi := range x {
		wi := 1.0
		if w != nil {
			wi = w[i]
			if wi == 0 {
				continue
			}
		}
		a := 1
		if z[i] {
			a = 0
		}
		d := xi - shift[a]
		n[a]++
		s0[a] += wi
		s1[a] += wi * d
		s2[a] += wi * d * d
		w2[a] += wi * wi
	}
	var out [2]summary
	for a := range out {
		out[a].n = n[a]
		if s0[a] == 0 {
			out[a].mean, out[a].variance = math.NaN(), math.NaN()
			continue
		}
		out[a].mean = shift[a] + s1[a]/s0[a]
		if den := s0[a] - w2[a]/s0[a]; den > 0 {
			out[a].variance = math.Max(0, (s2[a]-s1[a]*s1[a]/s0[a])/den)
		} else {
			out[a].variance = math.NaN()
		}
	}
	return out[0], out[1]
}

// ksRanked is KS from dense ranks: the arms' weights are summed per
// distinct value, then the two eCDFs are walked together over the values,
// which compares them exactly after each run of ties.
func ksRanked(rank []int32, m int, z []bool, w []float64) float64 {
	bt := make([]float64, m)
	bc := make([]float64, m)
	var st, sc float64
	for i, r := range rank {
		wi := weight(w, i)
		if wi == 0 {
			continue
		}
		if z[i] {
			bt[r] += wi
			st += wi
		} else {
			bc[r] += wi
			sc += wi
		}
	}
	if st == 0 || sc == 0 {
		return math.NaN()
	}
	var ft, fc, d float64
	for j := 0; j < m; j++ {
		ft += bt[j]
		fc += bc[j]
		d = math.Max(d, math.Abs(ft/st-fc/sc))
	}
	return d
}

// denseRanks returns each value's rank among the distinct values (0-based,
// ascending) and how many distinct values there are. It sorts indexes by
// an LSD radix sort on the order-preserving bit pattern of the float64,
// skipping byte positions where every key agrees (small integer codes
// need one or two passes).
func denseRanks(x []float64) ([]int32, int) {
	n := len(x)
	keys := make([]uint64, n)
	var and, or uint64 = ^uint64(0), 0
	for i, v := range x {
		b := math.Float64bits(v)
		if b>>63 == 1 {
			b = ^b
		} else {
			b |= 1 << 63
		}
		if v == 0 { // +0 and −0 are the same value
			b = 1 << 63
		}
		keys[i] = b
		and &= b
		or |= b
	}
	idx := make([]int32, n)
	for i := range idx {
		idx[i] = int32(i)
	}
	tmp := make([]int32, n)
	varying := and ^ or
	for shift := uint(0); shift < 64; shift += 8 {
		if (varying>>shift)&0xff == 0 {
			continue
		}
		var count [257]int
		for _, i := range idx {
			count[((keys[i]>>shift)&0xff)+1]++
		}
		for d := 1; d < 257; d++ {
			count[d] += count[d-1]
		}
		for _, i := range idx {
			d := (keys[i] >> shift) & 0xff
			tmp[count[d]] = i
			count[d]++
		}
		idx, tmp = tmp, idx
	}
	rank := make([]int32, n)
	m := 0
	for j, i := range idx {
		if j > 0 && keys[i] != keys[idx[j-1]] {
			m++
		}
		rank[i] = int32(m)
	}
	if n > 0 {
		m++
	}
	return rank, m
}

// parallel runs f(0..n-1) over GOMAXPROCS goroutines.
func parallel(n int, f func(int)) {
	workers := min(runtime.GOMAXPROCS(0), n)
	if workers <= 1 {
		for k := 0; k < n; k++ {
			f(k)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for g := 0; g < workers; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				k := int(next.Add(1) - 1)
				if k >= n {
					return
				}
				f(k)
			}
		}()
	}
	wg.Wait()
}

func smd(mt, mc, d float64) float64 {
	diff := mt - mc
	switch {
	case d != 0:
		return diff / d
	case diff == 0:
		return 0
	case math.IsNaN(diff):
		return diff
	}
	return math.Copysign(math.Inf(1), diff)
}

func varRatio(vt, vc float64) float64 {
	if vc == 0 {
		switch {
		case vt == 0:
			return 1
		case vt > 0:
			return math.Inf(1)
		}
	}
	return vt / vc
}

// KS returns the weighted two-sample Kolmogorov–Smirnov distance between
// the treated (z true) and control values of x:
//
//	D = max_x |F_T(x) − F_C(x)|,  F_a(x) = Σ_{i∈a, x_i ≤ x} w_i / Σ_{i∈a} w_i
//
// over units with w_i > 0; with nil weights it is the ordinary two-sample
// statistic (Kolmogorov 1933; Smirnov 1939). For a 0/1 variable it equals
// |p_T − p_C|. An arm without positive weight gives NaN.
func KS(x []float64, z []bool, w []float64) float64 {
	if len(x) != len(z) {
		panic(fmt.Sprintf("balance: KS: len(x) = %d, len(z) = %d", len(x), len(z)))
	}
	checkLen("KS", x, w)
	idx := make([]int, 0, len(x))
	var st, sc float64
	for i := range x {
		wi := weight(w, i)
		if wi == 0 {
			continue
		}
		idx = append(idx, i)
		if z[i] {
			st += wi
		} else {
			sc += wi
		}
	}
	if st == 0 || sc == 0 {
		return math.NaN()
	}
	slices.SortFunc(idx, func(a, b int) int {
		switch {
		case x[a] < x[b]:
			return -1
		case x[a] > x[b]:
			return 1
		}
		return 0
	})
	var ft, fc, d float64
	for k, i := range idx {
		if z[i] {
			ft += weight(w, i) / st
		} else {
			fc += weight(w, i) / sc
		}
		// Compare the CDFs only after the last of a run of ties.
		if k+1 < len(idx) && x[idx[k+1]] == x[i] {
			continue
		}
		d = math.Max(d, math.Abs(ft-fc))
	}
	return d
}

type summary struct {
	n              int
	mean, variance float64
}

// armSummary applies WeightedMean and WeightedVar to one arm.
func armSummary(x []float64, z []bool, w []float64, arm bool) summary {
	var s summary
	var v1, swd, shift float64
	for i, xi := range x {
		wi := weight(w, i)
		if z[i] != arm || wi == 0 {
			continue
		}
		if s.n == 0 {
			shift = xi // as in WeightedMean
		}
		s.n++
		v1 += wi
		swd += wi * (xi - shift)
	}
	s.mean = shift + swd/v1
	var v2, ss float64
	for i, xi := range x {
		wi := weight(w, i)
		if z[i] != arm || wi == 0 {
			continue
		}
		v2 += wi * wi
		d := xi - s.mean
		ss += wi * d * d
	}
	if den := v1 - v2/v1; den > 0 {
		s.variance = ss / den
	} else {
		s.variance = math.NaN()
	}
	return s
}

func weight(w []float64, i int) float64 {
	if w == nil {
		return 1
	}
	return w[i]
}

func checkLen(fn string, x, w []float64) {
	if w != nil && len(w) != len(x) {
		panic(fmt.Sprintf("balance: %s: len(x) = %d, len(w) = %d", fn, len(x), len(w)))
	}
}

// Limits are the balance gate. A zero field disables its check.
type Limits struct {
	// SMD is the bound on |SMD|, passed when strictly below it; 0.1 is
	// the usual choice (Normand et al. 2001; Austin 2009).
	SMD float64
	// VarRatio L bounds the variance ratio of non-binary variables to
	// [1/L, L] (either L or 1/L may be given); 2 is the usual choice
	// (Rubin 2001, Health Serv Outcomes Res Methodol 2:169).
	VarRatio float64
}

// DefaultLimits returns |SMD| < 0.1 and variance ratio in [0.5, 2].
func DefaultLimits() Limits { return Limits{SMD: 0.1, VarRatio: 2} }

// Verdict is the outcome of the balance gate.
type Verdict struct {
	Pass bool
	// WorstSMD is the SMD (with its sign) of largest magnitude and
	// WorstVariable its label; an undefined (NaN) SMD counts as worst.
	WorstSMD      float64
	WorstVariable string
	// WorstVarRatio is the variance ratio of non-binary variables farthest
	// from 1 on the log scale, and WorstVarRatioVariable its label.
	WorstVarRatio         float64
	WorstVarRatioVariable string
	// Failures says, one line per failed check, which variable failed and
	// by how much.
	Failures []string
}

// Judge applies the limits to stats. The run passes when every |SMD| <
// lim.SMD and, for non-binary variables, 1/lim.VarRatio ≤ VarRatio ≤
// lim.VarRatio (Rubin 2001). A NaN SMD or variance ratio (an arm with too
// few weighted units) fails its check; binary variables are exempt from the
// variance ratio because their variance is fixed by their mean.
func Judge(stats []Stat, lim Limits) Verdict {
	v := Verdict{Pass: true, WorstVarRatio: 1}
	worst, worstVR := -1.0, -1.0
	lo, hi := lim.VarRatio, 1/lim.VarRatio
	if lo > hi {
		lo, hi = hi, lo
	}
	for _, s := range stats {
		a := math.Abs(s.SMD)
		if math.IsNaN(s.SMD) {
			a = math.Inf(1)
		}
		if a > worst {
			worst, v.WorstSMD, v.WorstVariable = a, s.SMD, s.Label()
		}
		if lim.SMD > 0 && !(math.Abs(s.SMD) < lim.SMD) {
			v.Failures = append(v.Failures, fmt.Sprintf("%s: |SMD| %.4g, limit %.4g", s.Label(), math.Abs(s.SMD), lim.SMD))
		}
		if s.Binary {
			continue
		}
		r := math.Abs(math.Log(s.VarRatio))
		if math.IsNaN(r) {
			r = math.Inf(1)
		}
		if r > worstVR {
			worstVR, v.WorstVarRatio, v.WorstVarRatioVariable = r, s.VarRatio, s.Label()
		}
		if lim.VarRatio > 0 && !(s.VarRatio >= lo && s.VarRatio <= hi) {
			v.Failures = append(v.Failures, fmt.Sprintf("%s: variance ratio %.4g, allowed [%.4g, %.4g]", s.Label(), s.VarRatio, lo, hi))
		}
	}
	v.Pass = len(v.Failures) == 0
	return v
}
