// Command mkwarehouse writes the benchmarks' synthetic DuckDB warehouse
// (see warehousetest.BenchCohortSQLWith) and, when asked, the study file that runs
// on it. It lives under testdata so that `go build ./...` skips it; run it
// with `go run ./testdata/bench/mkwarehouse`.
package main

import (
	"database/sql"
	"flag"
	"fmt"
	"os"
	"strings"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse/warehousetest"
)

func main() {
	out := flag.String("out", "bench.duckdb", "DuckDB file to write")
	units := flag.Int("units", 1_000_000, "number of units")
	numeric := flag.Int("numeric", warehousetest.BenchNumeric, "numeric covariates (plus 3 categorical ones)")
	csv := flag.String("csv", "", "also export the cohort to this CSV file (for the statsmodels comparison)")
	studyOut := flag.String("study", "", "only write the study file for -out to this path (the warehouse is not rebuilt)")
	engine := flag.String("engine", "duckdb", "study file: warehouse.engine")
	dsn := flag.String("dsn", "", "study file: warehouse.dsn (default: -out)")
	fitIn := flag.String("fit-in", "memory", "study file: score.fit_in")
	prefix := flag.String("prefix", "bench_run_", "study file: output.prefix")
	from := flag.String("from", "synth.cohort", "study file: the table the cohort SQL reads")
	flag.Parse()
	if *studyOut != "" {
		if *dsn == "" {
			*dsn = *out
		}
		text := fmt.Sprintf(warehousetest.BenchStudyWith(*numeric), *dsn)
		text = strings.Replace(text, "engine: duckdb", "engine: "+*engine, 1)
		text = strings.Replace(text, "bench_run_", *prefix, 1)
		text = strings.Replace(text, "synth.cohort", *from, 1)
		text = strings.Replace(text, "support: minmax", "support: minmax\nscore:\n  fit_in: "+*fitIn, 1)
		if err := os.WriteFile(*studyOut, []byte(text), 0o644); err != nil {
			fmt.Fprintln(os.Stderr, "mkwarehouse:", err)
			os.Exit(1)
		}
		return
	}
	os.Remove(*out)
	os.Remove(*out + ".wal")
	db, err := sql.Open("duckdb", *out)
	if err == nil {
		_, err = db.Exec(warehousetest.BenchCohortSQLWith(*units, *numeric))
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
