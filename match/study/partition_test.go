package study

import (
	"fmt"
	"math"
	"testing"

	"counterpart/warehouse/postgres/pgtest"
)

// TestPartitionColumnChangesNothing runs a study in warehouse-scale mode
// on Postgres without and with cohort.partition_column (the passes then
// sum per region first and add the partial sums, and the balance and
// effect sums read the cohort query rather than the snapshot): the two
// agree to 1e-8 (their sums round each row differently: integer parts,
// the information in one part of 2^-31, against 15-digit decimals), and
// a per-partition run over the same rows stored in another
// order agrees to the bit: coefficients, SEs, balance and every effect
// row, since every sum is exact (a float SUM's last bits follow the
// order and the grouping). Common practice: compare two groupings and
// two orders of one exact computation.
func TestPartitionColumnChangesNothing(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	pgtest.Exec(t, dsn, pgSourceSQL)
	pgtest.Exec(t, dsn, "CREATE TABLE wm_shuf AS SELECT * FROM wm_src ORDER BY md5(unit_id::text)")
	runs := map[string]*Summary{}
	for _, v := range []struct{ name, part, table string }{
		{"plain", "", "wm_src"}, {"region", "region", "wm_src"}, {"shuffled", "region", "wm_shuf"},
	} {
		part := v.part
		text := fmt.Sprintf(`study: part_%s
warehouse: {engine: postgres, dsn: "%s"}
cohort:
  sql: select * from %s
  unit: unit_id
  treatment: treated
  partition_column: %s
  outcomes: [y_cont, y_bin]
  covariates: [x1, x2, x3, region]
  rates: [{name: rate, count: n_ev, exposure: expo}]
score: {fit_in: warehouse}
support: minmax
matching: {algorithm: greedy, caliper: 0.2}
weighting: [att, ate, overlap]
balance: {on_fail: warn}
`, v.name, dsn, v.table, part)
		runs[v.name] = runPostgresStudy(t, v.name, text, func(s *Spec) {
			if s.Cohort.PartitionColumn != part {
				t.Fatalf("partition column parsed as %q, want %q", s.Cohort.PartitionColumn, part)
			}
		})
	}
	compareRuns(t, "per partition vs plain", runs["plain"], runs["region"], func(x, y Num) bool { return relDiff(float64(x), float64(y)) <= 1e-8 })
	compareRuns(t, "per partition, shuffled table", runs["region"], runs["shuffled"], func(x, y Num) bool { return math.Float64bits(float64(x)) == math.Float64bits(float64(y)) })
}

// compareRuns checks two runs' model terms, effects and balance with same.
func compareRuns(t *testing.T, what string, a, b *Summary, same func(x, y Num) bool) {
	t.Helper()
	if len(a.Model.Terms) == 0 || len(a.Model.Terms) != len(b.Model.Terms) {
		t.Fatalf("%d and %d model terms", len(a.Model.Terms), len(b.Model.Terms))
	}
	for j, ta := range a.Model.Terms {
		if tb := b.Model.Terms[j]; !same(ta.Coef, tb.Coef) || !same(ta.SE, tb.SE) {
			t.Errorf("%s: term %s: %v±%v plain, %v±%v per partition", what, ta.Name, ta.Coef, ta.SE, tb.Coef, tb.SE)
		}
	}
	if len(a.Effects) == 0 || len(a.Effects) != len(b.Effects) {
		t.Fatalf("%d and %d effect rows", len(a.Effects), len(b.Effects))
	}
	for i, ea := range a.Effects {
		eb := b.Effects[i]
		if !same(ea.Estimate, eb.Estimate) || !same(ea.SE, eb.SE) {
			t.Errorf("%s: effect %s %s %s: %v±%v plain, %v±%v per partition", what, ea.Outcome, ea.Adjustment, ea.Contrast, ea.Estimate, ea.SE, eb.Estimate, eb.SE)
		}
	}
	for i, ba := range a.Balance {
		bb := b.Balance[i]
		if !same(ba.WorstSMD, bb.WorstSMD) || !same(ba.ESSControl, bb.ESSControl) {
			t.Errorf("%s: balance %s: worst SMD %v, ESS %v plain; %v, %v per partition", what, ba.Adjustment, ba.WorstSMD, ba.ESSControl, bb.WorstSMD, bb.ESSControl)
		}
	}
}

// TestWideDesignPostgres fits a 45-column design in warehouse-scale mode
// on Postgres: the information pass then has 1,081 sums, which as integer
// parts would be 2,162 aggregates, past Postgres's limit of 1,664 result
// columns ("number of columns exceeds limit"); as NUMERICs it is one per
// sum. The coefficients must equal the in-memory fit's (1e-8, relative).
func TestWideDesignPostgres(t *testing.T) {
	const p = 45
	dsn := pgtest.NewDatabase(t)
	cols, names := "", ""
	for j := 1; j <= p; j++ {
		cols += fmt.Sprintf(", sin(i * %d.37) + 0.1 * cos(i * %d) AS x%d", j, j+3, j)
		names += fmt.Sprintf(", x%d", j)
	}
	pgtest.Exec(t, dsn, "CREATE TABLE wide AS SELECT i AS unit_id, (sin(i * 0.91) + 0.3 * cos(i * 1.7) > 0.2) AS treated, cos(i * 0.5) AS y"+cols+" FROM generate_series(1, 2000) AS g(i)")
	runs := map[string]*Summary{}
	for _, mode := range []string{"memory", "warehouse"} {
		text := fmt.Sprintf(`study: wide_%s
warehouse: {engine: postgres, dsn: "%s"}
cohort:
  sql: select * from wide
  unit: unit_id
  treatment: treated
  outcomes: [y]
  covariates: [%s]
score: {fit_in: %s}
matching: {algorithm: off}
weighting: [ate]
balance: {on_fail: warn}
`, mode, dsn, names[2:], mode)
		runs[mode] = runPostgresStudy(t, mode, text, nil)
	}
	mem, wh := runs["memory"], runs["warehouse"]
	if len(mem.Model.Terms) != p+1 || len(wh.Model.Terms) != p+1 {
		t.Fatalf("%d and %d terms, want %d", len(mem.Model.Terms), len(wh.Model.Terms), p+1)
	}
	for j, tm := range mem.Model.Terms {
		if tw := wh.Model.Terms[j]; relDiff(float64(tm.Coef), float64(tw.Coef)) > 1e-8 {
			t.Errorf("term %s: memory %v, warehouse %v", tm.Name, tm.Coef, tw.Coef)
		}
	}
}
