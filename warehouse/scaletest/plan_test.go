package scaletest

import (
	"context"
	"math"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
	"counterpart/warehouse/postgres/pgtest"
)

// TestPostgresAggregatesPlanParallel: with parallel query allowed (the
// session settings below make it cheap enough for a small table; the
// defaults allow it on large ones), the aggregate queries that read a
// whole cohort or run run as Gather over Partial Aggregate with a
// Finalize Aggregate on top — the shape a distributed Postgres-protocol
// engine uses per node: one IRLS step's full moments, the gradient pass,
// and the run's balance and effect sums. Plan node names from the
// PostgreSQL manual, "Parallel Aggregation".
func TestPostgresAggregatesPlanParallel(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	pgtest.Exec(t, dsn, `CREATE TABLE big AS SELECT g AS id, (g % 7 = 0) AS treated,
		sin(g) AS x1, cos(g) AS x2, CAST(g % 3 AS VARCHAR) AS grp, CAST(g % 5 AS DOUBLE PRECISION) AS y FROM generate_series(1, 50000) AS g;
	CREATE TABLE p_cohort AS SELECT 'r1'::text AS run_id, *, x1 + x2 AS eta, x1 - x2 AS t FROM big;
	CREATE TABLE p_matches AS SELECT 'r1'::text AS run_id, id AS set_id, id, treated, 1.0::double precision AS set_weight, 0.0::double precision AS match_distance FROM big WHERE id % 3 = 0;
	ANALYZE p_cohort; ANALYZE p_matches`)
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, s := range []string{"SET max_parallel_workers_per_gather = 2", "SET parallel_setup_cost = 0",
		"SET parallel_tuple_cost = 0", "SET min_parallel_table_scan_size = 0"} {
		if _, err := conn.Exec(ctx, s); err != nil {
			t.Fatal(err)
		}
	}
	d := &warehouse.DesignSQL{Unit: "id", Treatment: "treated", TreatmentBool: true, Columns: []warehouse.DesignColumn{
		{Name: "x1", Source: "x1", Center: 0, Scale: 1},
		{Name: "x2", Source: "x2", Center: 0, Scale: 1},
		{Name: "grp=1", Source: "grp", Categorical: true, Text: true, Level: "1", Center: 0.33, Scale: 2},
	}}
	beta := []float64{-1.8, 0.1, 0.2, 0.3}
	c, err := warehouse.NewContract(warehouse.Output{Schema: "public", Prefix: "p_", Study: "p", Unit: "id", IDKind: warehouse.IDInt,
		Treatment: "treated", Outcomes: []string{"y"}, Schemes: []string{"att", "overlap"},
		Covariates: []warehouse.CovariateMeta{{Name: "x1"}, {Name: "x2"}, {Name: "grp", Kind: warehouse.Categorical}, {Name: "eta"}, {Name: "t"}}})
	if err != nil {
		t.Fatal(err)
	}
	runSums, runArgs, err := warehouse.RunSumsSQL(c, warehouse.RunSums{
		// Covariates named like the query's own per-row columns (eta, t)
		// must not be confused with them.
		Covariates: []warehouse.CovariateMeta{{Name: "x1"}, {Name: "x2"}, {Name: "grp", Kind: warehouse.Categorical}, {Name: "eta"}, {Name: "t"}},
		Levels:     [][]string{nil, nil, {"0", "1", "2"}, nil, nil}, Shifts: []float64{0, 0, 0, 0}, Matched: true,
		Schemes: []string{"att", "overlap"}, Design: d, Coef: beta, Support: warehouse.Support{Low: math.Inf(-1), High: 2},
		Outcomes: []string{"y"}}, true)
	if err != nil {
		t.Fatal(err)
	}
	runArgs[0] = "r1"
	full, fullArgs := warehouse.MomentsSQL(warehouse.CohortQuery{SQL: "SELECT * FROM big"}, d, beta, true, true)
	grad, gradArgs := warehouse.MomentsSQL(warehouse.CohortQuery{SQL: "SELECT * FROM big"}, d, beta, true, false)
	for _, tc := range []struct {
		name, query string
		args        []any
	}{
		{"moments", full, fullArgs},
		{"gradient", grad, gradArgs},
		{"run sums", runSums, runArgs},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rows, err := conn.Query(ctx, "EXPLAIN "+tc.query, tc.args...)
			if err != nil {
				t.Fatal(err)
			}
			var plan []string
			for rows.Next() {
				var line string
				if err := rows.Scan(&line); err != nil {
					t.Fatal(err)
				}
				plan = append(plan, line)
			}
			if err := rows.Err(); err != nil {
				t.Fatal(err)
			}
			text := strings.Join(plan, "\n")
			for _, want := range []string{"Finalize", "Gather", "Partial", "Parallel Seq Scan"} {
				if !strings.Contains(text, want) {
					t.Errorf("plan has no %q:\n%s", want, text)
				}
			}
		})
	}
}
