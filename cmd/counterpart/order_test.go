package main

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"path/filepath"
	"strings"
	"testing"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/match/demo"
	"counterpart/warehouse"
	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// Issue #16: the same data must give the same results whatever order the
// engine returns the cohort's rows in. The tests below store the demo
// cohort in several physical row orders (and, on Postgres, read it through
// forced parallel scans), run the same study on each and demand
// byte-identical published tables. Synthetic data only.

// orderUnits is the cohort size: big enough that many treated units share
// a score (the demo's covariates are all discrete), small enough for a
// test.
const orderUnits = 4000

// orderSeeds name the shuffled copies of the cohort table besides the
// natural (generated) order.
var orderSeeds = []string{"s1", "s2", "s3"}

// orderStudy is a demo-like study (match/demo's StudyFile): every
// covariate discrete, so many propensity scores tie and a greedy match's
// tie-break decides pairs. Placeholders: study name, engine, DSN, table,
// fit_in, matching block.
const orderStudy = `study: %s
warehouse:
  engine: %s
  dsn: "%s"
cohort:
  sql: |
    select member_id, coached, age, sex, region, prior_admits, charlson,
           lives_alone, ef_reduced, readmit_30d, cost_90d,
           followup_days, readmitted, er_visits, enrolled_months
    from marts.%s
  unit: member_id
  treatment: coached
  outcomes: [readmit_30d, cost_90d]
  covariates: [age, sex, region, prior_admits, charlson, lives_alone, ef_reduced]
  time_to_event:
    - {name: readmission, time: followup_days, event: readmitted, horizons: [180, 365]}
  rates:
    - {name: emergency_visits, count: er_visits, exposure: enrolled_months}
score:
  fit_in: %s
support: minmax
matching:
%s
weighting: [att, ate, overlap]
balance:
  on_fail: warn
output:
  keep_runs: 1
`

// orderMatchings are the matching blocks run on every order: greedy 1:1
// with a caliper and an exact stratum (the demo's), and optimal 1:1 in the
// same strata. Full matching is in-memory only (validateFitIn).
var orderMatchings = []struct {
	name, block string
	memoryOnly  bool
}{
	{"greedy", "  algorithm: greedy\n  controls: 1\n  caliper: 0.2\n  exact_on: [sex]\n  order: high-score-first", false},
	{"optimal", "  algorithm: optimal\n  controls: 1\n  caliper: 0.2\n  exact_on: [sex]", false},
	{"full", "  algorithm: full\n  max_controls: 4\n  exact_on: [sex]", true},
}

// orderTables are the published tables compared across orders: query text
// (%s is the prefix) in a total order, so that equal tables give equal
// row lists. The balance view is left out: the engine computes it when it
// is read, not the tool.
var orderTables = []struct{ name, query string }{
	{"scores", "select member_id, treated, ps, logit_ps, in_support from %scurrent_scores order by member_id"},
	{"matches", "select set_id, member_id, treated, set_weight, match_distance from %scurrent_matches order by set_id, member_id"},
	{"weights", "select member_id, treated, att, ate, overlap from %scurrent_weights order by member_id"},
	{"effects", `select outcome, adjustment, estimand, contrast, method, horizon, estimate, std_error, ci_low, ci_high, p_value,
		n_treated, n_control, n_missing, e_value, e_value_ci, rosenbaum_gamma from %scurrent_effects
		order by outcome, adjustment, estimand, contrast, method, horizon nulls first`},
	{"survival", "select outcome, adjustment, treated, time, at_risk, events, censored, survival, std_error from %scurrent_survival order by outcome, adjustment, treated, time"},
	{"model", "select model from %sruns"},
	{"balance_summary", "select balance from %sruns"},
}

// orderVariant is one way of reading the cohort: a physical order
// (table) and, on Postgres, whether parallel scans are forced.
type orderVariant struct {
	name, table string
	parallel    bool
}

// TestRowOrderDuckDB runs the order conformance check on DuckDB: the
// natural order, the natural order again (the control: a difference
// between two identical runs is nondeterminism, not storage order — the
// figures keep the two apart — and must be zero too) and three
// md5-shuffled copies.
func TestRowOrderDuckDB(t *testing.T) {
	if testing.Short() {
		t.Skip("row-order conformance: many full runs")
	}
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "order.duckdb")
	loadOrderCohort(t, "duckdb", path)
	db, err := sql.Open("duckdb", path)
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range orderSeeds {
		if _, err := db.ExecContext(ctx, warehousetest.ShuffledCopySQL("marts.hf_"+s, "marts.hf_members", "member_id", s)); err != nil {
			t.Fatal(err)
		}
	}
	db.Close()
	q := duckQuerier(path)
	variants := []orderVariant{{"natural", "hf_members", false}, {"natural_rerun", "hf_members", false}}
	for _, s := range orderSeeds {
		variants = append(variants, orderVariant{s, "hf_" + s, false})
	}
	rowOrder(t, "duckdb", func(orderVariant) string { return path }, variants, q)
}

// TestRowOrderPostgres runs the order conformance check on Postgres: the
// natural order (twice, the control of TestRowOrderDuckDB) and three
// shuffled copies read by plain scans, then the natural order and one
// shuffle read with parallel scans forced on for every session the tool
// opens (warehousetest.ParallelDSN), which also puts the warehouse-scale
// sums under parallel aggregation.
func TestRowOrderPostgres(t *testing.T) {
	if testing.Short() {
		t.Skip("row-order conformance: many full runs")
	}
	dsn := pgtest.NewDatabase(t)
	loadOrderCohort(t, "postgres", dsn)
	for _, s := range orderSeeds {
		pgtest.Exec(t, dsn, warehousetest.ShuffledCopySQL("marts.hf_"+s, "marts.hf_members", "member_id", s))
	}
	pgtest.Exec(t, dsn, "ANALYZE")
	par := warehousetest.ParallelDSN(dsn)
	// The parallel variants mean nothing unless the planner really runs
	// the cohort query under a Gather with the tool's DSN.
	var plan strings.Builder
	for _, r := range pgtest.Query(t, par, "EXPLAIN SELECT member_id, coached FROM marts.hf_s1") {
		fmt.Fprintln(&plan, r...)
	}
	if !strings.Contains(plan.String(), "Gather") || !strings.Contains(plan.String(), "Parallel Seq Scan") {
		t.Fatalf("parallel settings of %s did not give a parallel plan:\n%s", warehousetest.ParallelSettings, plan.String())
	}
	variants := []orderVariant{{"natural", "hf_members", false}, {"natural_rerun", "hf_members", false}}
	for _, s := range orderSeeds {
		variants = append(variants, orderVariant{s, "hf_" + s, false})
	}
	// Parallel reads of two of the orders: each read is a fresh
	// interleaving of the workers' blocks.
	variants = append(variants, orderVariant{"natural_parallel", "hf_members", true}, orderVariant{orderSeeds[0] + "_parallel", "hf_" + orderSeeds[0], true})
	dsnFor := func(v orderVariant) string {
		if v.parallel {
			return par
		}
		return dsn
	}
	rowOrder(t, "postgres", dsnFor, variants, func(t *testing.T, query string) [][]any {
		t.Helper()
		return pgtest.Query(t, dsn, query)
	})
}

// loadOrderCohort writes match/demo's synthetic members (fixed seed) into
// marts.hf_members at dsn, typed so that both engines take the same Go
// values (BIGINT for the demo's INTEGER columns: Postgres's binary COPY does
// not narrow).
func loadOrderCohort(t *testing.T, engine, dsn string) {
	t.Helper()
	cols := demo.Columns(demo.Generate(orderUnits, 20261204))
	for i := range cols {
		switch cols[i].Type {
		case "INTEGER":
			cols[i].Type = "BIGINT"
		case "DOUBLE":
			cols[i].Type = "DOUBLE PRECISION"
		}
	}
	if err := warehouse.LoadTable(context.Background(), engine, dsn, "marts", "hf_members", demo.TableComment, cols); err != nil {
		t.Fatal(err)
	}
}

// orderResult is one run's published tables, by orderTables name.
type orderResult map[string][][]any

// rowOrder runs every matching block in both modes on every variant and
// compares each variant's published tables with the first variant's:
// every table must be byte-identical (warehousetest.Canon). It logs one
// line of figures per variant (quotable with -v) and fails with the number
// of pairs that changed (treated units matched to a different control set).
func rowOrder(t *testing.T, engine string, dsnFor func(orderVariant) string, variants []orderVariant, q querier) {
	// The shuffles must really change the order a plain scan returns, or
	// the comparison proves nothing.
	first := func(table string) string {
		return fmt.Sprint(q(t, "select member_id from marts."+table+" limit 20"))
	}
	for _, s := range orderSeeds {
		if first("hf_"+s) == first("hf_members") {
			t.Fatalf("%s: marts.hf_%s scans in the natural order; the shuffle did not take", engine, s)
		}
	}
	for _, mode := range []string{"memory", "warehouse"} {
		for _, m := range orderMatchings {
			if m.memoryOnly && mode == "warehouse" {
				continue
			}
			t.Run(mode+"/"+m.name, func(t *testing.T) {
				results := make([]orderResult, len(variants))
				for i, v := range variants {
					name := fmt.Sprintf("ord_%s_%s_%s", mode[:3], m.name, v.name)
					study := writeStudy(t, fmt.Sprintf(orderStudy, name, engine, dsnFor(v), v.table, mode, m.block))
					var stdout, stderr bytes.Buffer
					if code := run(context.Background(), []string{"counterpart", "run", "--json", study}, &stdout, &stderr); code != exitOK {
						t.Fatalf("%s: exit %d: %s", v.name, code, stderr.String())
					}
					var sum struct {
						Status string `json:"status"`
					}
					if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil || sum.Status != "succeeded" {
						t.Fatalf("%s: summary %v, status %q", v.name, err, sum.Status)
					}
					results[i] = orderResult{}
					for _, tb := range orderTables {
						results[i][tb.name] = q(t, fmt.Sprintf(tb.query, name+"_"))
					}
					if len(results[i]["matches"]) == 0 || len(results[i]["effects"]) == 0 {
						t.Fatalf("%s: published no matches or effects; the study is degenerate", v.name)
					}
				}
				compareOrders(t, engine+"/"+mode+"/"+m.name, variants, results)
			})
		}
	}
}

// compareOrders compares every variant's result with variants[0]'s.
func compareOrders(t *testing.T, label string, variants []orderVariant, results []orderResult) {
	t.Helper()
	ref := results[0]
	treated := len(warehousetest.ControlSets(ref["matches"]))
	for i := 1; i < len(variants); i++ {
		got := results[i]
		pairs, examples := warehousetest.PairsChanged(ref["matches"], got["matches"])
		var figures, bad []string
		for _, tb := range orderTables {
			onlyRef, onlyGot := warehousetest.RowDiff(ref[tb.name], got[tb.name])
			n := max(onlyRef, onlyGot)
			figures = append(figures, fmt.Sprintf("%s=%d/%d", tb.name, n, len(ref[tb.name])))
			if n > 0 {
				msg := fmt.Sprintf("%s: %d of %d rows differ", tb.name, n, len(ref[tb.name]))
				if tb.name == "effects" {
					// Aggregate rows: name a few by outcome, adjustment,
					// estimand, contrast, method and horizon.
					msg += " (e.g. " + strings.Join(warehousetest.OnlyIn(ref[tb.name], got[tb.name], 6, 3), "; ") + ")"
				}
				bad = append(bad, msg)
			}
		}
		t.Logf("row-order figures %s %s vs %s: pairs_changed=%d/%d rows_differing[%s]",
			label, variants[i].name, variants[0].name, pairs, treated, strings.Join(figures, " "))
		if pairs > 0 || len(bad) > 0 {
			eg := ""
			if pairs > 0 {
				eg = " (e.g. units " + strings.Join(examples, ", ") + ")"
			}
			t.Errorf("%s: reading the cohort as %s instead of %s changed %d of %d treated units' control sets%s; %s",
				label, variants[i].name, variants[0].name, pairs, treated, eg, strings.Join(bad, "; "))
		}
	}
}
