package survival

import (
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"
)

// permute returns d with its rows in the order p.
func permute(d Data, p []int) Data {
	out := Data{Time: make([]float64, len(p)), Event: make([]bool, len(p)), Treated: make([]bool, len(p))}
	if d.Weight != nil {
		out.Weight = make([]float64, len(p))
	}
	if d.Cluster != nil {
		out.Cluster = make([]int, len(p))
	}
	for i, j := range p {
		out.Time[i], out.Event[i], out.Treated[i] = d.Time[j], d.Event[j], d.Treated[j]
		if d.Weight != nil {
			out.Weight[i] = d.Weight[j]
		}
		if d.Cluster != nil {
			out.Cluster[i] = d.Cluster[j]
		}
	}
	return out
}

// Results must be a function of the multiset of rows (DESIGN.md: results
// never depend on the order an engine returns rows): shuffled inputs give
// bit-identical KM, Cox and rate results. Property of the canonical order
// (common practice).
func TestShuffleInvariance(t *testing.T) {
	rng := rand.New(rand.NewPCG(14, 1))
	for _, ds := range survSets {
		d := loadSurv(t, ds.name)
		km0, err := KaplanMeier(d, ds.horizons)
		if err != nil {
			t.Fatal(err)
		}
		cox0, err := Cox(d, Efron)
		if err != nil {
			t.Fatal(err)
		}
		for rep := 0; rep < 5; rep++ {
			p := rng.Perm(len(d.Time))
			dp := permute(d, p)
			km1, _ := KaplanMeier(dp, ds.horizons)
			cox1, _ := Cox(dp, Efron)
			if !reflect.DeepEqual(km0, km1) {
				t.Errorf("%s: Kaplan–Meier changed when rows were shuffled", ds.name)
			}
			if !reflect.DeepEqual(cox0, cox1) {
				t.Errorf("%s: Cox fit changed when rows were shuffled: %+v vs %+v", ds.name, cox0, cox1)
			}
		}
	}
	c := readCSV(t, "rates_cgd.csv")
	cl := floats(t, c["cl"])
	d := RateData{Count: floats(t, c["count"]), Exposure: floats(t, c["exposure"]),
		Weight: floats(t, c["w"]), Treated: make([]bool, len(cl)), Cluster: make([]int, len(cl))}
	for i, z := range floats(t, c["z"]) {
		d.Treated[i], d.Cluster[i] = z == 1, int(cl[i])
	}
	f0, _ := Rates(d, 1000)
	for rep := 0; rep < 5; rep++ {
		p := rng.Perm(len(cl))
		dp := RateData{Count: make([]float64, len(p)), Exposure: make([]float64, len(p)), Weight: make([]float64, len(p)),
			Treated: make([]bool, len(p)), Cluster: make([]int, len(p))}
		for i, j := range p {
			dp.Count[i], dp.Exposure[i], dp.Weight[i], dp.Treated[i], dp.Cluster[i] = d.Count[j], d.Exposure[j], d.Weight[j], d.Treated[j], d.Cluster[j]
		}
		if f1, _ := Rates(dp, 1000); !reflect.DeepEqual(f0, f1) {
			t.Errorf("rates changed when rows were shuffled")
		}
	}
}

// Clusters of one row each must give the row-level robust SE: the cluster
// sandwich sums nothing across rows then (definition, common practice).
func TestClusterOfOneEqualsRow(t *testing.T) {
	d := loadSurv(t, "veteran")
	row := d
	row.Cluster = nil
	own := d
	own.Cluster = make([]int, len(d.Time))
	for i := range own.Cluster {
		own.Cluster[i] = 1000 - i // any distinct labels
	}
	a, _ := KaplanMeier(row, []float64{90})
	b, _ := KaplanMeier(own, []float64{90})
	if r := relDiff(a.Horizons[0].SurvDiff.Robust.SE, b.Horizons[0].SurvDiff.Robust.SE, 0); r > 1e-12 {
		t.Errorf("singleton clusters: robust SE differs from row-level by %g", r)
	}
	ca, _ := Cox(row, Efron)
	cb, _ := Cox(own, Efron)
	if r := relDiff(ca.Robust.SE, cb.Cluster.SE, 0); r > 1e-12 {
		t.Errorf("singleton clusters: Cox cluster SE differs from robust by %g", r)
	}
}

// Bad input is an error naming how many units are at fault (issue 14, bad
// input: one clear line, so the caller can exit 2).
func TestBadInput(t *testing.T) {
	good := func() Data {
		return Data{Time: []float64{1, 2, 3, 4}, Event: []bool{true, false, true, true}, Treated: []bool{true, true, false, false}}
	}
	tests := []struct {
		name string
		mod  func(d *Data)
		h    []float64
		want string
	}{
		{"zero time", func(d *Data) { d.Time[0] = 0 }, nil, "1 units have a follow-up time"},
		{"NaN times", func(d *Data) { d.Time[0], d.Time[2] = math.NaN(), -1 }, nil, "2 units have a follow-up time"},
		{"negative weight", func(d *Data) { d.Weight = []float64{1, -1, 1, 1} }, nil, "1 units have a weight"},
		{"one arm", func(d *Data) { d.Treated = []bool{true, true, true, true} }, nil, "4 treated and 0 control"},
		{"horizon beyond follow-up", func(d *Data) {}, []float64{2.5}, "horizon 2.5 is not within follow-up (0, 2]"},
		{"horizon zero", func(d *Data) {}, []float64{0}, "horizon 0 is not within"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			d := good()
			tc.mod(&d)
			_, err := KaplanMeier(d, tc.h)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("KaplanMeier: error %v, want it to contain %q", err, tc.want)
			}
			if tc.h == nil {
				if _, err := Cox(d, Efron); err == nil || !strings.Contains(err.Error(), tc.want) {
					t.Errorf("Cox: error %v, want it to contain %q", err, tc.want)
				}
			}
		})
	}
	if _, err := EventsFromFloat([]float64{0, 1, 2, 0.5, math.NaN()}); err == nil || !strings.Contains(err.Error(), "3 units have an event value") {
		t.Errorf("EventsFromFloat: %v", err)
	}
	if ev, err := EventsFromFloat([]float64{0, 1}); err != nil || !reflect.DeepEqual(ev, []bool{false, true}) {
		t.Errorf("EventsFromFloat(0, 1) = %v, %v", ev, err)
	}
	rate := func() RateData {
		return RateData{Count: []float64{0, 2, 1, 3}, Exposure: []float64{1, 2, 3, 4}, Treated: []bool{true, true, false, false}}
	}
	rtests := []struct {
		name string
		mod  func(d *RateData)
		want string
	}{
		{"negative count", func(d *RateData) { d.Count[0] = -1 }, "1 units have a count"},
		{"fractional count", func(d *RateData) { d.Count[0], d.Count[1] = 0.5, math.NaN() }, "2 units have a count"},
		{"zero exposure", func(d *RateData) { d.Exposure[3] = 0 }, "1 units have an exposure"},
		{"no events in an arm", func(d *RateData) { d.Count[0], d.Count[1] = 0, 0 }, "treated arm has 0 weighted events"},
	}
	for _, tc := range rtests {
		d := rate()
		tc.mod(&d)
		if _, err := Rates(d, 1000); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want it to contain %q", tc.name, err, tc.want)
		}
	}
	if _, err := Cox(Data{Time: []float64{1, 2}, Event: []bool{false, false}, Treated: []bool{true, false}}, Efron); err == nil || !strings.Contains(err.Error(), "0 units have an event") {
		t.Errorf("Cox without events: %v", err)
	}
	noTreatedEvents := Data{Time: []float64{1, 2, 3, 4}, Event: []bool{false, false, true, true}, Treated: []bool{true, true, false, false}}
	if _, err := Cox(noTreatedEvents, Breslow); err == nil || !strings.Contains(err.Error(), "treated arm's 2 units have 0 weighted events") {
		t.Errorf("Cox with an event-free arm: %v", err)
	}
}

// When every unit still at risk has the event, S drops to 0 and stays
// there: the Greenwood increment is taken as 0 (R survmean's rule), and the
// robust SE of S at later horizons is 0 because no weight can move it
// (definition of the product-limit estimator).
func TestCurveReachesZero(t *testing.T) {
	d := Data{
		Time:    []float64{1, 2, 3, 3, 1, 2, 4},
		Event:   []bool{true, false, true, true, true, true, false},
		Treated: []bool{true, true, true, true, false, false, false},
		Weight:  []float64{1, 2, 1.5, 0.5, 1, 1, 1},
	}
	res, err := KaplanMeier(d, []float64{3})
	if err != nil {
		t.Fatal(err)
	}
	last := res.Curves[1].Steps[len(res.Curves[1].Steps)-1]
	if last.Surv != 0 || last.SE != 0 || math.IsNaN(last.SE) {
		t.Errorf("last treated step %+v, want S = 0 and SE = 0", last)
	}
	h := res.Horizons[0]
	if h.Surv[1].Value != 0 || h.Surv[1].Robust.SE != 0 {
		t.Errorf("treated S(3) = %v, robust SE %v; want 0, 0", h.Surv[1].Value, h.Surv[1].Robust.SE)
	}
	for _, m := range []Measure{h.RMST[1], h.RMSTDiff, h.SurvDiff} {
		if math.IsNaN(m.Value) || math.IsNaN(m.Greenwood.SE) || math.IsNaN(m.Robust.SE) {
			t.Errorf("NaN in %+v", m)
		}
	}
	// S₁ = (1 − 1/5)·(1 − 2/2) on the weighted counts; RMST₁(3) = 1 + 0.8·2.
	if math.Abs(h.RMST[1].Value-2.6) > 1e-12 {
		t.Errorf("treated RMST(3) = %v, want 2.6 (by hand)", h.RMST[1].Value)
	}
}

// randomData draws a small cohort with heavy ties (integer times), weights
// (some 0) and clusters that span both arms.
func randomData(rng *rand.Rand, n int, ties bool) Data {
	d := Data{Time: make([]float64, n), Event: make([]bool, n), Treated: make([]bool, n), Weight: make([]float64, n), Cluster: make([]int, n)}
	for i := 0; i < n; i++ {
		z := rng.IntN(2) == 1
		lam := 0.2
		if z {
			lam = 0.12
		}
		te, tc := rng.ExpFloat64()/lam, rng.ExpFloat64()/0.1
		if ties {
			te, tc = math.Ceil(te), math.Ceil(tc)
		}
		d.Time[i], d.Event[i], d.Treated[i] = math.Min(te, tc), te <= tc, z
		d.Weight[i] = float64(rng.IntN(5)) / 2 // 0, 0.5, …, 2
		d.Cluster[i] = rng.IntN(n / 3)
	}
	d.Weight[0], d.Weight[1] = 1, 1
	d.Treated[0], d.Treated[1], d.Event[0], d.Event[1] = true, false, true, true
	return d
}

// Two independent computations of the same infinitesimal-jackknife
// variance must agree: the per-step sweep (Step.RobustSE) and the horizon
// pass (Horizon.Surv[a].Robust) evaluated at a step's time (definition;
// both match R on the reference data, this covers random ties, zero
// weights and clusters spanning arms).
func TestStepAndHorizonRobustAgree(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for rep := 0; rep < 30; rep++ {
		d := randomData(rng, 60, true)
		for _, clustered := range []bool{false, true} {
			dd := d
			if !clustered {
				dd.Cluster = nil
			}
			res, err := KaplanMeier(dd, nil)
			if err != nil {
				t.Fatal(err)
			}
			last := math.Min(res.Curves[0].Steps[len(res.Curves[0].Steps)-1].Time, res.Curves[1].Steps[len(res.Curves[1].Steps)-1].Time)
			var hs []float64
			for _, st := range res.Curves[1].Steps {
				if st.Time <= last {
					hs = append(hs, st.Time)
				}
			}
			hr, err := KaplanMeier(dd, hs)
			if err != nil {
				t.Fatal(err)
			}
			for j, h := range hr.Horizons {
				st := res.Curves[1].Steps[j]
				if relDiff(h.Surv[1].Robust.SE, st.RobustSE, 1e-9) > 1e-9 {
					t.Errorf("rep %d clustered=%v t=%v: horizon robust SE %v, step %v", rep, clustered, st.Time, h.Surv[1].Robust.SE, st.RobustSE)
				}
			}
		}
	}
}

// Without tied event times Efron's and Breslow's partial likelihoods are
// the same function, so every output must coincide (Efron 1977, JASA
// 72:557; common practice).
func TestEfronEqualsBreslowWithoutTies(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for rep := 0; rep < 20; rep++ {
		d := randomData(rng, 80, false)
		e, err := Cox(d, Efron)
		if err != nil {
			t.Fatal(err)
		}
		b, err := Cox(d, Breslow)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range [][2]float64{{e.LogHR, b.LogHR}, {e.Model.SE, b.Model.SE}, {e.Robust.SE, b.Robust.SE}, {e.Cluster.SE, b.Cluster.SE}, {e.PH.ChiSq, b.PH.ChiSq}} {
			if relDiff(p[0], p[1], 1e-9) > 1e-9 {
				t.Errorf("rep %d: Efron %v, Breslow %v", rep, p[0], p[1])
			}
		}
	}
}

// naiveScore is the weighted partial-likelihood score written directly
// from the textbook formulas, row by row, without the package's per-time
// aggregation (Breslow 1974; Efron 1977, JASA 72:557; the mean-weight rule
// for weighted Efron ties as in R coxph, from its documentation).
func naiveScore(d Data, beta float64, ties Ties) float64 {
	u := 0.0
	seen := map[float64]bool{}
	for _, t := range d.Time {
		if seen[t] {
			continue
		}
		seen[t] = true
		var dw, dz, nd float64
		var s0, s1, e0, e1 float64
		for i, ti := range d.Time {
			if d.Weight[i] == 0 { // a weight-0 unit is not in the comparison
				continue
			}
			z := 0.0
			if d.Treated[i] {
				z = 1
			}
			r := d.Weight[i] * math.Exp(beta*z)
			if ti >= t {
				s0 += r
				s1 += r * z
			}
			if ti == t && d.Event[i] {
				dw += d.Weight[i]
				dz += d.Weight[i] * z
				nd++
				e0 += r
				e1 += r * z
			}
		}
		if nd == 0 {
			continue
		}
		u += dz
		if ties == Breslow {
			u -= dw * s1 / s0
			continue
		}
		for k := 0.0; k < nd; k++ {
			u -= dw / nd * (s1 - k/nd*e1) / (s0 - k/nd*e0)
		}
	}
	return u
}

// The fitted log HR must be the root of the score: found here by bisection
// on the naive score to 1e-13 and compared to 1e-9 (definition of the
// maximum partial-likelihood estimate).
func TestCoxSolvesScore(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for rep := 0; rep < 10; rep++ {
		d := randomData(rng, 70, true)
		for _, ties := range []Ties{Efron, Breslow} {
			f, err := Cox(d, ties)
			if err != nil {
				t.Fatal(err)
			}
			lo, hi := f.LogHR-1, f.LogHR+1
			if naiveScore(d, lo, ties) <= 0 || naiveScore(d, hi, ties) >= 0 {
				t.Fatalf("rep %d %v: score does not bracket the fit", rep, ties)
			}
			for hi-lo > 1e-13 {
				mid := (lo + hi) / 2
				if naiveScore(d, mid, ties) > 0 {
					lo = mid
				} else {
					hi = mid
				}
			}
			if math.Abs(f.LogHR-lo) > 1e-9 {
				t.Errorf("rep %d %v: log HR %.15g, root of the score %.15g", rep, ties, f.LogHR, lo)
			}
		}
	}
}

// A weight-0 row is outside the weighted comparison: adding one changes
// nothing (R survfit gives the same estimates; R coxph refuses weight 0, so
// the package drops such rows itself).
func TestZeroWeightRowsAreAbsent(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	d := randomData(rng, 90, true)
	var kept Data
	for i, w := range d.Weight {
		if w > 0 {
			kept.Time = append(kept.Time, d.Time[i])
			kept.Event = append(kept.Event, d.Event[i])
			kept.Treated = append(kept.Treated, d.Treated[i])
			kept.Weight = append(kept.Weight, w)
			kept.Cluster = append(kept.Cluster, d.Cluster[i])
		}
	}
	if len(kept.Time) == len(d.Time) {
		t.Fatal("no weight-0 rows drawn")
	}
	a, errA := KaplanMeier(d, []float64{2, 5})
	b, errB := KaplanMeier(kept, []float64{2, 5})
	if errA != nil || errB != nil || !reflect.DeepEqual(a, b) {
		t.Errorf("Kaplan–Meier with weight-0 rows differs from without (%v, %v)", errA, errB)
	}
	for _, ties := range []Ties{Efron, Breslow} {
		ca, errA := Cox(d, ties)
		cb, errB := Cox(kept, ties)
		if errA != nil || errB != nil || !reflect.DeepEqual(ca, cb) {
			t.Errorf("%v: Cox with weight-0 rows differs from without (%v, %v)", ties, errA, errB)
		}
	}
}
