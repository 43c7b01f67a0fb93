package study

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"counterpart/warehouse"
)

// kangSchafer draws one data set of the Kang & Schafer (2007, Statistical
// Science 22:523) simulation: Z₁..Z₄ ~ N(0,1); treatment logit
// −Z₁ + 0.5Z₂ − 0.25Z₃ − 0.1Z₄; Y = 210 + 27.4Z₁ + 13.7(Z₂+Z₃+Z₄) + ε with
// ε ~ N(0,1). Treatment has no effect on Y, so every estimand's truth is 0.
func kangSchafer(r *rand.Rand, n int) *warehouse.Cohort {
	c := &warehouse.Cohort{Unit: "id", IDKind: warehouse.IDInt, Treatment: "t"}
	zs := make([][]float64, 4)
	for j := range zs {
		zs[j] = make([]float64, n)
	}
	y := make([]float64, n)
	for i := 0; i < n; i++ {
		for j := range zs {
			zs[j][i] = r.NormFloat64()
		}
		lp := -zs[0][i] + 0.5*zs[1][i] - 0.25*zs[2][i] - 0.1*zs[3][i]
		c.IntIDs = append(c.IntIDs, int64(i+1))
		c.Treated = append(c.Treated, r.Float64() < 1/(1+math.Exp(-lp)))
		y[i] = 210 + 27.4*zs[0][i] + 13.7*(zs[1][i]+zs[2][i]+zs[3][i]) + r.NormFloat64()
	}
	for j := range zs {
		c.Covariates = append(c.Covariates, warehouse.Covariate{Name: []string{"z1", "z2", "z3", "z4"}[j], Kind: warehouse.Numeric, Values: zs[j]})
	}
	c.Outcomes = []warehouse.Outcome{{Name: "y", Values: y}}
	return c
}

// TestCoverageKangSchafer: over 200 seeded replicates of the Kang–Schafer
// design (true effect 0), the 95% intervals of every estimator a study
// offers by default (matched with cluster-robust SE; ATT, ATE and overlap
// weights with HC0) and of the regression-augmented ones cover the truth
// in at least 90% of replicates (issue acceptance; a 95% interval should
// cover about 95%: binomial sd over 200 is 1.5 points).
func TestCoverageKangSchafer(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation: 200 replicates")
	}
	spec, err := Parse("sim.yaml", []byte(`study: sim
warehouse: {dsn: unused.duckdb}
cohort: {sql: select 1, unit: id, treatment: t, outcomes: [y], covariates: [z1, z2, z3, z4]}
weighting: [att, ate, overlap]
balance: {on_fail: warn}
estimate: {augment: true}
`), nil)
	if err != nil {
		t.Fatal(err)
	}
	const reps = 200
	covered := map[string]int{}
	seen := map[string]int{}
	r := rand.New(rand.NewPCG(2007, 523))
	for rep := 0; rep < reps; rep++ {
		c := kangSchafer(r, 1000)
		sum := &Summary{Timings: map[string]float64{}}
		if _, err := analyse(context.Background(), spec, c, sum, newClock(Options{}, sum), Options{}, nil); err != nil {
			t.Fatalf("replicate %d: %v", rep, err)
		}
		for _, e := range sum.Effects {
			if e.Adjustment == "unadjusted" || e.Contrast != "difference" {
				continue
			}
			seen[e.Adjustment]++
			if float64(e.CILow) <= 0 && 0 <= float64(e.CIHigh) {
				covered[e.Adjustment]++
			}
		}
	}
	for _, adj := range []string{"matched", "att", "ate", "overlap", "matched+regression", "att+regression", "ate+regression", "overlap+regression"} {
		if seen[adj] != reps {
			t.Errorf("%s: estimated in %d of %d replicates", adj, seen[adj], reps)
			continue
		}
		rate := float64(covered[adj]) / reps
		t.Logf("%-20s coverage %.3f", adj, rate)
		if rate < 0.90 {
			t.Errorf("%s: 95%% CI covered the truth in %.1f%% of replicates, want at least 90%%", adj, 100*rate)
		}
	}
}

// TestBootstrapRefitsScore: with estimate.bootstrap the weighting rows get
// bootstrap SEs and percentile intervals from replicates that refit the
// score. For the ATE, accounting for the score's estimation does not widen
// the interval relative to the HC0 SE that treats weights as fixed
// (Lunceford & Davidian 2004: ignoring estimation is conservative for the
// ATE), so the bootstrap SE must not exceed it by more than resampling
// noise; and the percentile interval must contain the point estimate.
func TestBootstrapRefitsScore(t *testing.T) {
	spec, err := Parse("boot.yaml", []byte(`study: boot
warehouse: {dsn: unused.duckdb}
cohort: {sql: select 1, unit: id, treatment: t, outcomes: [y], covariates: [z1, z2, z3, z4]}
matching: {algorithm: "off"}
weighting: [ate, overlap]
estimate: {estimand: ate, bootstrap: 200, seed: 9}
balance: {on_fail: warn}
`), nil)
	if err != nil {
		t.Fatal(err)
	}
	c := kangSchafer(rand.New(rand.NewPCG(3, 4)), 800)
	run := func() *Summary {
		sum := &Summary{Timings: map[string]float64{}}
		if _, err := analyse(context.Background(), spec, c, sum, newClock(Options{}, sum), Options{}, nil); err != nil {
			t.Fatal(err)
		}
		return sum
	}
	first, second := run(), run()
	for i, e := range first.Effects {
		if e.Adjustment == "unadjusted" {
			if e.BootReps != 0 {
				t.Errorf("unadjusted row got a bootstrap")
			}
			continue
		}
		if e.BootReps != 200 {
			t.Fatalf("%s: %d bootstrap replicates, want 200", e.Adjustment, e.BootReps)
		}
		if !(float64(e.BootLow) <= float64(e.Estimate) && float64(e.Estimate) <= float64(e.BootHigh)) {
			t.Errorf("%s: estimate %v outside percentile interval [%v, %v]", e.Adjustment, e.Estimate, e.BootLow, e.BootHigh)
		}
		if e.Adjustment == "ate" && float64(e.BootSE) > 1.2*float64(e.SE) {
			t.Errorf("ate: bootstrap SE %v exceeds the fixed-weight HC0 SE %v by more than 20%%", e.BootSE, e.SE)
		}
		if second.Effects[i].BootSE != e.BootSE {
			t.Errorf("%s: seeded bootstrap not reproducible", e.Adjustment)
		}
	}
}

// TestWeightRules: percentile truncation caps each arm's weights at its
// own percentile, and stabilising rescales by the arm share (common
// practice; Cole & Hernán 2008; Robins, Hernán & Brumback 2000).
func TestWeightRules(t *testing.T) {
	z := []bool{true, true, true, false, false, false, false}
	w := []float64{1, 2, 40, 1, 3, 5, 90}
	got, err := applyRules(WeightRules{Percentiles: []float64{0, 50}}, w, z)
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{1, 2, 2, 1, 3, 4, 4} // medians: treated 2, control (3+5)/2 = 4
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("truncated %v, want %v", got, want)
		}
	}
	st, err := applyRules(WeightRules{Stabilize: true}, []float64{2, 2, 2, 4, 4, 4, 4}, z)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(st[0]-2*3.0/7) > 1e-15 || math.Abs(st[3]-4*4.0/7) > 1e-15 {
		t.Errorf("stabilised %v", st)
	}
}
