package duckdb

import (
	"context"
	"database/sql/driver"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"strings"
	"testing"
	"time"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

const benchRows = 1_000_000

// benchCohort creates table big in a new file: bigint id, boolean treated,
// 17 DOUBLE covariates x1..x17, three VARCHAR categoricals c1..c3 with 5
// levels each, and two DOUBLE outcomes, all generated inside DuckDB.
func benchCohort(b *testing.B) (*Warehouse, warehouse.CohortQuery) {
	b.Helper()
	ctx := context.Background()
	w, err := Open(ctx, filepath.Join(b.TempDir(), "bench.duckdb"))
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { w.Close() })
	var cols []string
	q := warehouse.CohortQuery{SQL: "SELECT * FROM big", Unit: "id", Treatment: "treated", Outcomes: []string{"y1", "y2"}}
	for i := 1; i <= 17; i++ {
		cols = append(cols, fmt.Sprintf("random() * 100 AS x%d", i))
		q.Covariates = append(q.Covariates, fmt.Sprintf("x%d", i))
	}
	for i := 1; i <= 3; i++ {
		cols = append(cols, fmt.Sprintf("(['north','south','east','west','central'])[1 + CAST(floor(random() * 5) AS INTEGER)] AS c%d", i))
		q.Covariates = append(q.Covariates, fmt.Sprintf("c%d", i))
	}
	ddl := fmt.Sprintf(`CREATE TABLE big AS SELECT i AS id, random() < 0.3 AS treated, %s,
		random() AS y1, CAST(random() < 0.2 AS DOUBLE) AS y2 FROM range(%d) t(i)`, strings.Join(cols, ", "), benchRows)
	if _, err := w.conn.ExecContext(ctx, ddl); err != nil {
		b.Fatal(err)
	}
	return w, q
}

func BenchmarkReadCohort1M(b *testing.B) {
	w, q := benchCohort(b)
	ctx := context.Background()
	b.ResetTimer()
	for b.Loop() {
		c, err := w.ReadCohort(ctx, q)
		if err != nil {
			b.Fatal(err)
		}
		if c.N() != benchRows {
			b.Fatalf("read %d rows", c.N())
		}
	}
	sec := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(sec, "s/read")
	b.ReportMetric(benchRows/sec, "rows/s")
}

func BenchmarkPublish1M(b *testing.B) {
	w, q := benchCohort(b)
	ctx := context.Background()
	c, err := w.ReadCohort(ctx, q)
	if err != nil {
		b.Fatal(err)
	}
	out, p := benchPublication(c)
	run := 0
	b.ResetTimer()
	for b.Loop() {
		run++
		p.Run = warehouse.RunRecord{RunID: fmt.Sprintf("r%d", run), Study: "bench", StartedAt: time.Now()}
		if err := w.StartRun(ctx, out, p.Run); err != nil {
			b.Fatal(err)
		}
		p.Run.Status = warehouse.StatusSucceeded
		if err := w.Publish(ctx, out, p); err != nil {
			b.Fatal(err)
		}
	}
	sec := b.Elapsed().Seconds() / float64(b.N)
	rows := 3*benchRows + p.Matches.Len()
	b.ReportMetric(sec, "s/publish")
	b.ReportMetric(float64(rows)/sec, "rows/s")
}

// benchPublication gives every unit a score, pairs treated units with
// controls, and adds two weighting schemes.
func benchPublication(c *warehouse.Cohort) (warehouse.Output, *warehouse.Publication) {
	out := warehouse.Output{Schema: "main", Prefix: "bench_", Study: "bench", Unit: c.Unit, IDKind: c.IDKind,
		Treatment: c.Treatment, Outcomes: []string{"y1", "y2"}, Schemes: []string{"att", "overlap"}}
	for _, cv := range c.Covariates {
		out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: cv.Name, Kind: cv.Kind})
	}
	n := c.N()
	p := &warehouse.Publication{Cohort: c, PS: make([]float64, n), LogitPS: make([]float64, n),
		InSupport: make([]bool, n), Weights: [][]float64{make([]float64, n), make([]float64, n)}}
	r := rand.New(rand.NewPCG(1, 2))
	var treated, control []int
	for i := range n {
		p.PS[i] = 0.05 + 0.9*r.Float64()
		p.InSupport[i] = true
		p.Weights[0][i], p.Weights[1][i] = 1, p.PS[i]
		if c.Treated[i] {
			treated = append(treated, i)
		} else {
			control = append(control, i)
		}
	}
	for k, t := range treated {
		if k >= len(control) {
			break
		}
		m := &p.Matches
		m.SetID = append(m.SetID, int64(k), int64(k))
		m.Unit = append(m.Unit, t, control[k])
		m.Treated = append(m.Treated, true, false)
		m.SetWeight = append(m.SetWeight, 1, 1)
		m.Distance = append(m.Distance, 0, r.Float64())
	}
	return out, p
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
	if _, err := w.conn.ExecContext(ctx, "CREATE TABLE app ("+strings.Join(defs, ", ")+")"); err != nil {
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
		if _, err := w.conn.ExecContext(ctx, "BEGIN TRANSACTION"); err != nil {
			b.Fatal(err)
		}
		err := w.conn.Raw(func(dc any) error {
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
		if _, err := w.conn.ExecContext(ctx, "ROLLBACK"); err != nil {
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
	w, q := benchCohort(b)
	ctx := context.Background()
	c, err := w.ReadCohort(ctx, q)
	if err != nil {
		b.Fatal(err)
	}
	out, p := benchPublication(c)
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
		if err := w.conn.QueryRowContext(ctx, "SELECT count(*), sum(abs(smd)) FROM bench_balance").Scan(&n, &s); err != nil {
			b.Fatal(err)
		}
		if n != (17+3*5)*4 {
			b.Fatalf("%d balance rows", n)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/query")
}
