package main

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"regexp"
	"strconv"
	"testing"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// membersSQL builds an evolving synthetic membership from deterministic
// formulas (the same rows on both engines): each unit joins on night
// join_night and leaves on night leave_night, so units come and go.
// Synthetic numbers only.
func membersSQL(from string) string {
	return fmt.Sprintf(`CREATE TABLE members AS
SELECT i AS unit_id,
       (sin(i * 1.3) + 0.4 * cos(i * 0.11) > 0.35) AS treated,
       10 * sin(i * 1.3) AS x1,
       5 * cos(i * 0.7) AS x2,
       CASE i %% 3 WHEN 0 THEN 'north' WHEN 1 THEN 'south' ELSE 'east' END AS region,
       2 * sin(i * 1.3) + cos(i * 0.3) AS y_cont,
       (i * 7) %% 45 - 15 AS join_night,
       (i * 7) %% 45 - 15 + 25 + (i * 13) %% 40 AS leave_night
FROM %s`, from)
}

// nightlyStudy reads the members present on night ${NIGHT}; x2 drifts a
// little every night. keep_prior keeps yesterday's pairs that still hold.
const nightlyStudy = `study: nightly
warehouse:
  engine: %s
  dsn: %s
cohort:
  sql: |
    select unit_id, treated, x1, x2 + 0.004 * ${NIGHT} * cos(unit_id) as x2, region, y_cont
    from members
    where join_night <= ${NIGHT} and leave_night > ${NIGHT}
  unit: unit_id
  treatment: treated
  outcomes: [y_cont]
  covariates: [x1, x2, region]
support: minmax
matching:
  algorithm: greedy
  caliper: 0.2
  exact_on: [region]
  keep_prior: true
weighting: [att]
balance:
  on_fail: warn
output:
  keep_runs: 5
`

// querier runs a query on the engine under test and returns its rows.
type querier func(t *testing.T, q string) [][]any

// duckQuerier queries the DuckDB file at path, read-only, one open per
// query (the CLI under test opens the file between them).
func duckQuerier(path string) querier {
	return func(t *testing.T, query string) [][]any {
		t.Helper()
		db, err := sql.Open("duckdb", path+"?access_mode=READ_ONLY")
		if err != nil {
			t.Fatal(err)
		}
		defer db.Close()
		return sqlRows(t, db, query)
	}
}

// TestNightlyDuckDB and TestNightlyPostgres simulate 30 nights on an
// evolving cohort (units join and leave, a covariate drifts). Every night
// must publish atomically (the current views show exactly that night's
// run); with keep_prior at least 95% of yesterday's pairs that are still
// eligible (both units present and in support, same exact stratum, inside
// today's caliper — judged here from the published tables, independently
// of the tool) survive; runs diff's kept count equals a direct SQL count;
// retention keeps 5 runs; and an unchanged rerun with --skip-unchanged
// exits 5 and leaves every table's row count as it was.
func TestNightlyDuckDB(t *testing.T) {
	if testing.Short() {
		t.Skip("30-night simulation")
	}
	path := filepath.Join(t.TempDir(), "nightly.duckdb")
	db, err := sql.Open("duckdb", path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec(membersSQL("range(1, 2501) t(i)")); err != nil {
		t.Fatal(err)
	}
	db.Close()
	q := duckQuerier(path)
	nightly(t, "duckdb", path, q)
}

func TestNightlyPostgres(t *testing.T) {
	if testing.Short() {
		t.Skip("30-night simulation")
	}
	dsn := pgtest.NewDatabase(t)
	pgtest.Exec(t, dsn, membersSQL("generate_series(1, 2500) AS g(i)"))
	nightly(t, "postgres", dsn, func(t *testing.T, query string) [][]any {
		t.Helper()
		return pgtest.Query(t, dsn, query)
	})
}

func sqlRows(t *testing.T, db *sql.DB, query string) [][]any {
	t.Helper()
	return warehousetest.SQLRows(t, db, query)
}

func num(v any) float64 {
	switch x := v.(type) {
	case int64:
		return float64(x)
	case int32:
		return float64(x)
	case float64:
		return x
	case string:
		f, _ := strconv.ParseFloat(x, 64)
		return f
	}
	f, _ := strconv.ParseFloat(fmt.Sprint(v), 64)
	return f
}

func nightly(t *testing.T, engine, dsn string, q querier) {
	ctx := context.Background()
	study := writeStudy(t, fmt.Sprintf(nightlyStudy, engine, dsn))
	type pairKey struct{ t, c int64 }
	var prevRun string
	var prevPairs map[pairKey]bool
	keptRe := regexp.MustCompile(`kept (\d+)`)
	for night := 1; night <= 30; night++ {
		t.Setenv("NIGHT", strconv.Itoa(night))
		var stdout, stderr bytes.Buffer
		if code := run(ctx, []string{"counterpart", "run", "--json", study}, &stdout, &stderr); code != exitOK {
			t.Fatalf("night %d: exit %d: %s", night, code, stderr.String())
		}
		var sum struct {
			RunID    string `json:"run_id"`
			Status   string `json:"status"`
			Matching struct {
				Width float64 `json:"caliper_width"`
			} `json:"matching"`
		}
		if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil || sum.Status != "succeeded" {
			t.Fatalf("night %d: summary %v %s", night, err, sum.Status)
		}
		cur := q(t, "select distinct run_id from nightly_current_scores")
		if len(cur) != 1 || fmt.Sprint(cur[0][0]) != sum.RunID {
			t.Fatalf("night %d: current views show %v, want only %s", night, cur, sum.RunID)
		}
		pairs := map[pairKey]bool{}
		for _, r := range q(t, fmt.Sprintf(`select t.unit_id, c.unit_id from nightly_matches t join nightly_matches c
			on t.run_id = c.run_id and t.set_id = c.set_id and t.treated and not c.treated where t.run_id = '%s'`, sum.RunID)) {
			pairs[pairKey{int64(num(r[0])), int64(num(r[1]))}] = true
		}
		if prevPairs != nil {
			// Today's state of every unit, from the published tables.
			type unit struct {
				logit  float64
				in     bool
				region string
			}
			units := map[int64]unit{}
			for _, r := range q(t, fmt.Sprintf(`select s.unit_id, s.logit_ps, s.in_support, c.region from nightly_scores s
				join nightly_cohort c on c.run_id = s.run_id and c.unit_id = s.unit_id where s.run_id = '%s'`, sum.RunID)) {
				units[int64(num(r[0]))] = unit{logit: num(r[1]), in: r[2] == true, region: fmt.Sprint(r[3])}
			}
			eligible, survived := 0, 0
			for p := range prevPairs {
				a, okA := units[p.t]
				b, okB := units[p.c]
				if !okA || !okB || !a.in || !b.in || a.region != b.region || math.Abs(a.logit-b.logit) > sum.Matching.Width {
					continue
				}
				eligible++
				if pairs[p] {
					survived++
				}
			}
			if eligible == 0 {
				t.Fatalf("night %d: no still-eligible pairs; the simulation is degenerate", night)
			}
			if rate := float64(survived) / float64(eligible); rate < 0.95 {
				t.Errorf("night %d: %d of %d still-eligible pairs survived (%.1f%%), want at least 95%%", night, survived, eligible, 100*rate)
			}
			// runs diff against a direct count of treated units whose
			// control set is the same in both runs.
			var out, errb bytes.Buffer
			if code := run(ctx, []string{"counterpart", "runs", "diff", "--study", study, prevRun, sum.RunID}, &out, &errb); code != exitOK {
				t.Fatalf("night %d: runs diff exit %d: %s", night, code, errb.String())
			}
			m := keptRe.FindStringSubmatch(out.String())
			if m == nil {
				t.Fatalf("night %d: runs diff output has no kept count: %s", night, out.String())
			}
			direct := 0
			ctrl := func(run string) map[int64]map[int64]bool {
				sets := map[int64]map[int64]bool{}
				for _, r := range q(t, fmt.Sprintf(`select t.unit_id, c.unit_id from nightly_matches t join nightly_matches c
					on t.run_id = c.run_id and t.set_id = c.set_id and t.treated and not c.treated where t.run_id = '%s'`, run)) {
					tu := int64(num(r[0]))
					if sets[tu] == nil {
						sets[tu] = map[int64]bool{}
					}
					sets[tu][int64(num(r[1]))] = true
				}
				return sets
			}
			a, b := ctrl(prevRun), ctrl(sum.RunID)
			for tu, cs := range b {
				if as, ok := a[tu]; ok && fmt.Sprint(as) == fmt.Sprint(cs) {
					direct++
				}
			}
			if m[1] != strconv.Itoa(direct) {
				t.Errorf("night %d: runs diff says kept %s, direct count %d", night, m[1], direct)
			}
		}
		prevRun, prevPairs = sum.RunID, pairs
	}
	runs := q(t, "select count(*) from nightly_runs")
	if num(runs[0][0]) != 5 {
		t.Errorf("retention: %v runs kept, want 5", runs[0][0])
	}
	orphans := q(t, "select count(*) from nightly_scores where run_id not in (select run_id from nightly_runs)")
	if num(orphans[0][0]) != 0 {
		t.Errorf("retention left %v score rows of deleted runs", orphans[0][0])
	}

	// An unchanged night: exit 5 and nothing written.
	counts := func() string {
		return fmt.Sprint(q(t, `select (select count(*) from nightly_runs), (select count(*) from nightly_cohort),
			(select count(*) from nightly_scores), (select count(*) from nightly_matches), (select count(*) from nightly_weights),
			(select count(*) from nightly_effects)`))
	}
	before := counts()
	var stdout, stderr bytes.Buffer
	if code := run(ctx, []string{"counterpart", "run", "--skip-unchanged", study}, &stdout, &stderr); code != exitUnchanged {
		t.Fatalf("unchanged rerun: exit %d, want %d: %s", code, exitUnchanged, stderr.String())
	}
	if after := counts(); after != before {
		t.Errorf("--skip-unchanged wrote rows: %s -> %s", before, after)
	}
}
