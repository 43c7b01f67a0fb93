// Package demo is the demo scenario (ours, synthetic): a fictional
// health plan's heart-failure members, a home-coaching programme and the
// effects planted in the data, written as a warehouse and a study file.
package demo

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"counterpart/match/effect"
	"counterpart/warehouse"
)

// The demo scenario (ours, synthetic): a regional health plan offers home
// heart-coaching to members with heart failure. Older members with more
// prior admissions and comorbidity are more likely to be enrolled, and they
// also readmit more and cost more, so the naive comparison makes coaching
// look harmful. The generator plants a known effect on both outcomes.
const (
	// CostEffect is the planted change in 90-day cost for every
	// coached member (currency units).
	CostEffect = -1500.0
	// ReadmitShift is the planted change in each coached member's
	// 30-day readmission probability (before clipping to [0.01, 0.99]).
	ReadmitShift = -0.06
	// ReadmissionHR is the planted hazard ratio of coaching on the
	// time to first readmission over a year of follow-up.
	ReadmissionHR = 0.75
	// ERRateRatio is the planted ratio of emergency-visit rates.
	ERRateRatio = 0.8
	// Horizon is the follow-up day at which the demo compares risks.
	Horizon = 180.0
)

// Truth is one planted effect among the coached members, for the
// demo's check of its estimates: the contrast it is read from and, for a
// time-to-event outcome, the horizon.
type Truth struct {
	Outcome, Contrast string
	Horizon           float64
	Value             float64
}

// Data is the synthetic cohort plus the truth it was built from.
type Data struct {
	MemberID    []int64
	Age         []int64
	Sex         []string
	Region      []string
	PriorAdmits []int64
	Charlson    []int64
	LivesAlone  []bool
	EFReduced   []bool
	Coached     []bool
	Readmit30d  []int64
	Cost90d     []float64
	// FollowupDays is the time to first readmission or to the end of
	// follow-up (a year, or leaving the plan); Readmitted says which.
	FollowupDays []int64
	Readmitted   []bool
	// ERVisits counts emergency visits over EnrolledMonths.
	ERVisits       []int64
	EnrolledMonths []int64
	// TrueATT holds the expected effect among the coached, per outcome:
	// the mean over coached members of E[Y(1) − Y(0)].
	TrueATT map[string]float64
	// TrueEvents holds the planted effects of the time-to-event and rate
	// outcomes: the survival difference at Horizon among the coached
	// (exact, from the hazards) and the emergency-visit rate ratio.
	TrueEvents []Truth
}

var demoRegions = []string{"coast", "hills", "metro", "plains", "valley"}

// Generate draws n synthetic members with a fixed seed.
func Generate(n int, seed uint64) *Data {
	r := rand.New(rand.NewPCG(seed, 0x5eed))
	d := &Data{TrueATT: map[string]float64{}}
	expit := func(x float64) float64 { return 1 / (1 + math.Exp(-x)) }
	poisson := func(mean float64) int64 {
		l, k, p := math.Exp(-mean), int64(0), 1.0
		for {
			p *= r.Float64()
			if p <= l {
				return k
			}
			k++
		}
	}
	// The time-to-event and rate outcomes draw from their own stream, so
	// the members and the older outcomes stay what they were.
	r2 := rand.New(rand.NewPCG(seed, 0x71e5))
	pois2 := func(mean float64) int64 {
		l, k, p := math.Exp(-mean), int64(0), 1.0
		for {
			p *= r2.Float64()
			if p <= l {
				return k
			}
			k++
		}
	}
	var sumRD, nCoached, sumSurvDiff float64
	for i := 0; i < n; i++ {
		age := int64(math.Round(math.Min(98, math.Max(45, 74+9*r.NormFloat64()))))
		sex := "F"
		if r.Float64() < 0.48 {
			sex = "M"
		}
		region := demoRegions[r.IntN(len(demoRegions))]
		a := float64(age-74) / 10
		prior := poisson(0.8 + 0.25*math.Max(0, a+1))
		charlson := min(poisson(2.2+0.4*math.Max(0, a)+0.3*float64(prior)), 14)
		alone := r.Float64() < expit(-1+0.4*a)
		ef := r.Float64() < 0.45
		regionLift := map[string]float64{"coast": 0, "hills": -0.2, "metro": 0.35, "plains": -0.35, "valley": 0.1}[region]
		lp := -2.1 + 0.35*a + 0.45*(float64(prior)-1) + 0.16*(float64(charlson)-3) + 0.3*b2f(alone) + 0.15*b2f(ef) + regionLift
		coached := r.Float64() < expit(lp)

		p0 := expit(-1.5 + 0.2*a + 0.38*(float64(prior)-1) + 0.12*(float64(charlson)-3) + 0.25*b2f(alone) + 0.3*b2f(ef))
		p1 := math.Min(0.99, math.Max(0.01, p0+ReadmitShift))
		u := r.Float64()
		var readmit int64
		p := p0
		if coached {
			p = p1
		}
		if u < p {
			readmit = 1
		}
		cost := 6000 + 2100*float64(prior) + 850*float64(charlson) + 400*a + 1400*b2f(alone) + 900*b2f(ef)
		cost *= math.Exp(0.35*r.NormFloat64() - 0.35*0.35/2)
		if coached {
			cost += CostEffect
			sumRD += p1 - p0
			nCoached++
		}
		// Readmission hazard per day (exponential), confounded like the
		// other outcomes; coaching multiplies it by ReadmissionHR.
		haz := 0.0022 * math.Exp(0.25*a+0.3*(float64(prior)-1)+0.1*(float64(charlson)-3)+0.25*b2f(alone)+0.2*b2f(ef))
		h := haz
		if coached {
			h *= ReadmissionHR
			sumSurvDiff += math.Exp(-haz*ReadmissionHR*Horizon) - math.Exp(-haz*Horizon)
		}
		tEvent := r2.ExpFloat64() / h
		tLeave := r2.ExpFloat64() / 0.0012 // leaving the plan, about a third a year
		fu := math.Min(365, math.Min(tEvent, tLeave))
		d.FollowupDays = append(d.FollowupDays, max(1, int64(math.Ceil(fu))))
		d.Readmitted = append(d.Readmitted, tEvent <= math.Min(365, tLeave))
		months := 1 + r2.IntN(12)
		erRate := 0.12 * math.Exp(0.2*a+0.25*(float64(prior)-1)+0.08*(float64(charlson)-3)+0.2*b2f(alone))
		if coached {
			erRate *= ERRateRatio
		}
		d.EnrolledMonths = append(d.EnrolledMonths, int64(months))
		d.ERVisits = append(d.ERVisits, pois2(erRate*float64(months)))
		d.MemberID = append(d.MemberID, int64(100001+i))
		d.Age = append(d.Age, age)
		d.Sex = append(d.Sex, sex)
		d.Region = append(d.Region, region)
		d.PriorAdmits = append(d.PriorAdmits, prior)
		d.Charlson = append(d.Charlson, charlson)
		d.LivesAlone = append(d.LivesAlone, alone)
		d.EFReduced = append(d.EFReduced, ef)
		d.Coached = append(d.Coached, coached)
		d.Readmit30d = append(d.Readmit30d, readmit)
		d.Cost90d = append(d.Cost90d, math.Round(cost*100)/100)
	}
	d.TrueATT["cost_90d"] = CostEffect
	if nCoached > 0 {
		d.TrueATT["readmit_30d"] = sumRD / nCoached
		// Survival difference S₁ − S₀ at the horizon is minus the risk
		// difference; the rate ratio holds in every population.
		d.TrueEvents = []Truth{
			{Outcome: "readmission", Contrast: effect.ContrastSurvivalDifference, Horizon: Horizon, Value: sumSurvDiff / nCoached},
			{Outcome: "emergency_visits", Contrast: effect.ContrastRateRatio, Value: ERRateRatio},
		}
	}
	return d
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// StudyFile is the commented study file the demo writes beside its
// warehouse.
const StudyFile = `# counterpart study: home heart-coaching (synthetic demo data)
#
# Question: among members with heart failure who were coached at home,
# what did coaching change in 30-day readmission and 90-day cost?
study: hf_coaching

warehouse:
  engine: duckdb                 # duckdb | postgres
  dsn: warehouse.duckdb          # relative paths are relative to this file

cohort:
  # Any read-only query, one row per member. Derived terms (squares,
  # bands, interactions) belong here, in SQL.
  sql: |
    select member_id, coached, age, sex, region, prior_admits, charlson,
           lives_alone, ef_reduced, readmit_30d, cost_90d,
           followup_days, readmitted, er_visits, enrolled_months
    from marts.hf_members
  unit: member_id
  treatment: coached
  outcomes: [readmit_30d, cost_90d]
  covariates: [age, sex, region, prior_admits, charlson, lives_alone, ef_reduced]
  time_to_event:                 # a time to an event under censoring
    - name: readmission          # the outcome's name in every table
      time: followup_days        # > 0
      event: readmitted          # 1 = readmitted, 0 = censored
      horizons: [180, 365]       # days at which risks and restricted means are read
  rates:                         # event counts over unequal exposure
    - name: emergency_visits
      count: er_visits           # whole numbers >= 0
      exposure: enrolled_months  # > 0

score:
  model: logistic                # logistic | ridge

support: minmax                  # none | minmax | crump (keeps 0.1 <= ps <= 0.9)

matching:
  algorithm: greedy              # greedy | off
  controls: 1                    # comparison members per coached member
  reuse: false
  caliper: 0.2                   # in pooled SDs of logit(ps); 0 = none
  exact_on: [sex]
  order: high-score-first
  seed: 20261201

weighting: [att, ate, overlap]

balance:
  smd_limit: 0.1
  variance_ratio_limit: 2.0
  on_fail: reject                # reject (exit 3, nothing made current) | warn

estimate:
  estimand: att                  # att (from matching) | ate | atc | ato | atm

output:
  schema: main
  prefix: hf_coaching_
  keep_runs: 30
`

// TableComment is the demo table's comment.
const TableComment = "Synthetic heart-failure members of a fictional health plan (counterpart demo); no real people."

// Columns are the demo table's columns, typed as DuckDB spells them.
func Columns(d *Data) []warehouse.LoadColumn {
	return []warehouse.LoadColumn{
		{Name: "member_id", Type: "BIGINT", Values: d.MemberID, Comment: "synthetic member id"},
		{Name: "coached", Type: "BOOLEAN", Values: d.Coached, Comment: "enrolled in home heart-coaching"},
		{Name: "age", Type: "INTEGER", Values: d.Age, Comment: "age in years at index"},
		{Name: "sex", Type: "VARCHAR", Values: d.Sex, Comment: "F or M"},
		{Name: "region", Type: "VARCHAR", Values: d.Region, Comment: "service region"},
		{Name: "prior_admits", Type: "INTEGER", Values: d.PriorAdmits, Comment: "admissions in the prior year"},
		{Name: "charlson", Type: "INTEGER", Values: d.Charlson, Comment: "Charlson comorbidity index"},
		{Name: "lives_alone", Type: "BOOLEAN", Values: d.LivesAlone, Comment: "lives alone"},
		{Name: "ef_reduced", Type: "BOOLEAN", Values: d.EFReduced, Comment: "reduced ejection fraction"},
		{Name: "readmit_30d", Type: "INTEGER", Values: d.Readmit30d, Comment: "readmitted within 30 days (0/1)"},
		{Name: "cost_90d", Type: "DOUBLE", Values: d.Cost90d, Comment: "allowed cost over 90 days"},
		{Name: "followup_days", Type: "BIGINT", Values: d.FollowupDays, Comment: "days from index to first readmission, or to the end of follow-up (a year, or leaving the plan)"},
		{Name: "readmitted", Type: "BOOLEAN", Values: d.Readmitted, Comment: "followup_days ended in a readmission (false: censored)"},
		{Name: "er_visits", Type: "BIGINT", Values: d.ERVisits, Comment: "emergency visits while enrolled"},
		{Name: "enrolled_months", Type: "BIGINT", Values: d.EnrolledMonths, Comment: "months enrolled in the year after index"},
	}
}

// Write writes the synthetic warehouse and study file into dir and
// returns the study file's path and the data (for the truth).
func Write(ctx context.Context, dir string, n int, seed uint64) (string, *Data, error) {
	if n < 200 {
		return "", nil, fmt.Errorf("demo: --units %d is too small; use at least 200", n)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", nil, fmt.Errorf("demo: %w", err)
	}
	db := filepath.Join(dir, "warehouse.duckdb")
	for _, f := range []string{db, db + ".wal"} {
		if err := os.Remove(f); err != nil && !os.IsNotExist(err) {
			return "", nil, fmt.Errorf("demo: remove old %s: %w", f, err)
		}
	}
	d := Generate(n, seed)
	err := warehouse.LoadTable(ctx, "duckdb", db, "marts", "hf_members", TableComment, Columns(d))
	if err != nil {
		return "", nil, fmt.Errorf("demo: %w", err)
	}
	path := filepath.Join(dir, "hf_coaching.yaml")
	if err := os.WriteFile(path, []byte(StudyFile), 0o644); err != nil {
		return "", nil, fmt.Errorf("demo: %w", err)
	}
	return path, d, nil
}
