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

	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// reshuffleNight is the night the unchanged-night tests run (any night of
// the 30 with members coming and going would do).
const reshuffleNight = "12"

// reshuffle is one rerun of the unchanged night: the members table
// rewritten in the order of seed and, on Postgres, whether the rerun reads
// with parallel scans forced on.
type reshuffle struct {
	seed     string
	parallel bool
}

// TestNightlyReshuffleDuckDB and TestNightlyReshufflePostgres check zero
// churn on an unchanged night (issue #16): night 12 of the nightly
// simulation run once, then again on the same data after the members table
// was physically reshuffled — without keep_prior (which would hide churn
// by keeping yesterday's pairs) and without --skip-unchanged (which would
// not run at all). Every treated unit must keep exactly the same control
// set, and the published scores, matches and weights must be
// bit-identical.
func TestNightlyReshuffleDuckDB(t *testing.T) {
	if testing.Short() {
		t.Skip("nightly reruns")
	}
	path := filepath.Join(t.TempDir(), "nightly.duckdb")
	exec := func(t *testing.T, stmt string) {
		t.Helper()
		db, err := sql.Open("duckdb", path)
		if err != nil {
			t.Fatal(err)
		}
		defer db.Close()
		if _, err := db.Exec(stmt); err != nil {
			t.Fatalf("%.200s: %v", stmt, err)
		}
	}
	exec(t, membersSQL("range(1, 2501) t(i)"))
	q := duckQuerier(path)
	nightlyReshuffle(t, "duckdb", func(bool) string { return path }, exec, q,
		[]reshuffle{{"n1", false}, {"n2", false}})
}

func TestNightlyReshufflePostgres(t *testing.T) {
	if testing.Short() {
		t.Skip("nightly reruns")
	}
	dsn := pgtest.NewDatabase(t)
	pgtest.Exec(t, dsn, membersSQL("generate_series(1, 2500) AS g(i)"))
	par := warehousetest.ParallelDSN(dsn)
	dsnFor := func(parallel bool) string {
		if parallel {
			return par
		}
		return dsn
	}
	exec := func(t *testing.T, stmt string) { t.Helper(); pgtest.Exec(t, dsn, stmt) }
	q := func(t *testing.T, query string) [][]any { t.Helper(); return pgtest.Query(t, dsn, query) }
	nightlyReshuffle(t, "postgres", dsnFor, exec, q, []reshuffle{{"n1", false}, {"n2", true}})
}

// nightlyVariants are the study texts of the unchanged-night check: the
// nightly study as simulated (continuous covariates: scores hardly ever
// tie, so pairs churn only through bits of the fit) and the same study with
// the numeric covariates rounded to whole numbers, as coded warehouse data
// often are, so that many scores tie and the greedy tie-break decides
// pairs. Both drop keep_prior.
var nightlyVariants = []struct{ name, old, new string }{
	{"as simulated", "", ""},
	{"rounded covariates", "select unit_id, treated, x1, x2 + 0.004 * ${NIGHT} * cos(unit_id) as x2,",
		"select unit_id, treated, round(x1) as x1, round(x2 + 0.004 * ${NIGHT} * cos(unit_id)) as x2,"},
}

// nightlyReshuffle runs reshuffleNight of each nightly variant on the
// members table, then once per reshuffle after rewriting the table in that
// order, and compares each rerun with the variant's first run.
func nightlyReshuffle(t *testing.T, engine string, dsnFor func(parallel bool) string, exec func(*testing.T, string), q querier, reruns []reshuffle) {
	t.Setenv("NIGHT", reshuffleNight)
	const keep = "  keep_prior: true\n"
	if !strings.Contains(nightlyStudy, keep) {
		t.Fatal("nightlyStudy no longer sets keep_prior; update this test")
	}
	for _, v := range nightlyVariants {
		t.Run(v.name, func(t *testing.T) {
			text := strings.Replace(nightlyStudy, keep, "", 1)
			if v.old != "" {
				if !strings.Contains(text, v.old) {
					t.Fatalf("nightlyStudy no longer contains %q; update this test", v.old)
				}
				text = strings.Replace(text, v.old, v.new, 1)
			}
			unchangedNight(t, engine, text, dsnFor, exec, q, reruns)
		})
	}
}

// unchangedNight runs the study text once, then once per reshuffle, and
// demands zero pairs changed and bit-identical scores, matches and
// weights.
func unchangedNight(t *testing.T, engine, text string, dsnFor func(parallel bool) string, exec func(*testing.T, string), q querier, reruns []reshuffle) {
	runNight := func(parallel bool) string {
		t.Helper()
		study := writeStudy(t, fmt.Sprintf(text, engine, dsnFor(parallel)))
		var stdout, stderr bytes.Buffer
		if code := run(context.Background(), []string{"counterpart", "run", "--json", study}, &stdout, &stderr); code != exitOK {
			t.Fatalf("exit %d: %s", code, stderr.String())
		}
		var sum struct {
			RunID  string `json:"run_id"`
			Status string `json:"status"`
		}
		if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil || sum.Status != "succeeded" {
			t.Fatalf("summary %v, status %q", err, sum.Status)
		}
		return sum.RunID
	}
	tables := []struct{ name, query string }{
		{"matches", "select set_id, unit_id, treated, set_weight, match_distance from nightly_matches where run_id = '%s' order by set_id, unit_id"},
		{"scores", "select unit_id, treated, ps, logit_ps, in_support from nightly_scores where run_id = '%s' order by unit_id"},
		{"weights", "select unit_id, treated, att from nightly_weights where run_id = '%s' order by unit_id"},
	}
	read := func(runID string) map[string][][]any {
		out := map[string][][]any{}
		for _, tb := range tables {
			out[tb.name] = q(t, fmt.Sprintf(tb.query, runID))
		}
		return out
	}
	// Start from the generated order (ascending unit_id), whatever an
	// earlier variant's reshuffles left: a shuffle's order depends only on
	// its seed, so a rerun must never meet the order of the first run.
	exec(t, "CREATE TABLE members_sorted AS SELECT * FROM members ORDER BY unit_id; DROP TABLE members; ALTER TABLE members_sorted RENAME TO members")
	first := read(runNight(false))
	treated := len(warehousetest.ControlSets(first["matches"]))
	if treated == 0 {
		t.Fatal("night published no matched sets; the simulation is degenerate")
	}
	for _, r := range reruns {
		before := fmt.Sprint(q(t, "select unit_id from members limit 20"))
		exec(t, warehousetest.ShuffledCopySQL("members_shuffled", "members", "unit_id", r.seed)+
			"; DROP TABLE members; ALTER TABLE members_shuffled RENAME TO members")
		if after := fmt.Sprint(q(t, "select unit_id from members limit 20")); after == before {
			t.Fatalf("reshuffle %s left the scan order as it was", r.seed)
		}
		got := read(runNight(r.parallel))
		pairs, examples := warehousetest.PairsChanged(first["matches"], got["matches"])
		var figures []string
		for _, tb := range tables {
			a, b := warehousetest.RowDiff(first[tb.name], got[tb.name])
			figures = append(figures, fmt.Sprintf("%s=%d/%d", tb.name, max(a, b), len(first[tb.name])))
		}
		t.Logf("unchanged-night figures %s reshuffle %s (parallel %v): pairs_changed=%d/%d rows_differing[%s]",
			engine, r.seed, r.parallel, pairs, treated, strings.Join(figures, " "))
		if pairs > 0 {
			t.Errorf("%s: unchanged night rerun on a reshuffled table (%s, parallel %v): %d of %d treated units matched to a different control set (e.g. units %s); want 0",
				engine, r.seed, r.parallel, pairs, treated, strings.Join(examples, ", "))
		}
		for _, f := range figures {
			if !strings.Contains(f, "=0/") {
				t.Errorf("%s: unchanged night rerun on a reshuffled table (%s, parallel %v): rows differ in bits: %s", engine, r.seed, r.parallel, f)
			}
		}
	}
}
