package engines

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgtype"

	"counterpart/warehouse"
	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// crossData is one table loaded into both engines from the same Go values
// (float64 values travel as their exact bits: DuckDB's appender and
// Postgres's binary COPY both take IEEE doubles).
type crossData struct {
	id     []int64
	treat  []bool
	age    []float64
	bmi    []float64
	region []string
	smoker []bool
	y      []float64
}

func makeCrossData(n int) crossData {
	r := rand.New(rand.NewPCG(7, 11))
	d := crossData{}
	regions := []string{"north", "south", "east", "west"}
	for i := range n {
		d.id = append(d.id, int64(1000+i*7))
		d.age = append(d.age, 40+30*r.Float64())
		d.bmi = append(d.bmi, 18+r.NormFloat64()*4+10)
		d.region = append(d.region, regions[r.IntN(len(regions))])
		d.smoker = append(d.smoker, r.Float64() < 0.3)
		d.treat = append(d.treat, r.Float64() < 0.35+0.004*(d.age[i]-55))
		d.y = append(d.y, r.NormFloat64()+0.01*d.age[i])
	}
	return d
}

var crossQuery = warehouse.CohortQuery{
	SQL:  "SELECT id, treat, age, bmi, region, smoker, y FROM cross_src ORDER BY id",
	Unit: "id", Treatment: "treat", Covariates: []string{"age", "bmi", "region", "smoker"}, Outcomes: []string{"y"},
}

// crossPublication derives scores, 1:1 matches and two weighting schemes
// from the cohort with plain arithmetic, the same on both engines.
func crossPublication(c *warehouse.Cohort) (warehouse.Output, *warehouse.Publication) {
	n := c.N()
	out := warehouse.Output{Schema: "", Prefix: "x_", Study: "x", Unit: c.Unit, IDKind: c.IDKind, Treatment: c.Treatment,
		Outcomes: []string{"y"}, Schemes: []string{"att", "overlap"}}
	for _, cv := range c.Covariates {
		out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: cv.Name, Kind: cv.Kind})
	}
	p := &warehouse.Publication{Cohort: c, PS: make([]float64, n), LogitPS: make([]float64, n), InSupport: make([]bool, n),
		Weights: [][]float64{make([]float64, n), make([]float64, n)}}
	age, bmi := c.Covariates[0].Values, c.Covariates[1].Values
	var treated, control []int
	for i := range n {
		lp := -1 + 0.03*(age[i]-55) - 0.02*(bmi[i]-28)
		p.LogitPS[i] = lp
		p.PS[i] = 1 / (1 + math.Exp(-lp))
		p.InSupport[i] = p.PS[i] > 0.05 && p.PS[i] < 0.95
		if c.Treated[i] {
			p.Weights[0][i], p.Weights[1][i] = 1, 1-p.PS[i]
			treated = append(treated, i)
		} else {
			p.Weights[0][i], p.Weights[1][i] = p.PS[i]/(1-p.PS[i]), p.PS[i]
			control = append(control, i)
		}
	}
	for k, t := range treated {
		if k >= len(control) {
			break
		}
		m := &p.Matches
		m.SetID = append(m.SetID, int64(k+1), int64(k+1))
		m.Unit = append(m.Unit, t, control[k])
		m.Treated = append(m.Treated, true, false)
		m.SetWeight = append(m.SetWeight, 1, 1)
		m.Distance = append(m.Distance, 0, math.Abs(p.LogitPS[t]-p.LogitPS[control[k]]))
	}
	return out, p
}

// crossQueries are compared row by row between the engines.
var crossQueries = []string{
	"SELECT id, treated, ps, logit_ps, in_support FROM x_current_scores ORDER BY id",
	"SELECT set_id, id, treated, set_weight, match_distance FROM x_current_matches ORDER BY set_id, id",
	"SELECT id, treated, att, overlap FROM x_current_weights ORDER BY id",
	"SELECT id, treat, age, bmi, region, smoker, y FROM x_current_cohort ORDER BY id",
	"SELECT covariate, level, adjustment, mean_treated, mean_control, sd_treated, sd_control, smd, variance_ratio FROM x_balance ORDER BY covariate, level NULLS FIRST, adjustment",
}

// TestCrossEngine loads the same data into DuckDB and Postgres, checks
// that both engines decode it to the same Cohort, publishes the same
// Publication on each, and compares scores, matches, weights, the cohort
// snapshot and the balance view: equal, floats within 1e-12 (relative to
// max(1, |x|)); the balance view's sums may differ in their last bits
// because the engines add in different orders.
func TestCrossEngine(t *testing.T) {
	ctx := context.Background()
	dsn := pgtest.NewDatabase(t)
	d := makeCrossData(400)
	path := filepath.Join(t.TempDir(), "x.duckdb")
	cols := []warehouse.LoadColumn{
		{Name: "id", Type: "BIGINT", Values: d.id}, {Name: "treat", Type: "BOOLEAN", Values: d.treat},
		{Name: "age", Type: "DOUBLE PRECISION", Values: d.age}, {Name: "bmi", Type: "DOUBLE PRECISION", Values: d.bmi},
		{Name: "region", Type: "VARCHAR", Values: d.region}, {Name: "smoker", Type: "BOOLEAN", Values: d.smoker},
		{Name: "y", Type: "DOUBLE PRECISION", Values: d.y},
	}
	open := func(engine, dsn, schema string) warehouse.Warehouse {
		if err := warehouse.LoadTable(ctx, engine, dsn, schema, "cross_src", "", cols); err != nil {
			t.Fatal(err)
		}
		w, err := warehouse.Open(ctx, engine, dsn, warehouse.OpenOptions{})
		if err != nil {
			t.Fatal(err)
		}
		return w
	}
	dw, pg := open("duckdb", path, "main"), open("postgres", dsn, "public")
	defer pg.Close()
	cd, err := dw.ReadCohort(ctx, crossQuery)
	if err != nil {
		t.Fatal(err)
	}
	cp, err := pg.ReadCohort(ctx, crossQuery)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := fmt.Sprintf("%+v", *cp), fmt.Sprintf("%+v", *cd); got != want {
		t.Fatalf("engines decode differently:\npostgres %.300s\nduckdb   %.300s", got, want)
	}

	started := time.Date(2026, 2, 1, 12, 0, 0, 0, time.UTC)
	publish := func(w warehouse.Warehouse, schema string) {
		out, p := crossPublication(cd)
		out.Schema = schema
		p.Run = warehouse.RunRecord{RunID: "r1", Study: "x", Status: warehouse.StatusRunning, StartedAt: started}
		if err := w.StartRun(ctx, out, p.Run); err != nil {
			t.Fatal(err)
		}
		p.Run.Status, p.Run.FinishedAt = warehouse.StatusSucceeded, started.Add(time.Minute)
		if err := w.Publish(ctx, out, p); err != nil {
			t.Fatal(err)
		}
	}
	publish(dw, "main")
	publish(pg, "public")
	if err := dw.Close(); err != nil {
		t.Fatal(err)
	}
	db, err := sql.Open("duckdb", path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()

	for _, q := range crossQueries {
		want := warehousetest.SQLRows(t, db, q)
		got := pgtest.Query(t, dsn, q)
		if len(got) != len(want) || len(got) == 0 {
			t.Fatalf("%s: postgres %d rows, duckdb %d", q, len(got), len(want))
		}
		bad := 0
		for i := range got {
			for j := range got[i] {
				if !sameValue(got[i][j], want[i][j]) && bad < 5 {
					bad++
					t.Errorf("%s\nrow %d column %d: postgres %v (%T), duckdb %v (%T)", q, i, j, got[i][j], got[i][j], want[i][j], want[i][j])
				}
			}
		}
	}
}

// sameValue compares two query values: numbers within 1e-12 relative to
// max(1, |x|), NULL equal to NULL, everything else by its printed form.
func sameValue(a, b any) bool {
	fa, okA := asFloat(a)
	fb, okB := asFloat(b)
	if okA && okB {
		return fa == fb || math.Abs(fa-fb) <= 1e-12*math.Max(1, math.Abs(fb))
	}
	return fmt.Sprint(a) == fmt.Sprint(b)
}

func asFloat(v any) (float64, bool) {
	switch x := v.(type) {
	case float64:
		return x, true
	case float32:
		return float64(x), true
	case int64:
		return float64(x), true
	case int32:
		return float64(x), true
	case pgtype.Numeric:
		f, err := x.Float64Value()
		return f.Float64, err == nil
	}
	return 0, false
}
