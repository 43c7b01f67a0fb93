package duckdb

import (
	"context"
	"testing"
)

// TestCheckSelectAcceptsReads: the parse gate (json_serialize_sql) and
// the statement-type check let through the SELECT forms analysts write in
// DuckDB: windows with QUALIFY, star expressions, list comprehensions and
// lambdas, recursive CTEs, GROUP BY ALL, dollar quoting, FROM-first
// syntax, sampling, PIVOT subqueries, positional joins, UNION BY NAME.
func TestCheckSelectAcceptsReads(t *testing.T) {
	w := openTemp(t)
	execSQL(t, w, "CREATE TABLE src AS SELECT range AS id, range % 2 = 0 AS tr, 'g' || (range % 3) AS grp, range * 1.5 AS x FROM range(10)")
	ctx := context.Background()
	for _, q := range []string{
		"SELECT id, tr, row_number() OVER (PARTITION BY grp ORDER BY x) AS rn FROM src QUALIFY rn < 100",
		"SELECT * EXCLUDE (grp) FROM src",
		"SELECT COLUMNS('id|tr') FROM src",
		"SELECT id, tr, [x * 2 FOR x IN [1,2,3]] AS l FROM src",
		"SELECT id, tr, list_transform([1,2], y -> y + 1) AS l FROM src",
		"WITH RECURSIVE r(n) AS (SELECT 1 UNION ALL SELECT n + 1 FROM r WHERE n < 3) SELECT s.id, s.tr FROM src s, r WHERE r.n = 1",
		"SELECT grp, count(*) FROM src GROUP BY ALL ORDER BY ALL",
		"SELECT id, tr, 'it''s' AS s, $$dollar ' quote$$ AS d FROM src -- it's a comment",
		"FROM src SELECT id, tr",
		"SELECT * FROM src USING SAMPLE 100%",
		"SELECT * FROM (PIVOT src ON grp IN ('g0', 'g1') USING count(*) GROUP BY id, tr)",
		"SELECT a.id, a.tr FROM src a POSITIONAL JOIN src b",
		"SELECT id, tr, {'a': 1}.a AS s FROM src",
		"SELECT id, tr, x::DECIMAL(10,2) AS d FROM src WHERE grp IN (SELECT grp FROM src)",
		"SELECT id, tr FROM src UNION ALL BY NAME SELECT id + 100 AS id, tr FROM src",
		"SELECT id, tr FROM src WHERE id = getvariable('nothing') OR TRUE",
		"SUMMARIZE src",
		"SELECT id, tr FROM src;  ",
	} {
		if err := func() error {
			if _, err := w.testConn(t).ExecContext(ctx, "BEGIN TRANSACTION READ ONLY"); err != nil {
				return err
			}
			defer w.Rollback(ctx)
			return (*adapter)(w).CheckSelect(ctx, q)
		}(); err != nil {
			t.Errorf("%q: %v", q, err)
		}
	}
}
