// Command readfloor times the floor of a run: reading the benchmark
// cohort's columns from DuckDB into Go slices, with nothing else, either
// row by row through database/sql (-read sql, the floor of the old row
// path) or a data chunk at a time through DuckDB's C data-chunk interface
// (-read chunks, the floor of warehouse/duckdb's columnar read). Run it
// under /usr/bin/time -v for peak memory.
package main

import (
	"database/sql"
	"flag"
	"fmt"
	"os"
	"time"

	_ "github.com/duckdb/duckdb-go/v2"
)

func main() {
	path := flag.String("db", "bench.duckdb", "DuckDB file")
	read := flag.String("read", "sql", "how to read: sql (database/sql, row by row) or chunks (data chunks)")
	flag.Parse()
	switch *read {
	case "sql":
		readSQL(*path)
	case "chunks":
		readChunks(*path)
	default:
		fail(fmt.Errorf("-read %q: want sql or chunks", *read))
	}
}

// readSQL scans typed destinations row by row.
func readSQL(path string) {
	start := time.Now()
	db, err := sql.Open("duckdb", path)
	if err != nil {
		fail(err)
	}
	rows, err := db.Query("select * from synth.cohort")
	if err != nil {
		fail(err)
	}
	cols, _ := rows.Columns()
	// Typed destinations reused across rows, appended into columnar slices.
	ids := []int64{}
	treated := []bool{}
	nums := make([][]float64, 0)
	texts := make([][]string, 0)
	dest := make([]any, len(cols))
	var id int64
	var tr bool
	f := make([]float64, len(cols))
	s := make([]string, len(cols))
	var yb int64
	for i, c := range cols {
		switch {
		case c == "unit_id":
			dest[i] = &id
		case c == "treated":
			dest[i] = &tr
		case c == "y_bin":
			dest[i] = &yb
			nums = append(nums, nil)
		case c[0] == 'c':
			dest[i] = &s[i]
			texts = append(texts, nil)
		default:
			dest[i] = &f[i]
			nums = append(nums, nil)
		}
	}
	n := 0
	for rows.Next() {
		if err := rows.Scan(dest...); err != nil {
			fail(err)
		}
		ids = append(ids, id)
		treated = append(treated, tr)
		k, t := 0, 0
		for i, c := range cols {
			switch {
			case c == "unit_id" || c == "treated":
			case c == "y_bin":
				nums[k] = append(nums[k], float64(yb))
				k++
			case c[0] == 'c':
				texts[t] = append(texts[t], s[i])
				t++
			default:
				nums[k] = append(nums[k], f[i])
				k++
			}
		}
		n++
	}
	if err := rows.Err(); err != nil {
		fail(err)
	}
	fmt.Printf("read %d rows x %d columns in %.2f s\n", n, len(cols), time.Since(start).Seconds())
}

func fail(err error) {
	fmt.Fprintln(os.Stderr, "readfloor:", err)
	os.Exit(1)
}
