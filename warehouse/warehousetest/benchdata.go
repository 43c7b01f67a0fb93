package warehousetest

import (
	"fmt"
	"strings"
)

// BenchNumeric is the default number of numeric covariates of the benchmark
// cohort (17 numeric + 3 categorical = 20 covariates, the foundation
// issue's workload); the warehouse-scale benchmark uses 27 (30 in all).
const BenchNumeric = 17

// BenchCohortSQL returns DuckDB SQL that creates synth.cohort: n synthetic
// units, about 10 % treated, BenchNumeric numeric and 3 categorical
// covariates and two outcomes (BenchCohortSQLWith for another width). It
// is the fixed workload of the whole-run benchmark, built inside DuckDB so
// that generating a million rows costs seconds, not the benchmark's time.
// Synthetic numbers only; no scenario, no people.
func BenchCohortSQL(n int) string { return BenchCohortSQLWith(n, BenchNumeric) }

// BenchCohortSQLWith is BenchCohortSQL with numeric numeric covariates
// (x01 … xNN, at least 6: the treatment model uses the first six). The
// first 17 columns are the same for every width, so the 20-covariate
// workload is a projection of the wider one.
func BenchCohortSQLWith(n, numeric int) string {
	numeric = max(numeric, 6)
	num := ""
	lin := "-2.6"
	for j := 1; j <= numeric; j++ {
		num += fmt.Sprintf(", (random() * 2 - 1) * %d + sin(i * %d) AS x%02d", 1+j%4, j, j)
	}
	for j := 1; j <= 6; j++ {
		lin += fmt.Sprintf(" + 0.%d * x%02d / %d", j, j, 1+j%4)
	}
	return fmt.Sprintf(`
SELECT setseed(0.42);
CREATE SCHEMA IF NOT EXISTS synth;
CREATE OR REPLACE TABLE synth.base AS
SELECT i AS unit_id%s,
       ['north','south','east','west','centre'][1 + (hash(i * 7) %% 5)::INT] AS c1,
       ['a','b','c','d','e'][1 + floor(random() * 5)::INT] AS c2,
       ['p','q','r','s','t'][1 + floor(random() * 5)::INT] AS c3,
       random() AS u1, random() AS u2, random() AS u3
FROM range(%d) t(i);
CREATE OR REPLACE TABLE synth.cohort AS
SELECT unit_id,
       u1 < 1 / (1 + exp(-(%s + CASE c1 WHEN 'north' THEN 0.3 WHEN 'east' THEN -0.2 ELSE 0 END))) AS treated,
       * EXCLUDE (unit_id, u1, u2, u3),
       (u2 < 0.2 + 0.05 * (x01 > 0)::INT)::INT AS y_bin,
       100 + 3 * x01 - 2 * x02 + 10 * u3 AS y_cont
FROM synth.base;
DROP TABLE synth.base;
`, num, n, lin)
}

// BenchStudy is the study file of the whole-run benchmark; %s is the DSN.
var BenchStudy = BenchStudyWith(BenchNumeric)

// BenchStudyWith is BenchStudy over BenchCohortSQLWith(n, numeric)'s
// columns: the numeric covariates x01 … xNN and c1, c2, c3.
func BenchStudyWith(numeric int) string {
	numeric = max(numeric, 6)
	covs := make([]string, 0, numeric+3)
	for j := 1; j <= numeric; j++ {
		covs = append(covs, fmt.Sprintf("x%02d", j))
	}
	covs = append(covs, "c1", "c2", "c3")
	return `study: bench_run
warehouse:
  engine: duckdb
  dsn: %s
cohort:
  sql: select * from synth.cohort
  unit: unit_id
  treatment: treated
  outcomes: [y_bin, y_cont]
  covariates: [` + strings.Join(covs, ", ") + `]
support: minmax
matching:
  algorithm: greedy
  caliper: 0.2
weighting: [att, ate, overlap]
balance:
  on_fail: warn
output:
  prefix: bench_run_
  keep_runs: 2
`
}
