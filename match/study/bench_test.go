package study

import (
	"context"
	"database/sql"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
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
func BenchmarkWholeRun(b *testing.B) {
	n := benchUnits()
	dir := b.TempDir()
	db := filepath.Join(dir, "whole.duckdb")
	raw, err := sql.Open("duckdb", db)
	if err != nil {
		b.Fatal(err)
	}
	if _, err := raw.Exec(warehousetest.BenchCohortSQL(n)); err != nil {
		b.Fatal(err)
	}
	raw.Close()
	path := filepath.Join(dir, "bench.yaml")
	if err := os.WriteFile(path, []byte(fmt.Sprintf(warehousetest.BenchStudy, db)), 0o644); err != nil {
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
