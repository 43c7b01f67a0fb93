package study

import (
	"context"
	"database/sql"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"counterpart/warehouse/warehousetest"
)

// benchUnits is the whole-run benchmark's size: 1,000,000 by default (the
// foundation issue's workload), COUNTERPART_BENCH_UNITS to change it.
func benchUnits() int {
	if v, err := strconv.Atoi(os.Getenv("COUNTERPART_BENCH_UNITS")); err == nil && v > 0 {
		return v
	}
	return 1_000_000
}

// BenchmarkWholeRun runs the whole study (read, fit, support, match,
// weights, balance, estimate, publish) on the synthetic benchmark cohort in
// DuckDB and reports seconds per stage. testdata/bench/whole_run.sh runs
// the same workload as a process to measure peak RSS and the read floor.
func BenchmarkWholeRun(b *testing.B) { benchWholeRun(b, "", nil) }

// benchEventsSQL adds to the benchmark cohort a censored time to event and
// an event count over exposure, from hashes of the unit id (deterministic
// uniforms), with hazards that depend on x01 and treatment: synthetic
// numbers only.
const benchEventsSQL = `
CREATE OR REPLACE VIEW synth.cohort_ev AS
SELECT *,
       least(365, ceil(-ln((hash(unit_id * 31) % 1000003 + 1) / 1000004.0) / (0.003 * exp(0.2 * x01 - 0.3 * treated::INT)))) AS fu,
       (-ln((hash(unit_id * 31) % 1000003 + 1) / 1000004.0) / (0.003 * exp(0.2 * x01 - 0.3 * treated::INT)) <= 365)::INT AS ev,
       floor(3 * (hash(unit_id * 17) % 1000003) / 1000003.0 * exp(0.1 * x01))::INT AS n_ev,
       1 + hash(unit_id * 13) % 12 AS expo
FROM synth.cohort;
`

// BenchmarkWholeRunEvents is BenchmarkWholeRun with one time-to-event
// outcome (two horizons) and one rate outcome added: the difference of the
// two is what these estimators cost a run (issue target ≤ 1.5×).
func BenchmarkWholeRunEvents(b *testing.B) {
	benchWholeRun(b, benchEventsSQL, func(study string) string {
		study = strings.Replace(study, "sql: select * from synth.cohort", "sql: select * from synth.cohort_ev", 1)
		return strings.Replace(study, "  outcomes: [y_bin, y_cont]\n", "  outcomes: [y_bin, y_cont]\n"+
			"  time_to_event: [{name: event, time: fu, event: ev, horizons: [180, 365]}]\n"+
			"  rates: [{name: rate, count: n_ev, exposure: expo}]\n", 1)
	})
}

func benchWholeRun(b *testing.B, extraSQL string, edit func(string) string) {
	n := benchUnits()
	dir := b.TempDir()
	db := filepath.Join(dir, "whole.duckdb")
	raw, err := sql.Open("duckdb", db)
	if err != nil {
		b.Fatal(err)
	}
	if _, err := raw.Exec(warehousetest.BenchCohortSQL(n) + extraSQL); err != nil {
		b.Fatal(err)
	}
	raw.Close()
	path := filepath.Join(dir, "bench.yaml")
	text := fmt.Sprintf(warehousetest.BenchStudy, db)
	if edit != nil {
		if text2 := edit(text); text2 == text {
			b.Fatal("the benchmark study did not take the edit")
		} else {
			text = text2
		}
	}
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		b.Fatal(err)
	}
	s, err := Load(path)
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	stages := map[string]float64{}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		wh, err := Open(ctx, s, false)
		if err != nil {
			b.Fatal(err)
		}
		sum, err := Run(ctx, s, wh, Options{})
		wh.Close()
		if err != nil {
			b.Fatal(err)
		}
		for k, v := range sum.Timings {
			stages[k] += v
		}
	}
	for k, v := range stages {
		b.ReportMetric(v/float64(b.N), k+"-s")
	}
	b.ReportMetric(float64(n), "units")
}
