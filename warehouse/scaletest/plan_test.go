package scaletest

import (
	"context"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
	"counterpart/warehouse/postgres/pgtest"
)

// TestPostgresMomentsPlanIsParallel: with parallel query allowed (the
// session settings below make it cheap enough for a small table; the
// defaults allow it on large ones), one IRLS step's aggregate runs as
// Gather over Partial Aggregate with a Finalize Aggregate on top — the
// shape a distributed Postgres-protocol engine uses per node. Plan node
// names from the PostgreSQL manual, "Parallel Aggregation".
func TestPostgresMomentsPlanIsParallel(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	pgtest.Exec(t, dsn, `CREATE TABLE big AS SELECT g AS id, (g % 7 = 0) AS treated,
		sin(g) AS x1, cos(g) AS x2, CAST(g % 3 AS VARCHAR) AS grp FROM generate_series(1, 50000) AS g`)
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
	for _, fence := range []bool{true} {
		q, args := warehouse.MomentsSQL("SELECT * FROM big", d, []float64{-1.8, 0.1, 0.2, 0.3}, fence, true)
		rows, err := conn.Query(ctx, "EXPLAIN "+q, args...)
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
		for _, want := range []string{"Finalize Aggregate", "Gather", "Partial Aggregate", "Parallel Seq Scan"} {
			if !strings.Contains(text, want) {
				t.Errorf("plan has no %q:\n%s", want, text)
			}
		}
	}
}
