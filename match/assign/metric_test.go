package assign

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func TestParseMetric(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want MetricKind
		ok   bool
	}{
		{"logit", Logit, true},
		{"mahalanobis", Mahalanobis, true},
		{"rank_mahalanobis", RankMahalanobis, true},
		{"Mahalanobis", 0, false},
		{"", 0, false},
	} {
		got, err := ParseMetric(tc.in)
		if (err == nil) != tc.ok || (tc.ok && got != tc.want) {
			t.Errorf("ParseMetric(%q) = %v, %v; want %v ok=%v", tc.in, got, err, tc.want, tc.ok)
		}
		if tc.ok && got.String() != tc.in {
			t.Errorf("%v.String() = %q, want %q", got, got.String(), tc.in)
		}
	}
}

// TestAverageRanks: hand-worked mid-ranks (ties share the mean of the
// ranks they span, as R's rank() default; common practice).
func TestAverageRanks(t *testing.T) {
	for _, tc := range []struct{ in, want []float64 }{
		{[]float64{3, 1, 3, 2}, []float64{3.5, 1, 3.5, 2}},
		{[]float64{5, 5, 5}, []float64{2, 2, 2}},
		{[]float64{0, 1, 0, 0, 1}, []float64{2, 4.5, 2, 2, 4.5}},
		{[]float64{-1, 7}, []float64{1, 2}},
	} {
		if got := averageRanks(tc.in); !slices.Equal(got, tc.want) {
			t.Errorf("averageRanks(%v) = %v, want %v", tc.in, got, tc.want)
		}
	}
}

// TestRankMahalanobisHandWorked: one covariate x = (10, 20, 20, 40) has
// mid-ranks (1, 2.5, 2.5, 4), rank variance 1.5, and the untied variance
// n(n+1)/12 = 5/3 replaces it (Rosenbaum 2010, §8.3), so the distance is
// |rank_i - rank_j| / sqrt(5/3). Worked by hand.
func TestRankMahalanobisHandWorked(t *testing.T) {
	x := [][]float64{{10, 20, 20, 40}}
	z := []bool{true, false, true, false}
	m := Metric{Kind: RankMahalanobis, X: x}
	got, err := m.Distances(make([]float64, 4), z, nil, [][2]int{{0, 3}, {0, 1}, {2, 1}, {2, 3}})
	if err != nil {
		t.Fatal(err)
	}
	sd := math.Sqrt(5.0 / 3)
	want := []float64{3 / sd, 1.5 / sd, 0, 1.5 / sd}
	for i := range want {
		if math.Abs(got[i]-want[i]) > 1e-12 {
			t.Errorf("pair %d: got %v, want %v", i, got[i], want[i])
		}
	}
}

type metricReference struct {
	X       [][]float64      `json:"x"`
	Treated []int            `json:"treated"`
	Masks   map[string][]int `json:"masks"`
	Cases   []metricRefCase  `json:"cases"`
}

type metricRefCase struct {
	Kind      string    `json:"kind"`
	Mask      string    `json:"mask"`
	Pairs     [][2]int  `json:"pairs"`
	Distances []float64 `json:"distances"`
}

// TestMetricAgainstScipy compares Metric.Distances with
// scipy.spatial.distance.mahalanobis on the committed data set, with the
// covariance built independently in numpy (testdata/assign/
// make_metric_reference.py): pooled within-arm for Mahalanobis, Rosenbaum's
// rescaled rank covariance and a pseudo-inverse for RankMahalanobis; each on
// all units and on a subset (the covariance then uses the subset only).
func TestMetricAgainstScipy(t *testing.T) {
	b, err := os.ReadFile("../../testdata/assign/metric_reference.json")
	if err != nil {
		t.Fatal(err)
	}
	var ref metricReference
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	n, p := len(ref.X), len(ref.X[0])
	cols := make([][]float64, p)
	for j := range cols {
		cols[j] = make([]float64, n)
		for i := range ref.X {
			cols[j][i] = ref.X[i][j]
		}
	}
	z := make([]bool, n)
	for i, v := range ref.Treated {
		z[i] = v == 1
	}
	if len(ref.Cases) != 4 {
		t.Fatalf("reference has %d cases, want 4", len(ref.Cases))
	}
	for _, tc := range ref.Cases {
		t.Run(tc.Kind+"/"+tc.Mask, func(t *testing.T) {
			kind, err := ParseMetric(tc.Kind)
			if err != nil {
				t.Fatal(err)
			}
			el := make([]bool, n)
			for i, v := range ref.Masks[tc.Mask] {
				el[i] = v == 1
			}
			got, err := Metric{Kind: kind, X: cols}.Distances(make([]float64, n), z, el, tc.Pairs)
			if err != nil {
				t.Fatal(err)
			}
			for r, want := range tc.Distances {
				if math.Abs(got[r]-want) > 1e-9*(1+want) {
					t.Errorf("pair %v: got %.12g, scipy %.12g", tc.Pairs[r], got[r], want)
				}
			}
		})
	}
}

// metricInstance is a small random problem with continuous covariates (so
// metric ties have probability zero and index tie-breaks cannot depend on
// rounding) and integer scores (so caliper boundaries and score ties occur).
type metricInstance struct {
	score    []float64
	treated  []bool
	stratum  []int32
	eligible []bool
	x        [][]float64
}

func newMetricInstance(r *rand.Rand, nt, nc, p int, strata bool) metricInstance {
	n := nt + nc
	in := metricInstance{score: make([]float64, n), treated: make([]bool, n), eligible: make([]bool, n), x: make([][]float64, p)}
	for j := range in.x {
		in.x[j] = make([]float64, n)
	}
	if strata {
		in.stratum = make([]int32, n)
	}
	for i := 0; i < n; i++ {
		in.treated[i] = i < nt
		in.score[i] = float64(r.IntN(8))
		in.eligible[i] = r.IntN(10) > 0
		if strata {
			in.stratum[i] = int32(r.IntN(2))
		}
		for j := range in.x {
			in.x[j][i] = r.NormFloat64() + float64(j)*in.score[i]/4
		}
	}
	r.Shuffle(n, func(a, b int) {
		in.score[a], in.score[b] = in.score[b], in.score[a]
		in.treated[a], in.treated[b] = in.treated[b], in.treated[a]
		in.eligible[a], in.eligible[b] = in.eligible[b], in.eligible[a]
		for j := range in.x {
			in.x[j][a], in.x[j][b] = in.x[j][b], in.x[j][a]
		}
	})
	return in
}

// naiveDistance computes the metric straight from its definition: the
// covariance by explicit sums, its inverse by gonum's mat.Inverse, and
// the quadratic form (x_t - x_c)' S⁻¹ (x_t - x_c) per pair; ranks by
// counting. It shares no code with the whitening in metric.go.
//
// ok is false when S is numerically singular (tiny strata leave too few
// degrees of freedom); the caller then draws another instance.
func naiveDistance(in metricInstance, kind MetricKind) (dist func(i, j int) float64, ok bool) {
	var units []int
	for i := range in.score {
		if in.eligible[i] {
			units = append(units, i)
		}
	}
	p, n := len(in.x), len(units)
	col := func(j, i int) float64 {
		if kind == Mahalanobis {
			return in.x[j][i]
		}
		less, eq := 0, 0
		for _, u := range units {
			if in.x[j][u] < in.x[j][i] {
				less++
			} else if in.x[j][u] == in.x[j][i] {
				eq++
			}
		}
		return float64(less) + float64(eq+1)/2
	}
	s := mat.NewDense(p, p, nil)
	for a := 0; a < p; a++ {
		for b := 0; b < p; b++ {
			v := 0.0
			if kind == Mahalanobis {
				for _, arm := range []bool{false, true} {
					ma, mb, m := 0.0, 0.0, 0.0
					for _, u := range units {
						if in.treated[u] == arm {
							ma, mb, m = ma+col(a, u), mb+col(b, u), m+1
						}
					}
					for _, u := range units {
						if in.treated[u] == arm {
							v += (col(a, u) - ma/m) * (col(b, u) - mb/m)
						}
					}
				}
				v /= float64(n - 2)
			} else {
				mu := float64(n+1) / 2
				for _, u := range units {
					v += (col(a, u) - mu) * (col(b, u) - mu)
				}
				v /= float64(n - 1)
			}
			s.Set(a, b, v)
		}
	}
	if kind == RankMahalanobis {
		untied := float64(n*(n+1)) / 12
		d := make([]float64, p)
		for a := range d {
			d[a] = math.Sqrt(untied / s.At(a, a))
		}
		for a := 0; a < p; a++ {
			for b := 0; b < p; b++ {
				s.Set(a, b, s.At(a, b)*d[a]*d[b])
			}
		}
	}
	for _, v := range s.RawMatrix().Data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, false
		}
	}
	var inv mat.Dense
	if err := inv.Inverse(s); err != nil || mat.Cond(s, 2) > 1e8 {
		return nil, false
	}
	return func(i, j int) float64 {
		q := 0.0
		for a := 0; a < p; a++ {
			for b := 0; b < p; b++ {
				q += (col(a, i) - col(a, j)) * inv.At(a, b) * (col(b, i) - col(b, j))
			}
		}
		return math.Sqrt(q)
	}, true
}

// drawMetricInstance draws instances until the naive covariance is
// invertible.
func drawMetricInstance(t *testing.T, r *rand.Rand, nt, nc, p int, strata bool, kind MetricKind) (metricInstance, func(i, j int) float64) {
	t.Helper()
	for range 100 {
		in := newMetricInstance(r, nt, nc, p, strata)
		if dist, ok := naiveDistance(in, kind); ok {
			return in, dist
		}
	}
	t.Fatalf("no instance with an invertible covariance (nt=%d, nc=%d, p=%d)", nt, nc, p)
	return metricInstance{}, nil
}

// naiveMetricGreedy is the reference greedy: treated units in high-score-
// first order (ties by index), each scanning every control for the
// nearest unused eligible one in its stratum inside the caliper, k times.
// Distances within 1e-9 (relative) of the minimum count as ties, going to
// the lower index: the naive quadratic form and the package's whitening
// round differently, and exact ties (equal rank differences) are common.
func naiveMetricGreedy(in metricInstance, dist func(i, j int) float64, k int, cal float64, reuse bool) []Set {
	var ts []int
	for i, z := range in.treated {
		if z && in.eligible[i] {
			ts = append(ts, i)
		}
	}
	slices.SortStableFunc(ts, func(a, b int) int {
		if in.score[a] != in.score[b] {
			if in.score[a] > in.score[b] {
				return -1
			}
			return 1
		}
		return a - b
	})
	used := make([]bool, len(in.score))
	var sets []Set
	for _, t := range ts {
		set := Set{Treated: t}
		for len(set.Controls) < k {
			best, bd := -1, math.Inf(1)
			for c := range in.score {
				if in.treated[c] || !in.eligible[c] || (!reuse && used[c]) || slices.Contains(set.Controls, c) ||
					stratumOf(in.stratum, c) != stratumOf(in.stratum, t) || math.Abs(in.score[t]-in.score[c]) > cal {
					continue
				}
				if d := dist(t, c); best < 0 || d < bd-1e-9*(1+bd) {
					best, bd = c, d
				}
			}
			if best < 0 {
				break
			}
			used[best] = true
			set.Controls = append(set.Controls, best)
			set.Distances = append(set.Distances, bd)
		}
		if len(set.Controls) > 0 {
			set.ID = len(sets) + 1
			sets = append(sets, set)
		}
	}
	return sets
}

// checkMetricSets checks the invariants every metric matching must keep:
// caliper on the score, equal strata, eligible units of the right arms,
// no control twice (without reuse), no treated unit twice, at most k
// controls, distances equal to the naive metric and nearest first.
func checkMetricSets(t *testing.T, in metricInstance, sets []Set, dist func(i, j int) float64, k int, cal float64, reuse bool) {
	t.Helper()
	seenT, seenC := map[int]bool{}, map[int]bool{}
	for _, s := range sets {
		if seenT[s.Treated] || !in.treated[s.Treated] || !in.eligible[s.Treated] {
			t.Fatalf("set %+v: treated unit repeated, not treated or ineligible", s)
		}
		seenT[s.Treated] = true
		if len(s.Controls) < 1 || len(s.Controls) > k || len(s.Distances) != len(s.Controls) {
			t.Fatalf("set %+v: %d controls, k = %d", s, len(s.Controls), k)
		}
		for j, c := range s.Controls {
			if in.treated[c] || !in.eligible[c] || (!reuse && seenC[c]) {
				t.Fatalf("set %+v: control %d treated, ineligible or reused", s, c)
			}
			seenC[c] = true
			if math.Abs(in.score[s.Treated]-in.score[c]) > cal {
				t.Fatalf("set %+v: control %d outside the caliper", s, c)
			}
			if stratumOf(in.stratum, c) != stratumOf(in.stratum, s.Treated) {
				t.Fatalf("set %+v: control %d in another stratum", s, c)
			}
			if d := dist(s.Treated, c); math.Abs(d-s.Distances[j]) > 1e-9*(1+d) {
				t.Fatalf("set %+v: distance to %d is %v, naive %v", s, c, s.Distances[j], d)
			}
			if j > 0 && s.Distances[j] < s.Distances[j-1] {
				t.Fatalf("set %+v: controls not nearest first", s)
			}
		}
	}
}

func sameSets(a, b []Set) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].Treated != b[i].Treated || !slices.Equal(a[i].Controls, b[i].Controls) {
			return false
		}
	}
	return true
}

// TestGreedyMetricAgainstNaive: Greedy with both Mahalanobis metrics equals
// the brute-force reference on random instances (with strata, ineligible
// units, k = 1..3, with and without reuse).
func TestGreedyMetricAgainstNaive(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 11))
	for trial := 0; trial < 120; trial++ {
		kind := []MetricKind{Mahalanobis, RankMahalanobis}[trial%2]
		k := 1 + trial%3
		reuse := trial%5 == 0
		in, dist := drawMetricInstance(t, r, 4+r.IntN(8), 6+r.IntN(14), 1+r.IntN(3), trial%4 == 1, kind)
		cal := float64(1 + r.IntN(3))
		opt := Options{Controls: k, Caliper: cal, Reuse: reuse, Metric: Metric{Kind: kind, X: in.x}}
		got, err := Greedy(in.score, in.treated, in.stratum, in.eligible, opt)
		if err != nil {
			t.Fatal(err)
		}
		checkMetricSets(t, in, got, dist, k, cal, reuse)
		want := naiveMetricGreedy(in, dist, k, cal, reuse)
		if !sameSets(got, want) {
			t.Fatalf("trial %d (%v, k=%d, reuse=%v):\n got  %+v\n want %+v", trial, kind, k, reuse, got, want)
		}
	}
}

// bruteMetricOptimal enumerates all matchings of one stratum (each control
// at most once, at most k per treated, pairs inside cal) and returns the
// best (unmatched, unfilled, total distance), Optimal's objective.
func bruteMetricOptimal(ts, cs []int, score []float64, dist func(i, j int) float64, k int, cal float64) lex {
	used := make([]bool, len(cs))
	best := lex{unmatched: math.MaxInt}
	var rec func(i int, cur lex)
	rec = func(i int, cur lex) {
		if i == len(ts) {
			if cur.better(best) {
				best = cur
			}
			return
		}
		var pick func(from, got int, cur lex)
		pick = func(from, got int, cur lex) {
			done := cur
			done.unfilled += k - got
			if got == 0 {
				done.unmatched++
			}
			rec(i+1, done)
			if got == k {
				return
			}
			for j := from; j < len(cs); j++ {
				if used[j] || math.Abs(score[ts[i]]-score[cs[j]]) > cal {
					continue
				}
				used[j] = true
				pick(j+1, got+1, lex{cur.unmatched, cur.unfilled, cur.cost + dist(ts[i], cs[j])})
				used[j] = false
			}
		}
		pick(0, 0, cur)
	}
	rec(0, lex{})
	return best
}

// TestOptimalMetricBruteForce: Optimal with a Mahalanobis metric reaches
// the enumerated optimum on instances of up to 7 treated x 7 controls per
// stratum, k = 1 and 2, and certifies it.
func TestOptimalMetricBruteForce(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 5))
	for trial := 0; trial < 80; trial++ {
		kind := []MetricKind{Mahalanobis, RankMahalanobis}[trial%2]
		k := 1 + trial%2
		nt, nc := 2+r.IntN(6), 2+r.IntN(6)
		if k == 2 {
			nt, nc = 2+r.IntN(3), 2+r.IntN(5)
		}
		p := 1 + r.IntN(3)
		if nt+nc < p+6 {
			p = 1
		}
		in, dist := drawMetricInstance(t, r, nt, nc, p, trial%3 == 0, kind)
		cal := float64(1 + r.IntN(3))
		opt := Options{Controls: k, Caliper: cal, Metric: Metric{Kind: kind, X: in.x}}
		sets, cert, err := Optimal(in.score, in.treated, in.stratum, in.eligible, opt)
		if err != nil {
			t.Fatal(err)
		}
		if !cert.Certified || cert.Rounds != 1 {
			t.Fatalf("trial %d: certificate %+v", trial, cert)
		}
		checkMetricSets(t, in, sets, dist, k, cal, false)
		var got, want lex
		per := map[int]int{}
		for _, s := range sets {
			per[s.Treated] = len(s.Controls)
			for _, d := range s.Distances {
				got.cost += d
			}
		}
		for _, g := range byStratum(in.treated, in.stratum, in.eligible) {
			for _, tu := range g[0] {
				if per[tu] == 0 {
					got.unmatched++
				}
				got.unfilled += k - per[tu]
			}
			b := bruteMetricOptimal(g[0], g[1], in.score, dist, k, cal)
			want = lex{want.unmatched + b.unmatched, want.unfilled + b.unfilled, want.cost + b.cost}
		}
		if !got.equal(want) {
			t.Fatalf("trial %d (%v, k=%d): got %+v, brute force %+v", trial, kind, k, got, want)
		}
		if math.Abs(cert.Objective-got.cost) > 1e-9*(1+got.cost) {
			t.Fatalf("trial %d: certificate objective %v, sets total %v", trial, cert.Objective, got.cost)
		}
	}
}

// TestLogitMetricUnchanged: an explicit zero Metric gives exactly the
// default behaviour (the same call; guards the dispatch).
func TestLogitMetricUnchanged(t *testing.T) {
	r := rand.New(rand.NewPCG(9, 9))
	in := newMetricInstance(r, 30, 60, 1, true)
	for _, opt := range []Options{{Controls: 2, Caliper: 2}, {Controls: 1}} {
		a, err := Greedy(in.score, in.treated, in.stratum, in.eligible, opt)
		if err != nil {
			t.Fatal(err)
		}
		opt.Metric = Metric{Kind: Logit}
		b, err := Greedy(in.score, in.treated, in.stratum, in.eligible, opt)
		if err != nil || !sameSets(a, b) {
			t.Fatalf("greedy changed with an explicit logit metric: %v", err)
		}
		for i, s := range b {
			for j, c := range s.Controls {
				if s.Distances[j] != math.Abs(in.score[s.Treated]-in.score[c]) {
					t.Fatalf("set %d: logit distance %v", i, s.Distances[j])
				}
			}
		}
	}
}

func TestMetricErrors(t *testing.T) {
	score := []float64{0, 1, 2, 3}
	z := []bool{true, false, true, false}
	x := [][]float64{{1, 2, 4, 3}}
	for _, tc := range []struct {
		name string
		opt  Options
		want error
	}{
		{"no caliper", Options{Controls: 1, Metric: Metric{Kind: Mahalanobis, X: x}}, ErrOption},
		{"no covariates", Options{Controls: 1, Caliper: 1, Metric: Metric{Kind: RankMahalanobis}}, ErrOption},
		{"X with logit", Options{Controls: 1, Caliper: 1, Metric: Metric{X: x}}, ErrOption},
		{"unknown kind", Options{Controls: 1, Caliper: 1, Metric: Metric{Kind: 7, X: x}}, ErrOption},
		{"NaN covariate", Options{Controls: 1, Caliper: 1, Metric: Metric{Kind: Mahalanobis, X: [][]float64{{1, math.NaN(), 2, 3}}}}, ErrCovariate},
		{"constant covariate", Options{Controls: 1, Caliper: 1, Metric: Metric{Kind: Mahalanobis, X: [][]float64{{5, 5, 5, 5}}}}, ErrCovariate},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Greedy(score, z, nil, nil, tc.opt); !errors.Is(err, tc.want) {
				t.Errorf("Greedy: got %v, want %v", err, tc.want)
			}
			if _, _, err := Optimal(score, z, nil, nil, tc.opt); !errors.Is(err, tc.want) {
				t.Errorf("Optimal: got %v, want %v", err, tc.want)
			}
		})
	}
	// Too many within-caliper pairs: 2 treated x 2 controls = 4 > 3.
	opt := Options{Controls: 1, Caliper: 10, Metric: Metric{Kind: Mahalanobis, X: x, MaxPairs: 3}}
	if _, _, err := Optimal(score, z, nil, nil, opt); !errors.Is(err, ErrOption) {
		t.Errorf("pair limit: got %v, want ErrOption", err)
	}
	opt.Metric.MaxPairs = 4
	if _, _, err := Optimal(score, z, nil, nil, opt); err != nil {
		t.Errorf("at the pair limit: %v", err)
	}
}

// TestMetricDistancesPanicsOnLength: a covariate column of the wrong
// length is a programmer error.
func TestMetricDistancesPanicsOnLength(t *testing.T) {
	defer func() {
		if recover() == nil {
			t.Error("no panic")
		}
	}()
	m := Metric{Kind: Mahalanobis, X: [][]float64{{1, 2, 3}}}
	_, _ = m.Distances(make([]float64, 4), make([]bool, 4), nil, nil)
}

// BenchmarkMetric: 1:1 Mahalanobis matching on 3 covariates, treated ~
// N(0.5, 1) vs controls ~ N(-0.5, 1) on the logit (as BenchmarkOptimal),
// covariates correlated with the score; caliper in pooled SDs of the logit.
func BenchmarkMetric(b *testing.B) {
	for _, tc := range []struct {
		nt, nc  int
		calSD   float64
		optimal bool
	}{
		{5_000, 50_000, 0.2, false},
		{5_000, 50_000, 0.05, false},
		{5_000, 50_000, 0.05, true},
		{5_000, 50_000, 0.2, true},
		{1_000, 10_000, 0.2, true},
	} {
		score, treated, cal02 := logitScores(tc.nt, tc.nc, 4)
		cal := cal02 / 0.2 * tc.calSD
		r := rand.New(rand.NewPCG(4, 4))
		x := make([][]float64, 3)
		for j := range x {
			x[j] = make([]float64, len(score))
			for i, s := range score {
				x[j][i] = s*float64(j)/2 + r.NormFloat64()
			}
		}
		opt := Options{Controls: 1, Caliper: cal, Metric: Metric{Kind: Mahalanobis, X: x}}
		name := fmt.Sprintf("greedy/nt=%d,nc=%d,cal=%.2fSD", tc.nt, tc.nc, tc.calSD)
		if tc.optimal {
			name = "optimal" + name[len("greedy"):]
		}
		b.Run(name, func(b *testing.B) {
			for b.Loop() {
				a := allocated()
				if tc.optimal {
					_, cert, err := Optimal(score, treated, nil, nil, opt)
					if err != nil {
						b.Fatal(err)
					}
					b.ReportMetric(float64(cert.Edges), "pairs")
					if !cert.Certified {
						b.Fatal("not certified")
					}
				} else if _, err := Greedy(score, treated, nil, nil, opt); err != nil {
					b.Fatal(err)
				}
				b.ReportMetric(float64(allocated()-a)/(1<<20), "MB-alloc")
			}
		})
	}
}
