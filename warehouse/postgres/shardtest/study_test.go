package shardtest

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"

	"counterpart/match/demo"
	"counterpart/match/study"
	"counterpart/warehouse/postgres/pgtest"
)

// studyText is the demo's study file pointed at table in the coordinator
// database: the cohort query also selects the partition column, the fit
// runs where mode says, and on_fail warn publishes whatever the balance.
// partitioned sets cohort.partition_column, which makes every
// warehouse-scale aggregate group by the partition key first.
func studyText(t *testing.T, name, dsn, table, mode string, partitioned bool) string {
	t.Helper()
	text := demo.StudyFile
	unit := "  unit: member_id\n"
	if partitioned {
		unit += "  partition_column: " + PartitionColumn + "\n"
	}
	for _, r := range [][2]string{
		{"study: hf_coaching\n", "study: " + name + "\n"},
		{"engine: duckdb ", "engine: postgres"},
		{"dsn: warehouse.duckdb", "dsn: " + dsn},
		{"er_visits, enrolled_months\n", "er_visits, enrolled_months, " + PartitionColumn + "\n"},
		{"from marts.hf_members\n", "from " + table + "\n"},
		{"  unit: member_id\n", unit},
		{"  model: logistic", "  fit_in: " + mode + "\n  model: logistic"},
		{"on_fail: reject", "on_fail: warn"},
		{"schema: main", "schema: public"},
		{"prefix: hf_coaching_", "prefix: " + name + "_"},
	} {
		if !strings.Contains(text, r[0]) {
			t.Fatalf("demo study file has no %q", r[0])
		}
		text = strings.Replace(text, r[0], r[1], 1)
	}
	return text
}

// runStudy parses and runs one study in process, as cmd/counterpart does.
func runStudy(t *testing.T, text string) *study.Summary {
	t.Helper()
	ctx := context.Background()
	s, err := study.Parse("shard.yaml", []byte(text), nil)
	if err != nil {
		t.Fatalf("parse study: %v", err)
	}
	wh, err := study.Open(ctx, s, false)
	if err != nil {
		t.Fatalf("open warehouse: %v", err)
	}
	defer wh.Close()
	sum, err := study.Run(ctx, s, wh, study.Options{})
	if err != nil {
		t.Fatalf("run %s: %v", s.Study, err)
	}
	if sum.Status != "succeeded" {
		t.Fatalf("run %s: status %s", s.Study, sum.Status)
	}
	return sum
}

// TestShardedRunsMatchSingleNode runs the demo study (3,000 synthetic
// members) on the sharded table and on the single-node table with the
// same rows, in memory and in the warehouse, and demands the same
// results: coefficients to 1e-10 (relative), identical matched sets
// (same units, same set numbers, same set weights), scores, distances and
// weights to 1e-10, effects and their SEs to 1e-9. The single-node run is
// the reference (its own tests compare it with the in-memory path and
// outside libraries); this checks that spreading the rows over shards
// and adding per-partition sums changes nothing a user can see.
func TestShardedRunsMatchSingleNode(t *testing.T) {
	c := New(t, 3000, 11)
	for _, mode := range []string{"memory", "warehouse"} {
		t.Run(mode, func(t *testing.T) {
			single := "single_" + mode
			sharded := "sharded_" + mode
			a := runStudy(t, studyText(t, single, c.DSN, Single, mode, false))
			before := c.Counts()
			b := runStudy(t, studyText(t, sharded, c.DSN, Sharded, mode, true))
			moved := c.Counts().Sub(before)
			if moved.FromShard == 0 {
				t.Fatalf("the sharded run read nothing from the shards (%v)", moved)
			}
			t.Logf("bytes of the whole %s-mode run (3,000 units) between coordinator and shards: %v", mode, moved)
			if len(a.Model.Terms) == 0 || len(a.Model.Terms) != len(b.Model.Terms) {
				t.Fatalf("%d model terms on one node, %d sharded", len(a.Model.Terms), len(b.Model.Terms))
			}
			for j, ta := range a.Model.Terms {
				tb := b.Model.Terms[j]
				if ta.Name != tb.Name || !near(float64(ta.Coef), float64(tb.Coef), 1e-10) || !near(float64(ta.SE), float64(tb.SE), 1e-10) {
					t.Errorf("term %d: single-node %s %v (SE %v), sharded %s %v (SE %v)", j, ta.Name, ta.Coef, ta.SE, tb.Name, tb.Coef, tb.SE)
				}
			}
			for _, tc := range []struct {
				table, query string
				tol          float64
			}{
				{"scores", "SELECT member_id, treated, ps, logit_ps, in_support FROM %s_scores ORDER BY member_id", 1e-10},
				{"matches", "SELECT set_id, member_id, treated, set_weight, match_distance FROM %s_matches ORDER BY set_id, member_id", 1e-10},
				{"weights", "SELECT member_id, treated, att, ate, overlap FROM %s_weights ORDER BY member_id", 1e-10},
				{"effects", `SELECT outcome, adjustment, contrast, method, horizon, estimate, std_error, ci_low, ci_high, n_treated, n_control, n_missing
					FROM %s_effects ORDER BY outcome, adjustment, contrast, method, horizon NULLS FIRST`, 1e-9},
			} {
				ra := pgtest.Query(t, c.DSN, fmt.Sprintf(tc.query, single))
				rb := pgtest.Query(t, c.DSN, fmt.Sprintf(tc.query, sharded))
				if len(ra) == 0 || len(ra) != len(rb) {
					t.Errorf("%s: %d rows on one node, %d sharded", tc.table, len(ra), len(rb))
					continue
				}
				bad := 0
				for i := range ra {
					for j := range ra[i] {
						if !sameValue(ra[i][j], rb[i][j], tc.tol) {
							if bad++; bad <= 3 {
								// Row numbers and columns only: no unit's values.
								t.Errorf("%s: row %d column %d differs between single-node and sharded runs", tc.table, i, j)
							}
						}
					}
				}
				if bad > 3 {
					t.Errorf("%s: %d values differ in all", tc.table, bad)
				}
			}
		})
	}
}

// near is |a − b| ≤ tol·max(1, |a|), both NaN counting as equal.
func near(a, b, tol float64) bool {
	if math.IsNaN(a) || math.IsNaN(b) {
		return math.IsNaN(a) && math.IsNaN(b)
	}
	return math.Abs(a-b) <= tol*math.Max(1, math.Abs(a))
}

// sameValue compares two values pgx decoded: doubles to tol (near),
// everything else exactly.
func sameValue(a, b any, tol float64) bool {
	fa, ok1 := a.(float64)
	fb, ok2 := b.(float64)
	if ok1 && ok2 {
		return near(fa, fb, tol)
	}
	return fmt.Sprint(a) == fmt.Sprint(b)
}
