package duckdb

import (
	"context"
	"database/sql/driver"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
	"counterpart/warehouse/warehousetest"
)

const benchRows = warehousetest.BenchRows

func BenchmarkReadCohort1M(b *testing.B) { warehousetest.BenchReadCohort(b, openTemp(b)) }

func BenchmarkPublish1M(b *testing.B) { warehousetest.BenchPublish(b, openTemp(b), "main") }

// BenchmarkPublishRetention: warehousetest.BenchRetention without and
// with retention (DELETE of the previous run's rows), to tell whether
// DuckDB needs per-run tables as Postgres got partitions.
func BenchmarkPublishRetention(b *testing.B) {
	w := openTemp(b)
	c := warehousetest.RetentionCohort(b, w)
	for _, keep := range []int{0, 1} {
		b.Run(fmt.Sprintf("keep_runs=%d", keep), func(b *testing.B) {
			warehousetest.BenchRetention(b, w, c, "main", fmt.Sprintf("k%d_", keep), keep)
		})
	}
}

// BenchmarkAppender1Mx25 measures DuckDB's row appender alone: 1,000,000
// rows of 25 DOUBLE columns inside a transaction.
func BenchmarkAppender1Mx25(b *testing.B) {
	ctx := context.Background()
	w, err := Open(ctx, filepath.Join(b.TempDir(), "app.duckdb"))
	if err != nil {
		b.Fatal(err)
	}
	defer w.Close()
	const ncol = 25
	var defs []string
	for j := range ncol {
		defs = append(defs, fmt.Sprintf("v%d DOUBLE", j))
	}
	if _, err := w.testConn(b).ExecContext(ctx, "CREATE TABLE app ("+strings.Join(defs, ", ")+")"); err != nil {
		b.Fatal(err)
	}
	data := make([][]float64, ncol)
	for j := range data {
		data[j] = make([]float64, benchRows)
		for i := range data[j] {
			data[j][i] = float64(i*ncol + j)
		}
	}
	b.ResetTimer()
	for b.Loop() {
		if _, err := w.testConn(b).ExecContext(ctx, "BEGIN TRANSACTION"); err != nil {
			b.Fatal(err)
		}
		err := w.testConn(b).Raw(func(dc any) error {
			a, err := duckdb.NewAppenderFromConn(dc.(driver.Conn), "main", "app")
			if err != nil {
				return err
			}
			row := make([]driver.Value, ncol)
			for i := range benchRows {
				for j := range ncol {
					row[j] = data[j][i]
				}
				if err := a.AppendRow(row...); err != nil {
					return err
				}
			}
			return a.Close()
		})
		if err != nil {
			b.Fatal(err)
		}
		if _, err := w.testConn(b).ExecContext(ctx, "ROLLBACK"); err != nil {
			b.Fatal(err)
		}
	}
	sec := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(sec, "s/append")
	b.ReportMetric(benchRows/sec, "rows/s")
}

// BenchmarkBalanceView1M queries the balance view of a published 1M-unit
// run: 17 numeric and 3 five-level covariates under four adjustments.
func BenchmarkBalanceView1M(b *testing.B) {
	w := openTemp(b)
	ctx := context.Background()
	c, err := w.ReadCohort(ctx, warehousetest.BenchCohort(b, w))
	if err != nil {
		b.Fatal(err)
	}
	out, p := warehousetest.BenchPublication(c, "main")
	p.Run = warehouse.RunRecord{RunID: "r1", Study: "bench", StartedAt: time.Now()}
	if err := w.StartRun(ctx, out, p.Run); err != nil {
		b.Fatal(err)
	}
	p.Run.Status = warehouse.StatusSucceeded
	if err := w.Publish(ctx, out, p); err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for b.Loop() {
		var n int
		var s float64
		if err := w.testConn(b).QueryRowContext(ctx, "SELECT count(*), sum(abs(smd)) FROM bench_balance").Scan(&n, &s); err != nil {
			b.Fatal(err)
		}
		if n != (17+3*5)*4 {
			b.Fatalf("%d balance rows", n)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/query")
}

// BenchmarkDashboard1M: warehousetest.DashboardQuery over keep_runs 10
// retained runs (COUNTERPART_BENCH_UNITS units, default 1M). There is no
// index: each run's rows fill row groups of their own and the zone maps
// of run_id skip the other runs' groups.
func BenchmarkDashboard1M(b *testing.B) {
	w := openTemp(b)
	warehousetest.PrepareDashboard(b, w, "main", 10)
	ctx := context.Background()
	warehousetest.BenchDashboard(b, func(q string) error {
		rows, err := w.testConn(b).QueryContext(ctx, q)
		if err != nil {
			return err
		}
		for rows.Next() {
		}
		rows.Close()
		return rows.Err()
	})
}

// BenchmarkReadPaths1M compares the two ways of reading the benchmark
// warehouse's cohort (warehousetest.BenchCohortSQLWith: 1,000,000 units,
// 27 numeric and 3 categorical covariates, two outcomes) into the
// collector: "rows" through database/sql, "chunks" a data chunk at a
// time (what Stream does), and "ReadCohort", the chunks inside the whole
// read (read-only transaction, statement check, canonical order).
func BenchmarkReadPaths1M(b *testing.B) {
	w := openTemp(b)
	warehousetest.Exec(b, w, warehousetest.BenchCohortSQLWith(benchRows, warehousetest.BenchNumeric))
	q := warehouse.CohortQuery{SQL: "SELECT * FROM synth.cohort", Unit: "unit_id", Treatment: "treated", Outcomes: []string{"y_bin", "y_cont"}}
	for j := 1; j <= warehousetest.BenchNumeric; j++ {
		q.Covariates = append(q.Covariates, fmt.Sprintf("x%02d", j))
	}
	q.Covariates = append(q.Covariates, "c1", "c2", "c3")
	a := (*adapter)(w)
	ctx := context.Background()
	for _, p := range []struct {
		name string
		read func() (*warehouse.Cohort, error)
	}{
		{"rows", func() (*warehouse.Cohort, error) { w.testConn(b); return collect(a.streamRows, q, false) }},
		{"chunks", func() (*warehouse.Cohort, error) { w.testConn(b); return collect(a.Stream, q, false) }},
		{"ReadCohort", func() (*warehouse.Cohort, error) { return w.ReadCohort(ctx, q) }},
	} {
		b.Run(p.name, func(b *testing.B) {
			for b.Loop() {
				c, err := p.read()
				if err != nil {
					b.Fatal(err)
				}
				if c.N() != benchRows {
					b.Fatalf("read %d rows", c.N())
				}
			}
			b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/read")
		})
	}
}
