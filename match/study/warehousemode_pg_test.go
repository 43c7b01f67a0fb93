package study

import (
	"context"
	"fmt"
	"sort"
	"strings"
	"testing"

	"counterpart/warehouse/postgres"
	"counterpart/warehouse/postgres/pgtest"
)

// pgSourceSQL builds a deterministic synthetic cohort on Postgres (the
// same rows on every run; synthetic numbers only): treatment depends on x1
// and region, so the model has work to do.
const pgSourceSQL = `CREATE TABLE wm_src AS
SELECT i AS unit_id,
       (sin(i * 1.3) + 0.4 * cos(i * 0.11) > 0.35) AS treated,
       10 * sin(i * 1.3) AS x1,
       5 * cos(i * 0.7) AS x2,
       3 * sin(i * 0.37) + cos(i * 2.1) AS x3,
       CASE i % 4 WHEN 0 THEN 'north' WHEN 1 THEN 'south' WHEN 2 THEN 'east' ELSE 'west' END AS region,
       2 * sin(i * 1.3) + cos(i * 0.3) AS y_cont,
       CASE WHEN cos(i * 0.9) > 0.3 THEN 1 ELSE 0 END AS y_bin,
       1 + (i * 37) % 300 + CASE WHEN sin(i * 1.3) > 0.2 THEN 40 ELSE 0 END AS fu,
       cos(i * 0.57) > -0.2 AS ev,
       (i * 7) % 5 AS n_ev,
       1 + i % 12 AS expo
FROM generate_series(1, 3000) AS g(i)`

// TestWarehouseModeMatchesMemoryPostgres is TestWarehouseModeMatchesMemory
// on Postgres: the same study in memory and in the warehouse gives the same
// coefficients (1e-8 relative), identical matched sets, the same weights
// (1e-10) and the same effect rows (1e-9) — two implementations of the same
// formulas compared (common practice).
func TestWarehouseModeMatchesMemoryPostgres(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	pgtest.Exec(t, dsn, pgSourceSQL)
	runs := map[string]*Summary{}
	for _, mode := range []string{"memory", "warehouse"} {
		text := fmt.Sprintf(`study: pg_%s
warehouse: {engine: postgres, dsn: "%s"}
cohort:
  sql: select * from wm_src order by unit_id
  unit: unit_id
  treatment: treated
  outcomes: [y_cont, y_bin]
  covariates: [x1, x2, x3, region]
  time_to_event: [{name: event, time: fu, event: ev, horizons: [100, 250]}]
  rates: [{name: rate, count: n_ev, exposure: expo}]
score: {fit_in: %s}
support: minmax
matching: {algorithm: greedy, caliper: 0.2}
weighting: [att, ate, overlap]
balance: {on_fail: warn}
`, mode, dsn, mode)
		runs[mode] = runPostgresStudy(t, mode, text, nil)
	}
	mem, wh := runs["memory"], runs["warehouse"]
	for j, tm := range mem.Model.Terms {
		tw := wh.Model.Terms[j]
		if tm.Name != tw.Name || relDiff(float64(tm.Coef), float64(tw.Coef)) > 1e-8 || relDiff(float64(tm.SE), float64(tw.SE)) > 1e-8 {
			t.Errorf("term %d: memory %+v, warehouse %+v", j, tm, tw)
		}
	}
	if len(mem.Effects) != len(wh.Effects) || len(mem.Effects) == 0 {
		t.Fatalf("%d effect rows in memory, %d in the warehouse", len(mem.Effects), len(wh.Effects))
	}
	for i, em := range mem.Effects {
		ew := wh.Effects[i]
		for _, p := range [][2]Num{{em.Estimate, ew.Estimate}, {em.SE, ew.SE}, {em.CILow, ew.CILow}, {em.CIHigh, ew.CIHigh}} {
			if em.Outcome != ew.Outcome || em.Adjustment != ew.Adjustment || em.Contrast != ew.Contrast || relDiff(float64(p[0]), float64(p[1])) > 1e-9 {
				t.Errorf("effect %s %s %s: memory %v, warehouse %v", em.Outcome, em.Adjustment, em.Contrast, p[0], p[1])
				break
			}
		}
	}
	sets := func(study string) string {
		var out []string
		for _, r := range pgtest.Query(t, dsn, fmt.Sprintf(`SELECT string_agg(CAST(unit_id AS TEXT), ',' ORDER BY treated DESC, unit_id)
			FROM %s_matches GROUP BY set_id`, study)) {
			out = append(out, fmt.Sprint(r[0]))
		}
		sort.Strings(out)
		return strings.Join(out, ";")
	}
	if sm, sw := sets("pg_memory"), sets("pg_warehouse"); sm == "" || sm != sw {
		t.Errorf("matched sets differ between modes")
	}
	got := pgtest.Query(t, dsn, `SELECT count(*), max(greatest(abs(a.att - b.att), abs(a.ate - b.ate), abs(a.overlap - b.overlap)) / greatest(abs(a.ate), 1))
		FROM pg_memory_weights a JOIN pg_warehouse_weights b USING (unit_id)`)
	if n, worst := fmt.Sprint(got[0][0]), got[0][1]; n != "3000" || worst == nil || worst.(float64) > 1e-10 {
		t.Errorf("weights: %s units joined, worst relative difference %v", n, worst)
	}
}

// runPostgresStudy parses a study file's text, runs it on its Postgres
// warehouse and returns the summary; check, when set, sees the parsed
// spec first. label names the run in a failure.
func runPostgresStudy(t *testing.T, label, text string, check func(*Spec)) *Summary {
	t.Helper()
	s, err := Parse(label+".yaml", []byte(text), nil)
	if err != nil {
		t.Fatal(err)
	}
	if check != nil {
		check(s)
	}
	ctx := context.Background()
	wh, err := postgres.Open(ctx, s.Warehouse.DSN)
	if err != nil {
		t.Fatal(err)
	}
	defer wh.Close()
	sum, err := Run(ctx, s, wh, Options{})
	if err != nil {
		t.Fatalf("%s: %v", label, err)
	}
	return sum
}
