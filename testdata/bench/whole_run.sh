#!/usr/bin/env bash
# Whole-run benchmark on DuckDB (issue: foundation, item 13).
# 1,000,000 units, ~10 % treated, 20 covariates of which 3 categorical.
# Prints: the floors (plain read into Go: database/sql rows and DuckDB
# data chunks), the whole run with seconds per
# stage and peak RSS, and statsmodels' Logit fit on the same design
# (Debian python3-statsmodels) when it is installed.
set -euo pipefail
cd "$(dirname "$0")/../.."
units=${UNITS:-1000000}
out=${OUT:-/tmp/counterpart-bench}
mkdir -p "$out"
go build -o "$out/counterpart" ./cmd/counterpart
go build -o "$out/readfloor" ./testdata/bench/readfloor
go run ./testdata/bench/mkwarehouse -out "$out/bench.duckdb" -units "$units" -csv "$out/bench.csv"
go run ./testdata/bench/mkwarehouse -out "$out/bench.duckdb" -study "$out/bench.yaml"
rss() { grep 'Maximum resident' "$1" | awk '{printf "%.0f MB", $6/1024}'; }

for read in sql chunks; do
  echo "== floor: read the same columns into Go ($read)"
  /usr/bin/time -v "$out/readfloor" -db "$out/bench.duckdb" -read "$read" 2> "$out/floor-$read.time"
  grep -E 'Elapsed' "$out/floor-$read.time"; echo "peak RSS $(rss "$out/floor-$read.time")"
done

echo "== whole run"
/usr/bin/time -v "$out/counterpart" run --json "$out/bench.yaml" > "$out/run.json" 2> "$out/run.time" || true
grep -E 'Elapsed' "$out/run.time"; echo "peak RSS $(rss "$out/run.time")"
python3 -c "import json; s=json.load(open('$out/run.json')); print('stage seconds', {k: round(v, 2) for k, v in s['stage_seconds'].items()}); print('status', s['status'], 'iterations', s['model']['iterations'])"

if /usr/bin/python3 -c 'import statsmodels' 2>/dev/null; then
  echo "== statsmodels Logit on the same design"
  /usr/bin/python3 testdata/bench/statsmodels_fit.py "$out/bench.csv"
fi
