package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"counterpart/match/demo"
)

// baseStudy is a valid study over the demo table; each bad-input case
// changes one thing. The data are the synthetic demo members: these tests
// check error handling, not statistics.
const baseStudy = `study: bad_inputs
warehouse:
  engine: duckdb
  dsn: WAREHOUSE
cohort:
  sql: |
    SQL
  unit: member_id
  treatment: coached
  outcomes: [readmit_30d, cost_90d]
  covariates: [COVARIATES]
matching:
  algorithm: greedy
  caliper: CALIPER
  controls: CONTROLS
output:
  schema: SCHEMA
  prefix: PREFIX
`

const baseSQL = `select member_id, coached, age, sex, region, prior_admits, charlson, readmit_30d, cost_90d from marts.hf_members`

type badCase struct {
	name string
	// edits replace placeholders of baseStudy (SQL, COVARIATES, ...).
	edits map[string]string
	// extra is appended to the study file.
	extra string
	// want is a fragment the one stderr line must contain.
	want string
}

func badCases() []badCase {
	return []badCase{
		{name: "unknown key", extra: "matchng:\n  controls: 2\n", want: `unknown key "matchng"`},
		{name: "misspelt nested key", edits: map[string]string{"  controls: CONTROLS": "  control: 1"}, want: `did you mean "controls"`},
		{name: "missing column", edits: map[string]string{"COVARIATES": "age, sex, weight_kg"}, want: "weight_kg"},
		{name: "duplicate unit ids", edits: map[string]string{"SQL": baseSQL + " union all (" + baseSQL + " limit 3)"}, want: "duplicate"},
		{name: "NULL treatment", edits: map[string]string{"SQL": strings.Replace(baseSQL, "coached,", "case when member_id % 50 = 0 then null else coached end as coached,", 1)}, want: "NULL"},
		{name: "NULL covariate", edits: map[string]string{"SQL": strings.Replace(baseSQL, "age,", "case when member_id % 40 = 0 then null else age end as age,", 1)}, want: "NULL"},
		{name: "non-binary treatment", edits: map[string]string{"SQL": strings.Replace(baseSQL, "coached,", "case when member_id % 7 = 0 then 2 else coached::int end as coached,", 1)}, want: "coached"},
		{name: "all treated", edits: map[string]string{"SQL": strings.Replace(baseSQL, "coached,", "true as coached,", 1)}, want: "true for every unit"},
		{name: "no controls in support", edits: map[string]string{"SQL": strings.Replace(baseSQL, "coached,", "false as coached,", 1)}, want: "false for every unit"},
		{name: "constant covariate", edits: map[string]string{"SQL": strings.Replace(baseSQL, "age,", "70 as age,", 1)}, want: "age"},
		{name: "text in a numeric covariate", edits: map[string]string{"SQL": strings.Replace(baseSQL, "age,", "case when member_id % 97 = 0 then 'n/a' else age::varchar end as age,", 1)}, want: "age"},
		{name: "empty cohort", edits: map[string]string{"SQL": baseSQL + " where false"}, want: "no rows"},
		{name: "SQL syntax error", edits: map[string]string{"SQL": "selec member_id from marts.hf_members"}, want: "cohort"},
		{name: "writing statement", edits: map[string]string{"SQL": "create table main.sneaky as " + baseSQL}, want: "read"},
		{name: "unsafe prefix", edits: map[string]string{"PREFIX": `"x; drop table y; --"`}, want: "output.prefix"},
		{name: "unsafe schema", edits: map[string]string{"SCHEMA": `"main\"--"`}, want: "output.schema"},
		{name: "negative caliper", edits: map[string]string{"CALIPER": "-0.2"}, want: "matching.caliper"},
		{name: "controls below one", edits: map[string]string{"CONTROLS": "0"}, want: "matching.controls"},
		{name: "perfect separation", edits: map[string]string{
			"SQL":        strings.Replace(baseSQL, "age,", "age, coached::int * 10 as referral_score,", 1),
			"COVARIATES": "age, sex, region, prior_admits, charlson, referral_score",
		}, want: "ridge"},
		{name: "unset environment variable", edits: map[string]string{"dsn: WAREHOUSE": "dsn: ${COUNTERPART_TEST_UNSET_DSN}"}, want: "COUNTERPART_TEST_UNSET_DSN"},
		{name: "missing output schema", edits: map[string]string{"SCHEMA": "reporting"}, want: "reporting"},
		{name: "zero follow-up time", edits: eventEdits("case when member_id % 30 = 0 then 0 else followup_days end", "readmitted", "er_visits", "enrolled_months", "[180]"), want: "units have a follow-up time"},
		{name: "NULL follow-up time", edits: eventEdits("case when member_id % 30 = 0 then null else followup_days end", "readmitted", "er_visits", "enrolled_months", "[180]"), want: "columns fu, ev"},
		{name: "event not 0/1", edits: eventEdits("followup_days", "case when member_id % 30 = 0 then 2 else readmitted::int end", "er_visits", "enrolled_months", "[180]"), want: "event value other than 0 or 1"},
		{name: "horizon beyond follow-up", edits: eventEdits("followup_days", "readmitted", "er_visits", "enrolled_months", "[180, 400]"), want: "horizon 400"},
		{name: "non-positive exposure", edits: eventEdits("followup_days", "readmitted", "er_visits", "case when member_id % 30 = 0 then 0 else enrolled_months end", "[180]"), want: "exposure"},
		{name: "negative count", edits: eventEdits("followup_days", "readmitted", "case when member_id % 30 = 0 then -1 else er_visits end", "enrolled_months", "[180]"), want: "count"},
		{name: "fractional count", edits: eventEdits("followup_days", "readmitted", "er_visits + 0.5", "enrolled_months", "[180]"), want: "fractional"},
		{name: "horizons not increasing", edits: eventEdits("followup_days", "readmitted", "er_visits", "enrolled_months", "[365, 180]"), want: "horizons"},
	}
}

// eventEdits turns the base study into one with a time-to-event and a
// rate outcome whose columns are the given SQL expressions.
func eventEdits(time, event, count, exposure, horizons string) map[string]string {
	cols := fmt.Sprintf(", %s as fu, %s as ev, %s as n_er, %s as months", time, event, count, exposure)
	return map[string]string{
		"SQL": strings.Replace(baseSQL, " from marts.hf_members", cols+" from marts.hf_members", 1),
		"  outcomes: [readmit_30d, cost_90d]": "  outcomes: [readmit_30d, cost_90d]\n" +
			"  time_to_event: [{name: readmission, time: fu, event: ev, horizons: " + horizons + "}]\n" +
			"  rates: [{name: er, count: n_er, exposure: months}]",
	}
}

// TestBadInputs runs the CLI on each bad study and checks the contract for
// bad input: exit 2, exactly one line on stderr naming the problem, nothing
// on stdout, and the warehouse file byte-for-byte unchanged.
func TestBadInputs(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	path, _, err := demo.Write(ctx, dir, 600, 11)
	if err != nil {
		t.Fatal(err)
	}
	db := filepath.Join(filepath.Dir(path), "warehouse.duckdb")
	before := fileHash(t, db)
	for _, tc := range badCases() {
		t.Run(tc.name, func(t *testing.T) {
			text := baseStudy + tc.extra
			repl := map[string]string{"SQL": baseSQL, "COVARIATES": "age, sex, region, prior_admits, charlson", "CALIPER": "0.2", "CONTROLS": "1", "SCHEMA": "main", "PREFIX": "bad_"}
			for k, v := range tc.edits {
				text = strings.Replace(text, k, v, 1)
			}
			for k, v := range repl {
				text = strings.Replace(text, k, v, 1)
			}
			text = strings.Replace(text, "WAREHOUSE", db, 1)
			spec := filepath.Join(t.TempDir(), "study.yaml")
			if err := os.WriteFile(spec, []byte(text), 0o644); err != nil {
				t.Fatal(err)
			}
			var stdout, stderr bytes.Buffer
			code := run(ctx, []string{"counterpart", "run", spec}, &stdout, &stderr)
			if code != exitBadInput {
				t.Fatalf("exit %d, want %d; stderr: %s", code, exitBadInput, stderr.String())
			}
			lines := strings.Split(strings.TrimRight(stderr.String(), "\n"), "\n")
			if len(lines) != 1 || lines[0] == "" {
				t.Fatalf("want one stderr line, got %d: %q", len(lines), stderr.String())
			}
			if !strings.Contains(lines[0], tc.want) {
				t.Errorf("stderr %q does not mention %q", lines[0], tc.want)
			}
			if stdout.Len() != 0 {
				t.Errorf("stdout should be empty on bad input, got %q", stdout.String())
			}
			if after := fileHash(t, db); after != before {
				t.Errorf("warehouse file changed")
			}
			if _, err := os.Stat(db + ".wal"); err == nil {
				t.Errorf("a write-ahead log appeared beside the warehouse")
			}
		})
	}
	if n := len(badCases()); n < 15 {
		t.Fatalf("only %d bad inputs listed; the contract asks for at least 15", n)
	}
}

func fileHash(t *testing.T, path string) string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		t.Fatal(err)
	}
	return hex.EncodeToString(h.Sum(nil))
}
