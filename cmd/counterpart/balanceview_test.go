package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"testing"

	"counterpart/match/study"
	"counterpart/warehouse/postgres/pgtest"
)

// TestPostgresBalanceViewEqualsGo: on Postgres, the {prefix}balance view
// (SQL) gives the same means, SDs, SMDs and variance ratios as the run's Go
// computation, to 1e-9 — the same definitions (Austin 2009; Austin &
// Stuart 2015: fixed unadjusted denominator) on both sides. The DuckDB
// counterpart is study.TestBalanceViewEqualsGo.
func TestPostgresBalanceViewEqualsGo(t *testing.T) {
	db := pgtest.NewDatabase(t)
	pgtest.Exec(t, db, synthSQL(pgSeries(2500)))
	spec := writeStudy(t, studyText("pgbal", "postgres", db))
	var stdout, stderr bytes.Buffer
	if code := run(context.Background(), []string{"counterpart", "run", "--json", spec}, &stdout, &stderr); code != exitOK {
		t.Fatalf("exit %d: %s", code, stderr.String())
	}
	var sum study.Summary
	if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil {
		t.Fatal(err)
	}
	type key struct{ adj, cov, level string }
	goStats := map[key]study.Stat{}
	for _, ab := range sum.Balance {
		for _, st := range ab.Stats {
			goStats[key{ab.Adjustment, st.Name, st.Level}] = st
		}
	}
	rows := pgtest.Query(t, db, fmt.Sprintf(`select adjustment, covariate, coalesce(level, ''), mean_treated, mean_control,
		sd_treated, sd_control, smd, variance_ratio from pgbal_balance where run_id = '%s'`, sum.RunID))
	if len(rows) != len(goStats) || len(rows) == 0 {
		t.Fatalf("view has %d rows, Go %d", len(rows), len(goStats))
	}
	for _, r := range rows {
		k := key{fmt.Sprint(r[0]), fmt.Sprint(r[1]), fmt.Sprint(r[2])}
		g, ok := goStats[k]
		if !ok {
			t.Errorf("view row %v has no Go counterpart", k)
			continue
		}
		want := []study.Num{g.MeanT, g.MeanC, g.SDT, g.SDC, g.SMD, g.VarRatio}
		for j, v := range r[3:] {
			got := math.NaN()
			if v != nil {
				got = num(v)
			}
			w := float64(want[j])
			if math.IsNaN(got) != math.IsNaN(w) || (!math.IsNaN(w) && math.Abs(got-w) > 1e-9*math.Max(1, math.Abs(w))) {
				t.Errorf("%v column %d: view %v, Go %v", k, j, got, w)
			}
		}
	}
}
