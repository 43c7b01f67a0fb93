// Command modediff compares the latest succeeded runs of the
// warehouse-scale benchmark's two studies (prefixes s_memory_ and
// s_warehouse_, written by testdata/bench/scale.sh): matched sets, scores
// and weights, unit by unit. With -print it writes the SQL for psql
// instead of running it on a DuckDB file. It lives under testdata so that
// `go build ./...` skips it.
package main

import (
	"database/sql"
	"flag"
	"fmt"
	"os"

	_ "github.com/duckdb/duckdb-go/v2"
)

func main() {
	db := flag.String("db", "", "DuckDB file holding both studies' tables")
	schema := flag.String("schema", "main", "schema of the tables")
	printSQL := flag.Bool("print", false, "print the SQL (for psql) instead of running it")
	flag.Parse()
	p := *schema + "."
	cur := func(prefix string) string {
		return "(SELECT run_id FROM " + p + prefix + "runs WHERE status = 'succeeded' ORDER BY finished_at DESC LIMIT 1)"
	}
	tab := func(prefix, table string) string {
		return "(SELECT * FROM " + p + prefix + table + " WHERE run_id = " + cur(prefix) + ")"
	}
	sets := func(prefix string) string {
		return "SELECT string_agg(CAST(unit_id AS VARCHAR), ',' ORDER BY treated DESC, unit_id) AS s FROM " + tab(prefix, "matches") + " AS m GROUP BY set_id"
	}
	queries := []struct{ label, sql string }{
		{"sets: in memory, in warehouse, only in memory, only in warehouse",
			"WITH a AS (" + sets("s_memory_") + "), b AS (" + sets("s_warehouse_") + ")\n" +
				"SELECT (SELECT count(*) FROM a), (SELECT count(*) FROM b), (SELECT count(*) FROM (SELECT s FROM a EXCEPT SELECT s FROM b) AS x), (SELECT count(*) FROM (SELECT s FROM b EXCEPT SELECT s FROM a) AS y)"},
		{"scores: units, max |logit difference|, support flags differing",
			"SELECT count(*), max(abs(a.logit_ps - b.logit_ps)), sum(CASE WHEN a.in_support <> b.in_support THEN 1 ELSE 0 END) FROM " +
				tab("s_memory_", "scores") + " AS a JOIN " + tab("s_warehouse_", "scores") + " AS b USING (unit_id)"},
		{"weights: units, max |difference| / max(|ate|, 1) over att, ate, overlap",
			"SELECT count(*), max(greatest(abs(a.att - b.att), abs(a.ate - b.ate), abs(a.overlap - b.overlap)) / greatest(abs(a.ate), 1)) FROM " +
				tab("s_memory_", "weights") + " AS a JOIN " + tab("s_warehouse_", "weights") + " AS b USING (unit_id)"},
	}
	if *printSQL {
		for _, q := range queries {
			fmt.Printf("\\echo '%s'\n%s;\n", q.label, q.sql)
		}
		return
	}
	conn, err := sql.Open("duckdb", *db+"?access_mode=read_only")
	if err != nil {
		fmt.Fprintln(os.Stderr, "modediff:", err)
		os.Exit(1)
	}
	defer conn.Close()
	for _, q := range queries {
		rows, err := conn.Query(q.sql)
		if err != nil {
			fmt.Fprintln(os.Stderr, "modediff:", err)
			os.Exit(1)
		}
		cols, _ := rows.Columns()
		for rows.Next() {
			v := make([]any, len(cols))
			ptr := make([]any, len(cols))
			for i := range v {
				ptr[i] = &v[i]
			}
			if err := rows.Scan(ptr...); err != nil {
				fmt.Fprintln(os.Stderr, "modediff:", err)
				os.Exit(1)
			}
			fmt.Println(q.label+":", fmt.Sprint(v...))
		}
		rows.Close()
	}
}
