package warehousetest

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"counterpart/warehouse"
)

// BenchRows is the number of units of every engine's benchmark cohort.
const BenchRows = 1_000_000

// BenchCohort creates table big on w, generated inside the engine in
// standard SQL: bigint id, boolean treated, 17 double covariates
// x1..x17, three text categoricals c1..c3 with 5 levels each, and two
// double outcomes; it returns the query of the cohort.
func BenchCohort(b *testing.B, w warehouse.Warehouse) warehouse.CohortQuery {
	b.Helper()
	q := warehouse.CohortQuery{SQL: "SELECT * FROM big", Unit: "id", Treatment: "treated", Outcomes: []string{"y1", "y2"}}
	var cols []string
	for i := 1; i <= 17; i++ {
		cols = append(cols, fmt.Sprintf("random() * 100 AS x%d", i))
		q.Covariates = append(q.Covariates, fmt.Sprintf("x%d", i))
	}
	for i := 1; i <= 3; i++ {
		cols = append(cols, fmt.Sprintf("(ARRAY['north','south','east','west','central'])[1 + CAST(floor(random() * 5) AS INTEGER)] AS c%d", i))
		q.Covariates = append(q.Covariates, fmt.Sprintf("c%d", i))
	}
	Exec(b, w, fmt.Sprintf(`CREATE TABLE big AS SELECT CAST(i AS BIGINT) AS id, random() < 0.3 AS treated, %s, random() AS y1,
		CAST(CASE WHEN random() < 0.2 THEN 1 ELSE 0 END AS DOUBLE PRECISION) AS y2 FROM generate_series(0, %d) AS g(i)`,
		strings.Join(cols, ", "), BenchRows-1))
	Exec(b, w, "ANALYZE big")
	return q
}

// BenchReadCohort measures ReadCohort of BenchCohort on w.
func BenchReadCohort(b *testing.B, w warehouse.Warehouse) {
	q := BenchCohort(b, w)
	ctx := context.Background()
	b.ResetTimer()
	for b.Loop() {
		c, err := w.ReadCohort(ctx, q)
		if err != nil {
			b.Fatal(err)
		}
		if c.N() != BenchRows {
			b.Fatalf("read %d rows", c.N())
		}
	}
	sec := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(sec, "s/read")
	b.ReportMetric(BenchRows/sec, "rows/s")
}

// BenchPublish measures StartRun and Publish of BenchPublication of
// BenchCohort on w into schema.
func BenchPublish(b *testing.B, w warehouse.Warehouse, schema string) {
	ctx := context.Background()
	c, err := w.ReadCohort(ctx, BenchCohort(b, w))
	if err != nil {
		b.Fatal(err)
	}
	out, p := BenchPublication(c, schema)
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
	rows := 3*BenchRows + p.Matches.Len()
	b.ReportMetric(sec, "s/publish")
	b.ReportMetric(float64(rows)/sec, "rows/s")
}

// BenchPublication gives every unit a score, pairs treated units with
// controls, and adds two weighting schemes.
func BenchPublication(c *warehouse.Cohort, schema string) (warehouse.Output, *warehouse.Publication) {
	out := warehouse.Output{Schema: schema, Prefix: "bench_", Study: "bench", Unit: c.Unit, IDKind: c.IDKind,
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

// DashboardQuery is the heavy dashboard query of the benchmarks: the
// current matches joined to the current cohort snapshot, weights summed
// per arm. Both views filter their tables on run_id.
const DashboardQuery = `SELECT m.treated, count(*), sum(m.set_weight), sum(m.set_weight * c.y1)
FROM bench_current_matches m
JOIN bench_current_cohort c ON c.id = m.id
GROUP BY m.treated`

// DashboardRows is the cohort size of BenchDashboard: COUNTERPART_BENCH_UNITS
// when set, else BenchRows.
func DashboardRows() int {
	if n, err := strconv.Atoi(os.Getenv("COUNTERPART_BENCH_UNITS")); err == nil && n > 0 {
		return n
	}
	return BenchRows
}

// PrepareDashboard publishes keep (10 in the benchmarks) succeeded runs of
// a DashboardRows cohort with keep_runs keep, so that the run tables hold
// keep runs and the current views one of them. It returns the output and
// a publication for more runs (PublishAgain).
func PrepareDashboard(b *testing.B, w warehouse.Warehouse, schema string, keep int) (warehouse.Output, *warehouse.Publication) {
	b.Helper()
	n := DashboardRows()
	Exec(b, w, fmt.Sprintf(`CREATE TABLE big AS SELECT CAST(i AS BIGINT) AS id, random() < 0.3 AS treated, random() * 100 AS x1, random() AS y1
		FROM generate_series(0, %d) AS g(i)`, n-1))
	c, err := w.ReadCohort(context.Background(), warehouse.CohortQuery{SQL: "SELECT * FROM big", Unit: "id", Treatment: "treated",
		Covariates: []string{"x1"}, Outcomes: []string{"y1"}})
	if err != nil {
		b.Fatal(err)
	}
	out, p := BenchPublication(c, schema)
	out.Outcomes, out.KeepRuns = []string{"y1"}, keep
	for i := range keep {
		PublishAgain(b, w, out, p, fmt.Sprintf("r%02d", i))
	}
	return out, p
}

// PublishAgain publishes p once more as run id.
func PublishAgain(b *testing.B, w warehouse.Warehouse, out warehouse.Output, p *warehouse.Publication, id string) {
	b.Helper()
	ctx := context.Background()
	p.Run = warehouse.RunRecord{RunID: id, Study: "bench", StartedAt: time.Now()}
	if err := w.StartRun(ctx, out, p.Run); err != nil {
		b.Fatal(err)
	}
	p.Run.Status = warehouse.StatusSucceeded
	if err := w.Publish(ctx, out, p); err != nil {
		b.Fatal(err)
	}
}

// BenchDashboard measures DashboardQuery through query, reporting
// seconds per query.
func BenchDashboard(b *testing.B, query func(q string) error) {
	b.Helper()
	b.ResetTimer()
	for b.Loop() {
		if err := query(DashboardQuery); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/query")
}

// RetentionRows is the cohort size of BenchRetention:
// COUNTERPART_RETENTION_UNITS when set, else 200k.
func RetentionRows() int {
	if n, err := strconv.Atoi(os.Getenv("COUNTERPART_RETENTION_UNITS")); err == nil && n > 0 {
		return n
	}
	return 200_000
}

// RetentionCohort makes table big of RetentionRows units and reads it.
func RetentionCohort(b *testing.B, w warehouse.Warehouse) *warehouse.Cohort {
	b.Helper()
	Exec(b, w, fmt.Sprintf(`CREATE TABLE big AS SELECT CAST(i AS BIGINT) AS id, random() < 0.3 AS treated,
		random() * 100 AS x1, random() AS x2, random() AS y1 FROM generate_series(0, %d) AS g(i)`, RetentionRows()-1))
	c, err := w.ReadCohort(context.Background(), warehouse.CohortQuery{SQL: "SELECT * FROM big", Unit: "id", Treatment: "treated",
		Covariates: []string{"x1", "x2"}, Outcomes: []string{"y1"}})
	if err != nil {
		b.Fatal(err)
	}
	return c
}

// BenchRetention measures Publish of c under prefix with keep_runs keep
// (0: no retention; 1: each publish removes the previous run), after
// one untimed publish, reporting seconds per publish and, with
// retention, the retention step alone (between the publish's "effects"
// and "retention" steps, through the fault hook).
func BenchRetention(b *testing.B, w warehouse.Warehouse, c *warehouse.Cohort, schema, prefix string, keep int) {
	b.Helper()
	out, p := BenchPublication(c, schema)
	out.Outcomes, out.KeepRuns, out.Prefix = []string{"y1"}, keep, prefix
	run := 0
	next := func() {
		run++
		PublishAgain(b, w, out, p, fmt.Sprintf("r%04d", run))
	}
	next()
	cr := core(b, w)
	var start time.Time
	var retention time.Duration
	cr.Fault = func(step string) error {
		switch step {
		case "effects":
			start = time.Now()
		case "retention":
			retention += time.Since(start)
		}
		return nil
	}
	defer func() { cr.Fault = nil }()
	b.ResetTimer()
	for b.Loop() {
		next()
	}
	b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/publish")
	if keep > 0 {
		b.ReportMetric(retention.Seconds()/float64(b.N), "s/retention")
	}
}
