// Command mkwarehouse writes the whole-run benchmark's synthetic DuckDB
// warehouse (see study.BenchCohortSQL). It lives under testdata so that
// `go build ./...` skips it; run it with `go run ./testdata/bench/mkwarehouse`.
package main

import (
	"database/sql"
	"flag"
	"fmt"
	"os"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/study"
)

func main() {
	out := flag.String("out", "bench.duckdb", "DuckDB file to write")
	units := flag.Int("units", 1_000_000, "number of units")
	csv := flag.String("csv", "", "also export the cohort to this CSV file (for the statsmodels comparison)")
	flag.Parse()
	os.Remove(*out)
	os.Remove(*out + ".wal")
	db, err := sql.Open("duckdb", *out)
	if err == nil {
		_, err = db.Exec(study.BenchCohortSQL(*units))
	}
	if err == nil && *csv != "" {
		_, err = db.Exec(fmt.Sprintf("COPY synth.cohort TO '%s' (HEADER)", *csv))
	}
	if err == nil {
		err = db.Close()
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "mkwarehouse:", err)
		os.Exit(1)
	}
}
