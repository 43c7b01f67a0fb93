package study

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/match/demo"
	"counterpart/warehouse"
)

// runDemo writes a demo warehouse of n members and runs its study.
func runDemo(t *testing.T, dir string, n int, edit func(*Spec)) (*Spec, *Summary, *demo.Data, error) {
	t.Helper()
	ctx := context.Background()
	path, data, err := demo.Write(ctx, dir, n, 3)
	if err != nil {
		t.Fatal(err)
	}
	s, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		edit(s)
	}
	wh, err := Open(ctx, s, false)
	if err != nil {
		t.Fatal(err)
	}
	defer wh.Close()
	sum, err := Run(ctx, s, wh, Options{ToolVersion: "test"})
	return s, sum, data, err
}

// TestDemoRecoversPlantedEffect: the generator plants the effect among the
// coached (synthetic truth, our own scenario); the headline interval must
// cover it while the naive difference is biased away from it.
func TestDemoRecoversPlantedEffect(t *testing.T) {
	_, sum, data, err := runDemo(t, t.TempDir(), 8000, nil)
	if err != nil {
		t.Fatal(err)
	}
	if sum.Status != warehouse.StatusSucceeded {
		t.Fatalf("status %s: %s", sum.Status, sum.Message)
	}
	for _, e := range sum.Effects {
		if e.Contrast != "difference" {
			continue // the planted truth is on the difference scale
		}
		truth, ok := data.TrueATT[e.Outcome]
		if !ok {
			t.Fatalf("no truth for %s", e.Outcome)
		}
		switch e.Adjustment {
		case "matched", "att":
			if float64(e.CILow) > truth || float64(e.CIHigh) < truth {
				t.Errorf("%s %s: CI [%g, %g] misses planted %g", e.Outcome, e.Adjustment, e.CILow, e.CIHigh, truth)
			}
		case "unadjusted":
			if float64(e.CILow) <= truth && truth <= float64(e.CIHigh) {
				t.Errorf("%s naive CI [%g, %g] covers the planted %g: the demo no longer shows confounding", e.Outcome, e.CILow, e.CIHigh, truth)
			}
		}
	}
}

// TestOverlapWeightsBalanceExactly: with a logistic MLE score (intercept
// included), overlap-weighted means of every model covariate are equal
// between arms (Li, Morgan & Zaslavsky 2018, JASA 113:390), so every SMD
// of a model term is zero to rounding. Categorical reference levels are
// balanced too, because their indicator is one minus the others.
func TestOverlapWeightsBalanceExactly(t *testing.T) {
	_, sum, _, err := runDemo(t, t.TempDir(), 3000, func(s *Spec) {
		// The theorem is about the fitted sample: no trimming.
		s.Support = "none"
		s.Matching.Algorithm = "off"
		s.Estimate.Estimand = "ato"
	})
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, ab := range sum.Balance {
		if ab.Adjustment != "overlap" {
			continue
		}
		found = true
		for _, st := range ab.Stats {
			if math.Abs(float64(st.SMD)) > 1e-8 {
				t.Errorf("overlap SMD of %s %s = %g, want 0 to 1e-8", st.Name, st.Level, st.SMD)
			}
		}
	}
	if !found {
		t.Fatal("no overlap adjustment in the summary")
	}
}

// TestSeededRerunsIdentical: two runs of one study on one cohort write the
// same rows in every table, apart from run_id and timestamps (common
// practice for reproducible pipelines).
func TestSeededRerunsIdentical(t *testing.T) {
	dir := t.TempDir()
	s, first, _, err := runDemo(t, dir, 2000, func(s *Spec) { s.Matching.Order = "random" })
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
	db, err := sql.Open("duckdb", filepath.Join(dir, "warehouse.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	for _, table := range []string{"cohort", "scores", "matches", "weights"} {
		a := dumpRun(t, db, s.Output.Prefix+table, first.RunID)
		b := dumpRun(t, db, s.Output.Prefix+table, second.RunID)
		if len(a) == 0 {
			t.Fatalf("%s: no rows for the first run", table)
		}
		if strings.Join(a, "\n") != strings.Join(b, "\n") {
			t.Errorf("%s: rows differ between seeded reruns", table)
		}
	}
	var r1, r2 string
	q := fmt.Sprintf(`select concat_ws('|', counts, model, balance, effects, cohort_fingerprint, spec_sha256) from main.%s where run_id = ?`, s.Output.Prefix+"runs")
	if err := db.QueryRow(q, first.RunID).Scan(&r1); err != nil {
		t.Fatal(err)
	}
	if err := db.QueryRow(q, second.RunID).Scan(&r2); err != nil {
		t.Fatal(err)
	}
	if r1 != r2 {
		t.Errorf("runs rows differ beyond run_id and timestamps:\n%s\n%s", r1, r2)
	}
}

// dumpRun returns a table's rows for one run, without run_id, as sorted text.
func dumpRun(t *testing.T, db *sql.DB, table, runID string) []string {
	t.Helper()
	rows, err := db.Query(fmt.Sprintf(`select * exclude (run_id) from main.%s where run_id = ?`, table), runID)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	cols, _ := rows.Columns()
	var out []string
	vals := make([]any, len(cols))
	ptrs := make([]any, len(cols))
	for i := range vals {
		ptrs[i] = &vals[i]
	}
	for rows.Next() {
		if err := rows.Scan(ptrs...); err != nil {
			t.Fatal(err)
		}
		out = append(out, fmt.Sprint(vals...))
	}
	sort.Strings(out)
	return out
}

// TestRejectedRunLeavesCurrentViews: a gate failure records the run as
// rejected, exits through ErrRejected and the current views keep showing
// the previous succeeded run.
func TestRejectedRunLeavesCurrentViews(t *testing.T) {
	dir := t.TempDir()
	s, first, _, err := runDemo(t, dir, 2000, nil)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	s.Balance.SMDLimit = 1e-9 // impossible for matching
	wh, err := Open(ctx, s, false)
	if err != nil {
		t.Fatal(err)
	}
	sum, err := Run(ctx, s, wh, Options{})
	wh.Close()
	if err == nil || !strings.Contains(err.Error(), "balance") {
		t.Fatalf("want a rejection, got %v", err)
	}
	if sum.Status != warehouse.StatusRejected {
		t.Fatalf("status %s", sum.Status)
	}
	db, err := sql.Open("duckdb", filepath.Join(dir, "warehouse.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var ids []string
	rows, err := db.Query(fmt.Sprintf(`select distinct run_id from main.%scurrent_scores`, s.Output.Prefix))
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var id string
		rows.Scan(&id)
		ids = append(ids, id)
	}
	rows.Close()
	if len(ids) != 1 || ids[0] != first.RunID {
		t.Errorf("current_scores shows runs %v, want only %s", ids, first.RunID)
	}
	var status string
	if err := db.QueryRow(fmt.Sprintf(`select status from main.%sruns where run_id = ?`, s.Output.Prefix), sum.RunID).Scan(&status); err != nil {
		t.Fatal(err)
	}
	if status != warehouse.StatusRejected {
		t.Errorf("runs row status %q, want rejected", status)
	}
}

// TestBalanceViewEqualsGo: the {prefix}balance view computes in SQL what
// the run computed in Go, with the same definitions (Austin 2009; Austin &
// Stuart 2015: fixed unadjusted denominator). Every mean, SD, SMD and
// variance ratio must agree to 1e-9 (relative, or absolute near zero).
func TestBalanceViewEqualsGo(t *testing.T) {
	dir := t.TempDir()
	s, sum, _, err := runDemo(t, dir, 3000, func(s *Spec) { s.Weighting = []string{"att", "ate", "overlap", "matching"} })
	if err != nil {
		t.Fatal(err)
	}
	db, err := sql.Open("duckdb", filepath.Join(dir, "warehouse.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	type key struct{ adj, cov, level string }
	goStats := map[key]Stat{}
	for _, ab := range sum.Balance {
		for _, st := range ab.Stats {
			goStats[key{ab.Adjustment, st.Name, st.Level}] = st
		}
	}
	rows, err := db.Query(fmt.Sprintf(`select adjustment, covariate, coalesce(level, ''), mean_treated, mean_control,
		sd_treated, sd_control, smd, variance_ratio from main.%sbalance where run_id = ?`, s.Output.Prefix), sum.RunID)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	close := func(a float64, b Num) bool {
		bf := float64(b)
		if math.IsNaN(a) || math.IsNaN(bf) {
			return math.IsNaN(a) == math.IsNaN(bf)
		}
		return math.Abs(a-bf) <= 1e-9*math.Max(1, math.Abs(bf))
	}
	n := 0
	for rows.Next() {
		var k key
		var v [6]sql.NullFloat64
		if err := rows.Scan(&k.adj, &k.cov, &k.level, &v[0], &v[1], &v[2], &v[3], &v[4], &v[5]); err != nil {
			t.Fatal(err)
		}
		g, ok := goStats[k]
		if !ok {
			t.Errorf("view row %v has no Go counterpart", k)
			continue
		}
		want := []Num{g.MeanT, g.MeanC, g.SDT, g.SDC, g.SMD, g.VarRatio}
		for j := range v {
			got := math.NaN()
			if v[j].Valid {
				got = v[j].Float64
			}
			if !close(got, want[j]) {
				t.Errorf("%v column %d: view %v, Go %v", k, j, got, want[j])
			}
		}
		n++
	}
	if n != len(goStats) {
		t.Errorf("view has %d rows, Go %d", n, len(goStats))
	}
}
