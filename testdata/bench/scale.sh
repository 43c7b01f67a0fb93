#!/usr/bin/env bash
# Warehouse-scale benchmark (issue "Warehouse-scale mode"): the same study
# run with score.fit_in: memory and score.fit_in: warehouse, printing the
# wall time, the seconds per stage (--json stage_seconds) and the peak RSS
# of each mode, then how the two runs' matched sets, scores and weights
# differ (testdata/bench/modediff).
#
# DuckDB: UNITS units (default 10,000,000) of warehousetest.BenchCohortSQLWith:
# ~10 % treated, NUMERIC numeric (default 27) + 3 categorical covariates,
# built by testdata/bench/mkwarehouse.
# Postgres: only when PG_DSN is set (a scratch database you own):
# generate_series builds PG_UNITS units (default 2,000,000) of a table of
# the same design (different random draws) in schema synth_scale, which
# the script drops and recreates.
# MODES (default "memory warehouse") and ENGINES (default "duckdb
# postgres") choose what runs.
set -euo pipefail
cd "$(dirname "$0")/../.."
units=${UNITS:-10000000}
numeric=${NUMERIC:-27}
modes=${MODES:-memory warehouse}
engines=${ENGINES:-duckdb postgres}
out=${OUT:-/tmp/counterpart-scale}
mkdir -p "$out"
go build -o "$out/counterpart" ./cmd/counterpart
go build -o "$out/mkwarehouse" ./testdata/bench/mkwarehouse
rss() { grep 'Maximum resident' "$1" | awk '{printf "%.0f MB", $6/1024}'; }
run() { # label yaml
  /usr/bin/time -v "$out/counterpart" run --json "$2" > "$out/$1.json" 2> "$out/$1.time" || true
  printf '%-30s %s  peak RSS %s\n' "$1" "$(grep -E 'Elapsed' "$out/$1.time" | awk '{print $NF}')" "$(rss "$out/$1.time")"
  python3 -c "import json; s=json.load(open('$out/$1.json')); print('   status', s['status'], 'iterations', s['model']['iterations'], 'stage seconds', {k: round(v, 2) for k, v in s['stage_seconds'].items()})" || tail -3 "$out/$1.time"
}

if [[ " $engines " == *" duckdb "* ]]; then
  db="$out/scale-$units-$numeric.duckdb"
  [ -f "$db" ] || "$out/mkwarehouse" -out "$db" -units "$units" -numeric "$numeric"
  for mode in $modes; do
    "$out/mkwarehouse" -out "$db" -numeric "$numeric" -fit-in "$mode" -prefix "s_${mode}_" -study "$out/duckdb-$mode.yaml"
    run "duckdb-$units-$mode" "$out/duckdb-$mode.yaml"
  done
  [ "$modes" = "memory warehouse" ] && go run ./testdata/bench/modediff -db "$db"
fi

if [ -n "${PG_DSN:-}" ] && [[ " $engines " == *" postgres "* ]]; then
  pg_units=${PG_UNITS:-2000000}
  num=""; cols=""
  for j in $(seq -w 1 "$numeric"); do
    num="$num, (random() * 2 - 1) * (1 + $((10#$j)) % 4) + sin(i * $((10#$j))) AS x$j"; cols="$cols x$j,"
  done
  psql "$PG_DSN" -v ON_ERROR_STOP=1 -q <<SQL
DROP SCHEMA IF EXISTS synth_scale CASCADE;
CREATE SCHEMA synth_scale;
SELECT setseed(0.42);
CREATE TABLE synth_scale.base AS
SELECT i AS unit_id $num,
       (ARRAY['north','south','east','west','centre'])[1 + (i * 7) % 5] AS c1,
       (ARRAY['a','b','c','d','e'])[1 + floor(random() * 5)::int] AS c2,
       (ARRAY['p','q','r','s','t'])[1 + floor(random() * 5)::int] AS c3,
       random() AS u1, random() AS u2, random() AS u3
FROM generate_series(1, $pg_units) AS t(i);
CREATE TABLE synth_scale.cohort AS
SELECT unit_id, u1 < 1 / (1 + exp(-(-2.6 + 0.1 * x01 / 2 + 0.2 * x02 / 3 + 0.3 * x03 / 4 + 0.4 * x04 + 0.5 * x05 / 2 + 0.6 * x06 / 3
         + CASE c1 WHEN 'north' THEN 0.3 WHEN 'east' THEN -0.2 ELSE 0 END))) AS treated,
       $cols c1, c2, c3,
       (u2 < 0.2 + 0.05 * (x01 > 0)::int)::int AS y_bin, 100 + 3 * x01 - 2 * x02 + 10 * u3 AS y_cont
FROM synth_scale.base;
DROP TABLE synth_scale.base;
ANALYZE synth_scale.cohort;
SQL
  for mode in $modes; do
    "$out/mkwarehouse" -numeric "$numeric" -engine postgres -dsn "$PG_DSN" -fit-in "$mode" -prefix "s_${mode}_" \
      -from synth_scale.cohort -study "$out/pg-$mode.yaml"
    run "postgres-$pg_units-$mode" "$out/pg-$mode.yaml"
  done
  [ "$modes" = "memory warehouse" ] && go run ./testdata/bench/modediff -print -schema public | psql "$PG_DSN" -At
fi
