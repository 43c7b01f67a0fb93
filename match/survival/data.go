package survival

import (
	"cmp"
	"fmt"
	"math"
	"slices"
)

// ZCrit is the 0.975 quantile of the standard normal distribution, used for
// every 95% interval in this package.
const ZCrit = 1.959963984540054

// Data holds one time-to-event outcome for a two-arm comparison. All
// non-nil slices must have the length of Time.
type Data struct {
	// Time is the follow-up time, > 0: time of the event, or of censoring.
	Time []float64
	// Event is true for an event, false for a censored row.
	Event []bool
	// Treated is true for the treated arm.
	Treated []bool
	// Weight holds non-negative case weights; nil means all 1. Rows of
	// weight 0 are dropped before anything is computed.
	Weight []float64
	// Cluster labels dependent rows (a matched set, a reused control's
	// copies); nil means every row is its own cluster.
	Cluster []int

	// count and sqW are set only by the grouped entry points: a pseudo-row
	// then stands for count[i] rows whose weights sum to Weight[i] and
	// whose squared weights sum to sqW[i]².
	count []int
	sqW   []float64
}

// Interval is a standard error with its 95% interval and two-sided p-value.
// For a ratio the SE is that of the logarithm and the interval is
// exp(log ratio ± z·SE); the p-value tests ratio 1, otherwise value 0.
// Survival, risk, RMST and their differences use the linear scale, value ±
// z·SE (R survfit's conf.type = "plain"), so the interval of a survival
// near 0 or 1 can leave [0, 1]; a caller plotting bands clips them.
type Interval struct {
	SE, Lo, Hi, P float64
}

// Measure is an estimate with its Greenwood-type (frequency-weight,
// independent arms) and robust (influence-function, clustered when
// clusters are given) intervals.
type Measure struct {
	Value float64
	// Ratio is true when Value is a ratio whose SEs are on the log scale.
	Ratio     bool
	Greenwood Interval
	Robust    Interval
}

// interval builds the 95% interval of value (or of log value when ratio)
// with standard error se.
func interval(value, se float64, ratio bool) Interval {
	if ratio {
		l := math.Log(value)
		return Interval{SE: se, Lo: math.Exp(l - ZCrit*se), Hi: math.Exp(l + ZCrit*se), P: pNormal(l / se)}
	}
	return Interval{SE: se, Lo: value - ZCrit*se, Hi: value + ZCrit*se, P: pNormal(value / se)}
}

// pNormal is the two-sided normal p-value of a z statistic.
func pNormal(z float64) float64 {
	if math.IsNaN(z) {
		return math.NaN()
	}
	return math.Erfc(math.Abs(z) / math.Sqrt2)
}

// pChiSq1 is the upper tail of a chi-square with one degree of freedom.
func pChiSq1(x float64) float64 {
	if !(x >= 0) {
		return math.NaN()
	}
	return math.Erfc(math.Sqrt(x / 2))
}

// EventsFromFloat converts a 0/1 event column to booleans; any other value
// (including NaN) is an error counting the offending units.
func EventsFromFloat(x []float64) ([]bool, error) {
	out := make([]bool, len(x))
	bad := 0
	for i, v := range x {
		switch v {
		case 1:
			out[i] = true
		case 0:
		default:
			bad++
		}
	}
	if bad > 0 {
		return nil, fmt.Errorf("survival: %d units have an event value other than 0 or 1", bad)
	}
	return out, nil
}

func checkLen(name string, n, m int) {
	if m != n {
		panic(fmt.Sprintf("survival: %s has length %d, time has %d", name, m, n))
	}
}

// validate checks the data of one outcome; lengths panic, values error.
func (d Data) validate() error {
	n := len(d.Time)
	checkLen("event", n, len(d.Event))
	checkLen("treated", n, len(d.Treated))
	if d.Weight != nil {
		checkLen("weight", n, len(d.Weight))
	}
	if d.Cluster != nil {
		checkLen("cluster", n, len(d.Cluster))
	}
	badT, badW := 0, 0
	var arms [2]int
	for i, t := range d.Time {
		if !(t > 0) || math.IsInf(t, 1) {
			badT += d.rows(i) // a group's units, so the count is of units
		}
		if d.Weight != nil && (!(d.Weight[i] >= 0) || math.IsInf(d.Weight[i], 1)) {
			badW += d.rows(i)
		}
		arms[b2i(d.Treated[i])] += d.rows(i)
	}
	if badT > 0 {
		return fmt.Errorf("survival: %d units have a follow-up time that is missing, not finite or not > 0", badT)
	}
	if badW > 0 {
		return fmt.Errorf("survival: %d units have a weight that is missing, negative or not finite", badW)
	}
	if arms[0] == 0 || arms[1] == 0 {
		return fmt.Errorf("survival: %d treated and %d control units; both arms need units", arms[1], arms[0])
	}
	return nil
}

// dropZeroWeights returns d without its weight-0 rows: a unit with weight
// 0 is outside the weighted comparison, so it neither counts at risk nor
// adds a tied event (R's coxph refuses such weights; survfit keeps their
// times as empty steps with the same estimates). It then checks that both
// arms still have units.
func (d Data) dropZeroWeights() (Data, error) {
	if d.Weight == nil || !slices.Contains(d.Weight, 0) {
		return d, nil
	}
	var out Data
	keepInts := d.Cluster != nil
	for i, w := range d.Weight {
		if w == 0 {
			continue
		}
		out.Time = append(out.Time, d.Time[i])
		out.Event = append(out.Event, d.Event[i])
		out.Treated = append(out.Treated, d.Treated[i])
		out.Weight = append(out.Weight, w)
		if keepInts {
			out.Cluster = append(out.Cluster, d.Cluster[i])
		}
		if d.count != nil {
			out.count = append(out.count, d.count[i])
			out.sqW = append(out.sqW, d.sqW[i])
		}
	}
	var arms [2]int
	for i, z := range out.Treated {
		arms[b2i(z)] += out.rows(i)
	}
	if arms[0] == 0 || arms[1] == 0 {
		return Data{}, fmt.Errorf("survival: %d treated and %d control units have positive weight; both arms need units", arms[1], arms[0])
	}
	return out, nil
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// rows is the number of units row i stands for.
func (d Data) rows(i int) int {
	if d.count == nil {
		return 1
	}
	return d.count[i]
}

// varWeight is the weight that multiplies row i's influence in a variance:
// its own weight, or √Σw² for a group (Σ_rows (w·IF)² = IF²·Σw²).
func (d Data) varWeight(i int) float64 {
	if d.sqW == nil {
		return d.weight(i)
	}
	return d.sqW[i]
}

func (d Data) weight(i int) float64 {
	if d.Weight == nil {
		return 1
	}
	return d.Weight[i]
}

// canonical returns the row indices in the package's canonical order: time
// ascending, events before censorings at the same time (a unit censored at t
// is at risk at t), then control before treated, then weight and cluster.
// Rows equal on every key are interchangeable, so every later sum is
// independent of the input order.
func (d Data) canonical() []int32 {
	// Sorting compact keys rather than indices into five columns keeps the
	// comparisons in cache; it is most of the cost at a million rows.
	type key struct {
		t, w  float64
		c     int
		flags uint8 // bit 1: censored (events first), bit 0: treated
		i     int32
	}
	keys := make([]key, len(d.Time))
	for i := range keys {
		k := key{t: d.Time[i], w: d.weight(i), i: int32(i)}
		if !d.Event[i] {
			k.flags |= 2
		}
		if d.Treated[i] {
			k.flags |= 1
		}
		if d.Cluster != nil {
			k.c = d.Cluster[i]
		}
		keys[i] = k
	}
	slices.SortFunc(keys, func(a, b key) int {
		switch {
		case a.t < b.t:
			return -1
		case a.t > b.t:
			return 1
		case a.flags != b.flags:
			return int(a.flags) - int(b.flags)
		case a.w < b.w:
			return -1
		case a.w > b.w:
			return 1
		}
		return cmp.Compare(a.c, b.c)
	})
	idx := make([]int32, len(keys))
	for i, k := range keys {
		idx[i] = k.i
	}
	return idx
}

// clusters maps rows to dense cluster numbers in ascending label order, so
// that sums over clusters run in a fixed order. Without labels every row
// is its own cluster, numbered by its canonical position.
func clusters(labels []int, order []int32) (of []int32, k int) {
	of = make([]int32, len(order))
	if labels == nil {
		for pos, i := range order {
			of[i] = int32(pos)
		}
		return of, len(order)
	}
	u := slices.Clone(labels)
	slices.Sort(u)
	u = slices.Compact(u)
	for i, l := range labels {
		j, _ := slices.BinarySearch(u, l)
		of[i] = int32(j)
	}
	return of, len(u)
}

// clusterVar returns Σ_c (Σ_{i∈c} u_i)², the infinitesimal-jackknife
// (sandwich) variance of an estimate whose weighted per-row influence is u,
// accumulating rows in canonical order and clusters in label order.
func clusterVar(u []float64, of []int32, k int, order []int32) float64 {
	acc := make([]float64, k)
	for _, i := range order {
		acc[of[i]] += u[i]
	}
	s := 0.0
	for _, a := range acc {
		s += a * a
	}
	return s
}
