package postgres

import (
	"context"
	"fmt"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"counterpart/warehouse"
)

const benchRows = 1_000_000

// benchCohort creates table big in a scratch database with the same shape
// as the DuckDB engine's benchmark: bigint id, boolean treated, 17 double
// covariates x1..x17, three text categoricals c1..c3 with 5 levels each,
// and two double outcomes, all generated inside Postgres.
func benchCohort(b *testing.B) (*Warehouse, warehouse.CohortQuery) {
	b.Helper()
	w := openScratch(b)
	var cols []string
	q := warehouse.CohortQuery{SQL: "SELECT * FROM big", Unit: "id", Treatment: "treated", Outcomes: []string{"y1", "y2"}}
	for i := 1; i <= 17; i++ {
		cols = append(cols, fmt.Sprintf("random() * 100 AS x%d", i))
		q.Covariates = append(q.Covariates, fmt.Sprintf("x%d", i))
	}
	for i := 1; i <= 3; i++ {
		cols = append(cols, fmt.Sprintf("(ARRAY['north','south','east','west','central'])[1 + floor(random() * 5)::int] AS c%d", i))
		q.Covariates = append(q.Covariates, fmt.Sprintf("c%d", i))
	}
	execSQL(b, w, fmt.Sprintf(`CREATE TABLE big AS SELECT i::bigint AS id, random() < 0.3 AS treated, %s,
		random() AS y1, (random() < 0.2)::int::float8 AS y2 FROM generate_series(0, %d) g(i)`,
		strings.Join(cols, ", "), benchRows-1))
	execSQL(b, w, "ANALYZE big")
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
// controls, and adds two weighting schemes (as the DuckDB benchmark).
func benchPublication(c *warehouse.Cohort) (warehouse.Output, *warehouse.Publication) {
	out := warehouse.Output{Schema: "public", Prefix: "bench_", Study: "bench", Unit: c.Unit, IDKind: c.IDKind,
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
