package balance

import (
	"cmp"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sort"
	"sync"

	"counterpart/match/num"
)

// ScoreBins is the number of equal-width bins on [0, 1] of the score
// distributions: 40 bins of width 0.025 resolve the tails that overlap
// problems live in without making a run of a few hundred units look like
// noise.
const ScoreBins = 40

// DefaultWorst is how many covariates get eCDF curves when Diagnose is
// asked for a non-positive number of curves.
const DefaultWorst = 3

// minQuantileUnits is the fewest units each step of an eCDF grid must
// cover (besides 1% of the cohort), so a grid point is never a value that
// only a handful of people share the neighbourhood of.
const minQuantileUnits = 10

// Diagnostics are the aggregate pictures of a run that the HTML report
// draws: score distributions, eCDF curves of the worst covariates and
// eCDF distances. Like the rest of the Summary it holds no unit's row: the
// score distributions are binned densities, and the eCDF grids are
// quantiles of the pooled cohort at steps of 1% of its units (⌊n/100⌋ at
// least) and never fewer than ten units, the extremes withheld.
type Diagnostics struct {
	// ScoreBins counts the equal-width propensity-score bins on [0, 1].
	ScoreBins int `json:"score_bins"`
	// Scores has one entry per adjustment, plus "in support" (unweighted,
	// units inside the common-support rule) when the rule dropped units.
	Scores []ScoreDensity `json:"score_distributions"`
	// Curves are the eCDFs of the covariates with the largest unadjusted
	// |SMD| among the continuous ones.
	Curves []ECDFCurve `json:"ecdf_curves"`
	// Distances has one row per balance variable × adjustment.
	Distances []ECDFDistance `json:"ecdf_distances"`
}

// ScoreDensity is the weighted histogram of the propensity score of each
// arm under one adjustment, scaled to a density: bin b of an arm holds
//
//	d_b = Σ_{i in arm, ps_i in bin b} w_i / (Σ_{i in arm} w_i · 1/ScoreBins)
//
// so each arm's bars integrate to 1 and arms of different sizes compare
// directly. Bins are [b/B, (b+1)/B), the last one closed. An arm without
// positive weight has null densities.
type ScoreDensity struct {
	Adjustment string    `json:"adjustment"`
	Treated    []num.Num `json:"treated_density"`
	Control    []num.Num `json:"control_density"`
}

// ECDFCurve is one covariate's weighted empirical CDF in each arm, under
// each adjustment, evaluated on a fixed grid: the quantiles Q(k/G),
// k = 1..G−1, of the pooled unadjusted cohort with G = min(100, ⌊n/10⌋)
// and Q(p) the smallest value x with F(x) ≥ p (Hyndman & Fan 1996, type
// 1), duplicates removed. Between consecutive grid points, below the first
// and above the last there are therefore at least ⌊n/100⌋ and at least ten
// units: no point singles out a few people, and the minimum and maximum
// are never shown.
type ECDFCurve struct {
	Covariate     string      `json:"covariate"`
	UnadjustedSMD num.Num     `json:"unadjusted_smd"`
	Grid          []num.Num   `json:"grid"`
	Adjustments   []ECDFPanel `json:"adjustments"`
}

// ECDFPanel is the pair of eCDFs F(g) = Σ_{x_i ≤ g} w_i / Σ w_i of the
// arms at the grid points of its curve.
type ECDFPanel struct {
	Adjustment string    `json:"adjustment"`
	Treated    []num.Num `json:"treated"`
	Control    []num.Num `json:"control"`
}

// ECDFDistance compares the arms' weighted eCDFs of one variable under one
// adjustment, over the m distinct values u_1 < … < u_m the variable takes
// in the whole cohort (the same points for every adjustment, so before and
// after compare):
//
//	max  = max_j |F_T(u_j) − F_C(u_j)|        (the Kolmogorov–Smirnov distance)
//	mean = (1/m) Σ_j |F_T(u_j) − F_C(u_j)|
//
// Both are 0 for identical distributions and at most 1. For a 0/1
// variable max = |p_T − p_C| and mean = max/2.
type ECDFDistance struct {
	Covariate  string  `json:"covariate"`
	Level      string  `json:"level,omitempty"`
	Adjustment string  `json:"adjustment"`
	Max        num.Num `json:"max_ecdf_diff"`
	Mean       num.Num `json:"mean_ecdf_diff"`
}

// NamedWeights is one adjustment's per-unit weights for Diagnose; a nil W
// is the unadjusted cohort (every unit weight 1).
type NamedWeights struct {
	Name string
	W    []float64
}

// Diagnose computes the report's aggregate diagnostics. ps are the
// propensity scores, z marks the treated, inSupport the units inside the
// common-support rule (nil: all), vars the balance variables and
// adjustments the weights to compare (typically unadjusted first). A
// non-nil W is taken as zero outside support, as the run's weights already
// are. worst ≤ 0 means DefaultWorst.
//
// It is exported so that a report of a stored run can be rebuilt from the
// run's published scores, weights and cohort snapshot.
//
// Cost: one pass over the units per adjustment for the scores, and per
// variable one sort of its values plus one pass per adjustment; variables
// run in parallel. A length mismatch or a negative or non-finite weight is
// a programmer error and panics (weights are validated upstream).
func Diagnose(ps []float64, z []bool, inSupport []bool, vars []Variable, adjustments []NamedWeights, worst int) Diagnostics {
	n := len(z)
	if len(ps) != n || (inSupport != nil && len(inSupport) != n) {
		panic(fmt.Sprintf("balance: Diagnose: len(ps) = %d, len(inSupport) = %d, len(z) = %d", len(ps), len(inSupport), n))
	}
	for _, a := range adjustments {
		if a.W == nil {
			continue
		}
		if len(a.W) != n {
			panic(fmt.Sprintf("balance: Diagnose: %s has %d weights, z has %d", a.Name, len(a.W), n))
		}
		for i, w := range a.W {
			if !(w >= 0) || math.IsInf(w, 1) {
				panic(fmt.Sprintf("balance: Diagnose: %s weight %d is %v", a.Name, i, w))
			}
		}
	}
	for _, v := range vars {
		if len(v.Values) != n {
			panic(fmt.Sprintf("balance: Diagnose: %s has %d values, z has %d", v.Label(), len(v.Values), n))
		}
	}
	if worst <= 0 {
		worst = DefaultWorst
	}
	// Each adjustment's weights with support applied, shared by every
	// pass below; a copy only when the run's weights were not already
	// zero outside support.
	eff := make([][]float64, len(adjustments))
	for a, adj := range adjustments {
		eff[a] = adj.W
		if adj.W == nil || inSupport == nil {
			continue
		}
		for i, w := range adj.W {
			if w != 0 && !inSupport[i] {
				eff[a] = slices.Clone(adj.W)
				for j, in := range inSupport {
					if !in {
						eff[a][j] = 0
					}
				}
				break
			}
		}
	}

	d := Diagnostics{ScoreBins: ScoreBins}
	var supportOnly []float64
	if slices.Contains(inSupport, false) {
		supportOnly = make([]float64, n)
		for i, in := range inSupport {
			if in {
				supportOnly[i] = 1
			}
		}
	}
	for a, adj := range adjustments {
		d.Scores = append(d.Scores, scoreDensity(adj.Name, ps, z, eff[a]))
		if a == 0 && supportOnly != nil {
			d.Scores = append(d.Scores, scoreDensity("in support", ps, z, supportOnly))
		}
	}

	// The curves go to the continuous covariates that start worst.
	var cont []int
	var contVars []Variable
	for k, v := range vars {
		if !v.Binary {
			cont = append(cont, k)
			contVars = append(contVars, v)
		}
	}
	smd := map[int]float64{}
	for j, st := range Prepare(contVars, z, false).Compute(nil) {
		smd[cont[j]] = st.SMD
	}
	slices.SortStableFunc(cont, func(a, b int) int {
		return cmp.Compare(absOrNeg(smd[b]), absOrNeg(smd[a]))
	})
	cont = cont[:min(worst, len(cont))]
	curveOf := map[int]int{}
	for j, k := range cont {
		curveOf[k] = j
	}

	d.Distances = make([]ECDFDistance, len(vars)*len(adjustments))
	d.Curves = make([]ECDFCurve, len(cont))
	parallelFor(len(vars), func(k int) {
		v := vars[k]
		distinct, key := rankKeys(v, z)
		j, curve := curveOf[k]
		var gridRank []int
		if curve {
			c := ECDFCurve{Covariate: v.Label(), UnadjustedSMD: num.Num(smd[k])}
			sorted := slices.Clone(v.Values)
			slices.Sort(sorted)
			for _, g := range quantileGrid(sorted) {
				c.Grid = append(c.Grid, num.Num(g))
				gridRank = append(gridRank, sort.SearchFloat64s(distinct, g))
			}
			d.Curves[j] = c
		}
		m := len(distinct)
		// acc[2r] and acc[2r+1] are the treated and control weight at
		// distinct value r, then the eCDFs there.
		acc := make([]float64, 2*m)
		for a, adj := range adjustments {
			clear(acc)
			if w := eff[a]; w == nil {
				for _, kk := range key {
					acc[kk]++
				}
			} else {
				for i, kk := range key {
					acc[kk] += w[i]
				}
			}
			var st, sc float64
			for r := 0; r < m; r++ {
				st += acc[2*r]
				sc += acc[2*r+1]
			}
			dist := ECDFDistance{Covariate: v.Name, Level: v.Level, Adjustment: adj.Name, Max: num.Num(math.NaN()), Mean: num.Num(math.NaN())}
			ok := st > 0 && sc > 0
			if ok {
				var ct, cc, mx, sum float64
				for r := 0; r < m; r++ {
					ct += acc[2*r]
					cc += acc[2*r+1]
					acc[2*r], acc[2*r+1] = ct/st, cc/sc
					diff := math.Abs(acc[2*r] - acc[2*r+1])
					mx = math.Max(mx, diff)
					sum += diff
				}
				dist.Max, dist.Mean = num.Num(mx), num.Num(sum/float64(m))
			}
			d.Distances[k*len(adjustments)+a] = dist
			if curve {
				p := ECDFPanel{Adjustment: adj.Name}
				for _, r := range gridRank {
					ft, fc := math.NaN(), math.NaN()
					if ok {
						ft, fc = acc[2*r], acc[2*r+1]
					}
					p.Treated = append(p.Treated, num.Num(ft))
					p.Control = append(p.Control, num.Num(fc))
				}
				d.Curves[j].Adjustments = append(d.Curves[j].Adjustments, p)
			}
		}
	})
	return d
}

// rankKeys returns the variable's distinct values, ascending, and for each
// unit 2·r + a with r the rank of its value among them and a = 1 for the
// comparison arm: one index that bins both arms without a branch.
func rankKeys(v Variable, z []bool) (distinct []float64, key []int32) {
	key = make([]int32, len(z))
	arm := func(i int) int32 {
		if z[i] {
			return 0
		}
		return 1
	}
	// Counts, ages and 0/1 indicators are whole numbers in a short range:
	// rank them through a table instead of sorting.
	lo, hi := math.Inf(1), math.Inf(-1)
	whole := true
	for _, x := range v.Values {
		if x != math.Trunc(x) {
			whole = false
			break
		}
		lo, hi = math.Min(lo, x), math.Max(hi, x)
	}
	if whole && len(v.Values) > 0 && hi-lo < 1<<16 {
		rankOf := make([]int32, int(hi-lo)+1)
		for _, x := range v.Values {
			rankOf[int(x-lo)] = 1
		}
		for off, seen := range rankOf {
			if seen == 1 {
				rankOf[off] = int32(len(distinct))
				distinct = append(distinct, lo+float64(off))
			}
		}
		for i, x := range v.Values {
			key[i] = 2*rankOf[int(x-lo)] + arm(i)
		}
		return distinct, key
	}
	distinct = slices.Clone(v.Values)
	slices.Sort(distinct)
	distinct = slices.Compact(distinct)
	for i, x := range v.Values {
		key[i] = 2*int32(sort.SearchFloat64s(distinct, x)) + arm(i)
	}
	return distinct, key
}

// scoreDensity bins ps by arm under the weights w (nil: all ones).
func scoreDensity(name string, ps []float64, z []bool, w []float64) ScoreDensity {
	var bins [2][ScoreBins]float64
	var tot [2]float64
	for i, p := range ps {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		if wi == 0 || math.IsNaN(p) {
			continue
		}
		b := min(max(int(p*ScoreBins), 0), ScoreBins-1)
		a := 1
		if z[i] {
			a = 0
		}
		bins[a][b] += wi
		tot[a] += wi
	}
	dens := func(a int) []num.Num {
		out := make([]num.Num, ScoreBins)
		for b := range out {
			out[b] = num.Num(bins[a][b] / tot[a] * ScoreBins) // NaN when tot is 0
		}
		return out
	}
	return ScoreDensity{Adjustment: name, Treated: dens(0), Control: dens(1)}
}

// quantileGrid returns the distinct type-1 quantiles Q(k/G), k = 1..G−1,
// G = min(100, ⌊n/10⌋), of the sorted values (none when G < 2). Index
// arithmetic is in integers: Q(k/G) = sorted[⌈k·n/G⌉ − 1].
func quantileGrid(sorted []float64) []float64 {
	n := len(sorted)
	g := min(100, n/minQuantileUnits)
	var out []float64
	for k := 1; k < g; k++ {
		x := sorted[(k*n+g-1)/g-1]
		if len(out) == 0 || x != out[len(out)-1] {
			out = append(out, x)
		}
	}
	return out
}

// absOrNeg orders SMDs by size with NaN last.
func absOrNeg(x float64) float64 {
	if math.IsNaN(x) {
		return -1
	}
	return math.Abs(x)
}

// parallelFor runs f(0..n−1) on up to GOMAXPROCS goroutines.
func parallelFor(n int, f func(int)) {
	workers := min(runtime.GOMAXPROCS(0), n)
	var wg sync.WaitGroup
	next := make(chan int)
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for k := range next {
				f(k)
			}
		}()
	}
	for k := range n {
		next <- k
	}
	close(next)
	wg.Wait()
}
