package study

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"counterpart/warehouse"
)

// TestParseDistance: matching.distance and matching.distance_on are
// validated with messages naming the key (the study-file contract in
// README.md).
func TestParseDistance(t *testing.T) {
	base := `study: s
warehouse: {engine: duckdb, dsn: w.duckdb}
cohort:
  sql: select 1
  unit: id
  treatment: z
  covariates: [age, sex, score]
  categorical: [sex]
matching:
`
	for _, tc := range []struct {
		name, matching, wantErr string
		wantOn                  []string
	}{
		{"default", "  algorithm: greedy\n", "", nil},
		{"mahalanobis", "  distance: mahalanobis\n  distance_on: [age, sex]\n", "", []string{"age", "sex"}},
		{"rank optimal", "  algorithm: optimal\n  distance: rank_mahalanobis\n", "", nil},
		{"unknown", "  distance: euclid\n", "matching.distance", nil},
		{"full", "  algorithm: full\n  distance: mahalanobis\n", "greedy or optimal", nil},
		{"strata", "  algorithm: strata\n  distance: mahalanobis\n", "greedy or optimal", nil},
		{"no caliper", "  distance: mahalanobis\n  caliper: 0\n", "needs a propensity caliper", nil},
		{"not a covariate", "  distance: mahalanobis\n  distance_on: [height]\n", "not listed in cohort.covariates", nil},
		{"twice", "  distance: mahalanobis\n  distance_on: [age, age]\n", "listed twice", nil},
		{"on with logit", "  distance_on: [age]\n", "only applies with distance", nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s, err := Parse("s.yaml", []byte(base+tc.matching), nil)
			if tc.wantErr != "" {
				if err == nil || !strings.Contains(err.Error(), tc.wantErr) {
					t.Fatalf("got %v, want an error containing %q", err, tc.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if tc.name == "default" && s.Matching.Distance != "logit" {
				t.Errorf("default distance %q, want logit", s.Matching.Distance)
			}
			if strings.Join(s.Matching.DistanceOn, ",") != strings.Join(tc.wantOn, ",") {
				t.Errorf("distance_on %v, want %v", s.Matching.DistanceOn, tc.wantOn)
			}
		})
	}
}

// TestMahalanobisMatchingOnDemo runs the demo study with the logit
// distance and with Mahalanobis distances inside the same propensity
// caliper, and checks that every run succeeds, that every matched pair is
// inside the caliper on logit(ps) (read back from the warehouse's scores
// and matches tables), and that matching on the covariates themselves
// within the caliper balances them at least as well as the logit distance
// does (mean |SMD| over their balance rows; Rosenbaum & Rubin 1985, Am
// Stat 39:33, report the same for Mahalanobis matching within calipers;
// here it is checked on the demo's synthetic data).
//
// Two covariate sets: all five non-stratum covariates (the booleans and
// region enter as level indicators), which passes the balance gate, and
// the three numeric ones only, run with on_fail: warn because the
// covariates left out of the distance (lives_alone) drift past the 0.1
// SMD limit — an observation worth keeping: a Mahalanobis distance
// balances what it is given, at the expense of what it is not.
func TestMahalanobisMatchingOnDemo(t *testing.T) {
	all := []string{"age", "region", "prior_admits", "charlson", "lives_alone", "ef_reduced"}
	numeric := []string{"age", "prior_admits", "charlson"}
	for _, set := range []struct {
		on   []string
		gate bool
	}{{all, true}, {numeric, false}} {
		meanSMD := map[string]float64{}
		for _, tc := range []struct{ algorithm, distance string }{
			{"greedy", "logit"},
			{"greedy", "mahalanobis"},
			{"greedy", "rank_mahalanobis"},
			{"optimal", "mahalanobis"},
		} {
			name := tc.algorithm + "/" + tc.distance
			dir := t.TempDir()
			s, sum, _, err := runDemo(t, dir, 3000, func(s *Spec) {
				s.Matching.Algorithm = tc.algorithm
				s.Matching.Distance = tc.distance
				if tc.distance != "logit" {
					s.Matching.DistanceOn = set.on
				}
				if !set.gate {
					s.Balance.OnFail = "warn"
				}
			})
			if err != nil {
				t.Fatalf("%s on %v: %v", name, set.on, err)
			}
			if sum.Status != warehouse.StatusSucceeded {
				t.Fatalf("%s on %v: status %s: %s", name, set.on, sum.Status, sum.Message)
			}
			width := float64(sum.Matching.CaliperWidth)
			if n := pairsOutsideCaliper(t, dir, s, sum.RunID, width); n != 0 {
				t.Errorf("%s: %d matched pairs outside the caliper %g", name, n, width)
			}
			total, rows, pass := 0.0, 0, false
			for _, ab := range sum.Balance {
				if ab.Adjustment != "matched" {
					continue
				}
				pass = ab.Pass
				for _, st := range ab.Stats {
					for _, v := range set.on {
						if st.Name == v {
							total += math.Abs(float64(st.SMD))
							rows++
						}
					}
				}
			}
			meanSMD[name] = total / float64(rows)
			if set.gate && !pass {
				t.Errorf("%s on %v: matched balance fails the gate", name, set.on)
			}
			t.Logf("%s on %v: matched treated %d, gate pass %v, mean |SMD| over %d rows = %.4f", name, set.on, sum.Matching.MatchedTreated, pass, rows, meanSMD[name])
		}
		for _, name := range []string{"greedy/mahalanobis", "greedy/rank_mahalanobis", "optimal/mahalanobis"} {
			if meanSMD[name] > meanSMD["greedy/logit"] {
				t.Errorf("%s: mean |SMD| %.4f on %v, worse than the logit distance's %.4f", name, meanSMD[name], set.on, meanSMD["greedy/logit"])
			}
		}
	}
}

// pairsOutsideCaliper counts matched controls whose |logit_ps| distance
// to their set's treated unit exceeds width (1e-9 relative slack for the
// round trip through the warehouse).
func pairsOutsideCaliper(t *testing.T, dir string, s *Spec, runID string, width float64) int {
	t.Helper()
	db, err := sql.Open("duckdb", filepath.Join(dir, "warehouse.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	unit := s.Cohort.Unit
	q := fmt.Sprintf(`select count(*), count(*) filter (where abs(st.logit_ps - sc.logit_ps) > ?)
from main.%[1]smatches mt join main.%[1]smatches mc
  on mt.run_id = mc.run_id and mt.set_id = mc.set_id and mt.treated and not mc.treated
join main.%[1]sscores st on st.run_id = mt.run_id and st.%[2]s = mt.%[2]s
join main.%[1]sscores sc on sc.run_id = mc.run_id and sc.%[2]s = mc.%[2]s
where mt.run_id = ?`, s.Output.Prefix, unit)
	var pairs, outside int
	if err := db.QueryRow(q, width*(1+1e-9), runID).Scan(&pairs, &outside); err != nil {
		t.Fatal(err)
	}
	if pairs == 0 {
		t.Fatal("no matched pairs in the warehouse")
	}
	return outside
}

// TestMahalanobisKeepPrior: with keep_prior on an unchanged cohort every
// set is kept, and the kept sets are re-measured in the Mahalanobis metric
// (covariance over the same support), so the second run's matches rows,
// match_distance included, equal the first run's (a logit distance in the
// kept rows would differ).
func TestMahalanobisKeepPrior(t *testing.T) {
	dir := t.TempDir()
	s, first, _, err := runDemo(t, dir, 2000, func(s *Spec) {
		s.Matching.Distance = "mahalanobis"
		s.Matching.DistanceOn = []string{"age", "region", "prior_admits", "charlson", "lives_alone", "ef_reduced"}
		s.Matching.KeepPrior = true
	})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	wh, err := Open(ctx, s, false)
	if err != nil {
		t.Fatal(err)
	}
	second, err := Run(ctx, s, wh, Options{ToolVersion: "test"})
	wh.Close()
	if err != nil {
		t.Fatal(err)
	}
	if second.Status != warehouse.StatusSucceeded || second.Matching.Churn == nil {
		t.Fatalf("second run: status %s, churn %+v", second.Status, second.Matching.Churn)
	}
	if ch := second.Matching.Churn; ch.Kept != first.Matching.Sets || ch.New != 0 || ch.Released != 0 {
		t.Fatalf("churn %+v, want all %d sets kept", ch, first.Matching.Sets)
	}
	db, err := sql.Open("duckdb", filepath.Join(dir, "warehouse.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	a := dumpRun(t, db, s.Output.Prefix+"matches", first.RunID)
	b := dumpRun(t, db, s.Output.Prefix+"matches", second.RunID)
	if len(a) == 0 || strings.Join(a, "\n") != strings.Join(b, "\n") {
		t.Errorf("matches rows differ between the first run and the kept rerun (%d vs %d rows)", len(a), len(b))
	}
}
