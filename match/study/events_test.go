package study

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"counterpart/match/effect"
	"counterpart/warehouse"
)

// eventCohort adds to a Kang–Schafer cohort (Kang & Schafer 2007, Stat
// Sci 22:523: confounded treatment, no treatment effect) a censored time
// to event whose hazard depends on the confounders but not on treatment
// — exponential with rate 0.01·exp(0.5·z1 + 0.3·z2), independent uniform
// censoring on [0, 300] — and an event count over random exposure with
// the same confounding. Treatment has no effect: every hazard ratio and
// rate ratio is 1 and every survival, RMST and rate difference 0, in any
// population, so the truth needs no simulation of its own.
func eventCohort(r *rand.Rand, n int) *warehouse.Cohort {
	c := kangSchafer(r, n)
	time, event, count, expo := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	z1, z2 := c.Covariates[0].Values, c.Covariates[1].Values
	for i := range time {
		rate := 0.01 * math.Exp(0.5*z1[i]+0.3*z2[i])
		t := r.ExpFloat64() / rate
		cens := 1 + 299*r.Float64()
		time[i], event[i] = math.Min(t, cens), 0
		if t <= cens {
			event[i] = 1
		}
		expo[i] = 1 + 11*r.Float64()
		mean := expo[i] * 0.2 * math.Exp(0.4*z1[i])
		l, k, p := math.Exp(-mean), 0.0, 1.0
		for {
			p *= r.Float64()
			if p <= l {
				break
			}
			k++
		}
		count[i] = k
	}
	c.Outcomes = append(c.Outcomes,
		warehouse.Outcome{Name: "fu", Values: time}, warehouse.Outcome{Name: "ev", Values: event, Kind: warehouse.OutcomeBinary},
		warehouse.Outcome{Name: "n_visits", Values: count}, warehouse.Outcome{Name: "months", Values: expo})
	return c
}

const eventStudy = `study: sim
warehouse: {dsn: unused.duckdb}
cohort:
  sql: select 1
  unit: id
  treatment: t
  outcomes: [y]
  covariates: [z1, z2, z3, z4]
  time_to_event: [{name: death, time: fu, event: ev, horizons: [60, 120]}]
  rates: [{name: visits, count: n_visits, exposure: months}]
weighting: [att, ate, overlap]
balance: {on_fail: warn}
`

// TestCoverageTimeToEvent: over 1,000 seeded replicates of a confounded
// cohort with no treatment effect (binomial SD of a coverage 0.7 points),
// the 95% intervals of the matched and ATT-weighted hazard ratios and
// horizon survival differences (the risk difference with its sign
// flipped) cover the truth in 93–97% of replicates (issue acceptance).
// ATE and overlap weights get 93–98.5%: their robust SEs treat the
// weights as known, which is conservative for those estimands
// (Lunceford & Davidian 2004, Stat Med 23:2937); the sandwich that
// accounts for the estimated score is a later issue's. Rate ratios must
// cover at least 90% (matched ones carry the caliper's residual bias, as
// the continuous outcome's coverage test allows). The unadjusted
// intervals, biased by the confounding, must cover far less often: the
// check can see bias.
func TestCoverageTimeToEvent(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation: 1,000 replicates")
	}
	spec, err := Parse("sim.yaml", []byte(eventStudy), nil)
	if err != nil {
		t.Fatal(err)
	}
	const reps = 1000
	covered := map[string]int{}
	seen := map[string]int{}
	r := rand.New(rand.NewPCG(1989, 77))
	for rep := 0; rep < reps; rep++ {
		c := eventCohort(r, 1000)
		sum := &Summary{Timings: map[string]float64{}}
		if _, err := analyse(context.Background(), spec, c, sum, newClock(Options{}, sum), Options{}, nil); err != nil {
			t.Fatalf("replicate %d: %v", rep, err)
		}
		for _, e := range sum.Effects {
			truth := 0.0
			switch e.Contrast {
			case effect.ContrastHazardRatio, effect.ContrastRateRatio:
				truth = 1
			case effect.ContrastSurvivalDifference:
				if float64(*e.Horizon) != 120 {
					continue
				}
			default:
				continue
			}
			key := e.Contrast + " " + e.Adjustment
			seen[key]++
			if float64(e.CILow) <= truth && truth <= float64(e.CIHigh) {
				covered[key]++
			}
		}
	}
	for _, contrast := range []string{effect.ContrastHazardRatio, effect.ContrastSurvivalDifference, effect.ContrastRateRatio} {
		for _, adj := range []string{"unadjusted", "matched", "att", "ate", "overlap"} {
			key := contrast + " " + adj
			if seen[key] != reps {
				t.Errorf("%s: estimated in %d of %d replicates", key, seen[key], reps)
				continue
			}
			rate := float64(covered[key]) / reps
			t.Logf("%-30s coverage %.3f", key, rate)
			lo, hi := 0.93, 0.97
			switch {
			case adj == "unadjusted":
				lo, hi = 0, 0.5
			case contrast == effect.ContrastRateRatio:
				lo, hi = 0.90, 0.985
			case adj == "ate" || adj == "overlap":
				hi = 0.985
			}
			if rate < lo || rate > hi {
				t.Errorf("%s: 95%% CI covered the truth in %.1f%% of replicates, want %.1f–%.1f%%", key, 100*rate, 100*lo, 100*hi)
			}
		}
	}
}

// TestEventRowsShape: each time-to-event outcome gives, per adjustment, a
// hazard-ratio row with its PH check and three rows per horizon; each
// rate outcome a rate ratio and a rate difference; the summary keeps one
// curve per arm and adjustment.
func TestEventRowsShape(t *testing.T) {
	spec, err := Parse("sim.yaml", []byte(eventStudy), nil)
	if err != nil {
		t.Fatal(err)
	}
	c := eventCohort(rand.New(rand.NewPCG(3, 4)), 2000)
	sum := &Summary{Timings: map[string]float64{}}
	res, err := analyse(context.Background(), spec, c, sum, newClock(Options{}, sum), Options{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	count := map[string]int{}
	for _, e := range sum.Effects {
		h := ""
		if e.Horizon != nil {
			h = fmt.Sprint(float64(*e.Horizon))
		}
		count[e.Outcome+" "+e.Contrast+" "+h]++
		if e.Contrast == effect.ContrastHazardRatio && (e.PH == nil || !(float64(e.PH.P) >= 0)) {
			t.Errorf("%s: hazard-ratio row without a PH check", e.Adjustment)
		}
	}
	for _, k := range []string{"death hazard_ratio ", "death survival_difference 60", "death risk_ratio 120", "death rmst_difference 120", "visits rate_ratio ", "visits rate_difference ", "y difference "} {
		if count[k] != 5 {
			t.Errorf("%q: %d rows, want one per adjustment (5)", k, count[k])
		}
	}
	if count["fu difference "] != 0 || count["ev difference "] != 0 {
		t.Error("the time and event columns were estimated as plain outcomes")
	}
	if len(sum.Survival) != 10 || len(res.survival) == 0 {
		t.Errorf("%d summary curves and %d survival-table rows; want 10 curves and some rows", len(sum.Survival), len(res.survival))
	}
}
