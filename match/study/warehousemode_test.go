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

	"counterpart/warehouse/duckdb"
	"counterpart/warehouse/warehousetest"
)

// TestWarehouseModeMatchesMemory runs the benchmark study (BenchCohortSQL,
// 3,000 units) in memory and in the warehouse on DuckDB and compares:
// coefficients (1e-8 relative), matched sets (identical), weights (1e-10),
// every balance statistic and every effect row (1e-9). The in-memory path
// is the reference: match/score's fit, match/effect's estimators (checked
// elsewhere against statsmodels and R sandwich); this test checks that
// the sums-only formulas of inWarehouseEffect, the run sums and the SQL
// weights are exact rearrangements of them (common practice: compare two
// implementations). Variants of the study cover each shape of the run
// sums query: matched and weighted, weighted only, matched only.
func TestWarehouseModeMatchesMemory(t *testing.T) {
	for _, tc := range []struct {
		name    string
		edit    []string // old, new pairs applied to warehousetest.BenchStudy
		schemes []string
	}{
		{"greedy and three weightings", nil, []string{"att", "ate", "overlap"}},
		{"weighting only, crump support", []string{
			"algorithm: greedy", "algorithm: off",
			"weighting: [att, ate, overlap]", "weighting: [overlap, matching]\nestimate:\n  estimand: ato",
			"support: minmax", "support: crump"}, []string{"overlap", "matching"}},
		{"optimal 1:2 within regions, no weighting", []string{
			"algorithm: greedy", "algorithm: optimal\n  controls: 2\n  exact_on: [c1]",
			"weighting: [att, ate, overlap]", "weighting: []"}, nil},
		{"time-to-event and rate outcomes", []string{
			"select * from synth.cohort order by unit_id", "select * from synth.cohort_ev order by unit_id",
			"  outcomes: [y_bin, y_cont]\n", "  outcomes: [y_bin, y_cont]\n" +
				"  time_to_event: [{name: event, time: fu, event: ev, horizons: [180, 365]}]\n" +
				"  rates: [{name: rate, count: n_ev, exposure: expo}]\n"}, []string{"att", "ate", "overlap"}},
	} {
		t.Run(tc.name, func(t *testing.T) { compareModes(t, tc.edit, tc.schemes) })
	}
}

func compareModes(t *testing.T, edit, schemes []string) {
	ctx := context.Background()
	dsn := filepath.Join(t.TempDir(), "wm.duckdb")
	db, err := sql.Open("duckdb", dsn)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec(warehousetest.BenchCohortSQL(3000) + benchEventsSQL); err != nil {
		t.Fatal(err)
	}
	db.Close()
	runs := map[string]*Summary{}
	for _, mode := range []string{"memory", "warehouse"} {
		text := fmt.Sprintf(warehousetest.BenchStudy, dsn)
		text = mustReplace(t, text, "select * from synth.cohort", "select * from synth.cohort order by unit_id")
		text = mustReplace(t, text, "bench_run_", "m_"+mode+"_")
		for i := 0; i+1 < len(edit); i += 2 {
			text = mustReplace(t, text, edit[i], edit[i+1])
		}
		text = mustReplace(t, text, "\nmatching:", "\nscore:\n  fit_in: "+mode+"\nmatching:")
		s, err := Parse("bench.yaml", []byte(text), nil)
		if err != nil {
			t.Fatal(err)
		}
		// The comparison means nothing unless the second run really is
		// warehouse-scale (which records no cohort fingerprint).
		if s.Score.FitIn != mode {
			t.Fatalf("study parsed with fit_in %q, want %q", s.Score.FitIn, mode)
		}
		wh, err := duckdb.Open(ctx, dsn)
		if err != nil {
			t.Fatal(err)
		}
		sum, err := Run(ctx, s, wh, Options{})
		wh.Close()
		if err != nil {
			t.Fatalf("%s: %v", mode, err)
		}
		if (sum.Fingerprint == "") != (mode == "warehouse") {
			t.Fatalf("%s run: cohort fingerprint %q; the run did not take the %s path", mode, sum.Fingerprint, mode)
		}
		runs[mode] = sum
	}
	mem, wh := runs["memory"], runs["warehouse"]
	for j, tm := range mem.Model.Terms {
		tw := wh.Model.Terms[j]
		if tm.Name != tw.Name || relDiff(float64(tm.Coef), float64(tw.Coef)) > 1e-8 || relDiff(float64(tm.SE), float64(tw.SE)) > 1e-8 {
			t.Errorf("term %d: memory %+v, warehouse %+v", j, tm, tw)
		}
	}
	if len(mem.Effects) != len(wh.Effects) {
		t.Fatalf("%d effect rows in memory, %d in the warehouse", len(mem.Effects), len(wh.Effects))
	}
	for i, em := range mem.Effects {
		ew := wh.Effects[i]
		if em.Outcome != ew.Outcome || em.Adjustment != ew.Adjustment || em.Contrast != ew.Contrast || em.Method != ew.Method ||
			em.NTreated != ew.NTreated || em.NControl != ew.NControl || em.NMissing != ew.NMissing {
			t.Errorf("effect row %d: memory %+v, warehouse %+v", i, em, ew)
			continue
		}
		for _, p := range [][2]Num{{em.Estimate, ew.Estimate}, {em.SE, ew.SE}, {em.CILow, ew.CILow}, {em.CIHigh, ew.CIHigh}, {em.EValue, ew.EValue}} {
			if relDiff(float64(p[0]), float64(p[1])) > 1e-9 {
				t.Errorf("effect %s %s %s: memory %v, warehouse %v", em.Outcome, em.Adjustment, em.Contrast, p[0], p[1])
			}
		}
	}
	for i, bm := range mem.Balance {
		bw := wh.Balance[i]
		if bm.Adjustment != bw.Adjustment || bm.Pass != bw.Pass || !closeStat(float64(bm.WorstSMD), float64(bw.WorstSMD)) ||
			relDiff(float64(bm.ESSTreated), float64(bw.ESSTreated)) > 1e-9 || relDiff(float64(bm.ESSControl), float64(bw.ESSControl)) > 1e-9 {
			t.Errorf("balance %d: memory %s %v %v ESS %v/%v, warehouse %s %v %v ESS %v/%v", i, bm.Adjustment, bm.Pass, bm.WorstSMD, bm.ESSTreated, bm.ESSControl,
				bw.Adjustment, bw.Pass, bw.WorstSMD, bw.ESSTreated, bw.ESSControl)
		}
		// Every statistic, not only the worst SMD: the warehouse path
		// computes them with its own aggregate queries.
		if len(bm.Stats) != len(bw.Stats) {
			t.Errorf("balance %s: %d stats in memory, %d in the warehouse", bm.Adjustment, len(bm.Stats), len(bw.Stats))
			continue
		}
		for j, sm := range bm.Stats {
			sw := bw.Stats[j]
			for _, p := range [][2]Num{{sm.MeanT, sw.MeanT}, {sm.MeanC, sw.MeanC}, {sm.SDT, sw.SDT}, {sm.SDC, sw.SDC}, {sm.SMD, sw.SMD}, {sm.VarRatio, sw.VarRatio}} {
				a, b := float64(p[0]), float64(p[1])
				if sm.Name != sw.Name || sm.Level != sw.Level || !closeStat(a, b) {
					t.Errorf("balance %s %s %s: memory %+v, warehouse %+v", bm.Adjustment, sm.Name, sm.Level, sm, sw)
					break
				}
			}
		}
	}

	db, err = sql.Open("duckdb", dsn)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	sets := func(prefix string) []string {
		rows, err := db.Query(`SELECT string_agg(CAST(unit_id AS VARCHAR), ',' ORDER BY treated DESC, unit_id) FROM ` + prefix + `matches GROUP BY set_id`)
		if err != nil {
			t.Fatal(err)
		}
		defer rows.Close()
		var out []string
		for rows.Next() {
			var s string
			if err := rows.Scan(&s); err != nil {
				t.Fatal(err)
			}
			out = append(out, s)
		}
		sort.Strings(out)
		return out
	}
	sm, sw := sets("m_memory_"), sets("m_warehouse_")
	matchingOff := strings.Contains(strings.Join(edit, "\n"), "algorithm: off")
	if (len(sm) == 0) != matchingOff || strings.Join(sm, ";") != strings.Join(sw, ";") {
		t.Errorf("matched sets differ: %d in memory, %d in the warehouse", len(sm), len(sw))
	}
	if len(schemes) > 0 {
		var diffs []string
		for _, sc := range schemes {
			diffs = append(diffs, fmt.Sprintf("abs(a.%s - b.%s) / greatest(abs(a.%s), 1)", sc, sc, sc))
		}
		q := "SELECT count(*), max(greatest(" + strings.Join(append(diffs, "0"), ", ") + ")) FROM m_memory_weights a JOIN m_warehouse_weights b USING (unit_id)"
		var worst float64
		var n int
		if err := db.QueryRow(q).Scan(&n, &worst); err != nil {
			t.Fatal(err)
		}
		if n != 3000 || worst > 1e-10 {
			t.Errorf("weights: %d units joined, worst relative difference %g", n, worst)
		}
	}
	var cohortDiff int
	if err := db.QueryRow(`SELECT count(*) FROM (SELECT * EXCLUDE (run_id) FROM m_memory_cohort EXCEPT SELECT * EXCLUDE (run_id) FROM m_warehouse_cohort)`).Scan(&cohortDiff); err != nil {
		t.Fatal(err)
	}
	if cohortDiff != 0 {
		t.Errorf("cohort snapshots differ in %d rows", cohortDiff)
	}
}

// closeStat compares a balance statistic of the two paths: both NaN, or
// within 1e-9 relative plus 1e-13 absolute — statistics that are 0 in
// exact arithmetic (the SMD of a level matched exactly) come out of
// either path as rounding noise of order 1e-16.
func closeStat(a, b float64) bool {
	if math.IsNaN(a) || math.IsNaN(b) {
		return math.IsNaN(a) && math.IsNaN(b)
	}
	return math.Abs(a-b) <= 1e-9*math.Max(math.Abs(a), math.Abs(b))+1e-13
}

func relDiff(a, b float64) float64 {
	if math.IsNaN(a) && math.IsNaN(b) {
		return 0
	}
	return math.Abs(a-b) / math.Max(math.Abs(a), 1e-300)
}

// mustReplace replaces the first old in text, failing the test when the
// benchmark study no longer holds it (the template drifted).
func mustReplace(t *testing.T, text, old, new string) string {
	t.Helper()
	if !strings.Contains(text, old) {
		t.Fatalf("the benchmark study no longer contains %q; update the test's edits", old)
	}
	return strings.Replace(text, old, new, 1)
}
