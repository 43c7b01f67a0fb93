package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"counterpart/warehouse/postgres/pgtest"
)

// synthSQL creates table synth_src from the row source from (column i) from deterministic
// formulas (no random(): the same rows on every engine and run): two
// numeric covariates, a four-level region and two outcomes. Treatment
// depends on x1 and region, so the propensity model has work to do.
// Synthetic numbers only.
func synthSQL(from string) string {
	return fmt.Sprintf(`CREATE TABLE synth_src AS
SELECT i AS unit_id,
       (sin(i * 1.3) + 0.4 * cos(i * 0.11) > 0.35) AS treated,
       10 * sin(i * 1.3) AS x1,
       5 * cos(i * 0.7) AS x2,
       CASE i %% 4 WHEN 0 THEN 'north' WHEN 1 THEN 'south' WHEN 2 THEN 'east' ELSE 'west' END AS region,
       2 * sin(i * 1.3) + cos(i * 0.3) AS y_cont
FROM %s`, from)
}

// pgSeries is Postgres's row source for synthSQL.
func pgSeries(n int) string { return fmt.Sprintf("generate_series(1, %d) AS g(i)", n) }

// studyText is a study over synth_src; on_fail warn so that every run
// publishes whatever the balance.
func studyText(name, engine, dsn string) string {
	return fmt.Sprintf(`study: %s
warehouse:
  engine: %s
  dsn: %s
cohort:
  sql: select unit_id, treated, x1, x2, region, y_cont from synth_src
  unit: unit_id
  treatment: treated
  outcomes: [y_cont]
  covariates: [x1, x2, region]
matching:
  algorithm: greedy
  controls: 1
weighting: [att]
balance:
  on_fail: warn
`, name, engine, dsn)
}

func writeStudy(t testing.TB, text string) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "study.yaml")
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestPostgresEndToEnd runs the CLI on a Postgres study whose DSN carries
// a password through ${VAR} expansion, then looks for the password
// everywhere it could leak: stdout (the JSON summary), stderr, every text
// and JSON column of every table, and every comment. The server's trust
// authentication accepts any password, so the password is planted, not
// checked (common practice for leak tests).
func TestPostgresEndToEnd(t *testing.T) {
	admin := pgtest.Admin(t)
	role := fmt.Sprintf("cp_leak_%d", time.Now().UnixNano()%1e9)
	const password = "Pw-LEAK-7f3a9c"
	pgtest.Exec(t, admin, fmt.Sprintf("CREATE ROLE %s LOGIN PASSWORD '%s'", role, password))
	t.Cleanup(func() { pgtest.Exec(t, admin, "DROP ROLE IF EXISTS "+role) })
	db := pgtest.NewDatabase(t)
	pgtest.Exec(t, db, synthSQL(pgSeries(3000))+fmt.Sprintf("; GRANT SELECT ON synth_src TO %s; GRANT CREATE ON SCHEMA public TO %[1]s", role))

	dsn := strings.Replace(db, "//"+userOf(t, db)+"@", "//"+role+":"+password+"@", 1)
	if !strings.Contains(dsn, password) {
		t.Fatalf("could not plant the password in %s", db)
	}
	t.Setenv("CP_TEST_PG_DSN", dsn)
	spec := writeStudy(t, studyText("e2e", "postgres", "${CP_TEST_PG_DSN}"))
	var stdout, stderr bytes.Buffer
	code := run(context.Background(), []string{"counterpart", "run", "--json", spec}, &stdout, &stderr)
	if code != exitOK {
		t.Fatalf("exit %d; stderr: %s", code, stderr.String())
	}
	var sum struct {
		RunID  string `json:"run_id"`
		Status string `json:"status"`
		Engine string `json:"engine"`
	}
	if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil {
		t.Fatalf("summary: %v", err)
	}
	if sum.Status != "succeeded" || sum.Engine != "postgres" {
		t.Errorf("summary status %q engine %q", sum.Status, sum.Engine)
	}
	got := pgtest.Query(t, db, "SELECT r.run_id, r.db_user, (SELECT count(*) FROM e2e_current_scores), (SELECT count(*) FROM e2e_balance) > 0 FROM e2e_runs r")
	if fmt.Sprint(got) != fmt.Sprintf("[[%s %s 3000 true]]", sum.RunID, role) {
		t.Errorf("runs and current views: %v", got)
	}

	// A failing run (the server refuses the port) must not echo it either.
	bad := writeStudy(t, studyText("e2e", "postgres", strings.Replace(dsn, ":5432/", ":1/", 1)))
	var out2, err2 bytes.Buffer
	if code := run(context.Background(), []string{"counterpart", "run", bad}, &out2, &err2); code != exitRuntime {
		t.Errorf("unreachable server: exit %d (%s)", code, err2.String())
	}

	texts := []string{stdout.String(), stderr.String(), out2.String(), err2.String()}
	for _, r := range pgtest.Query(t, db, `SELECT table_name, column_name FROM information_schema.columns
		WHERE table_schema = 'public' AND data_type IN ('text', 'jsonb', 'json', 'character varying')`) {
		q := fmt.Sprintf(`SELECT coalesce(string_agg(%q::text, ' '), '') FROM %q`, r[1], r[0])
		texts = append(texts, fmt.Sprint(pgtest.Query(t, db, q)))
	}
	texts = append(texts, fmt.Sprint(pgtest.Query(t, db, `SELECT obj_description(c.oid, 'pg_class'), col_description(c.oid, a.attnum)
		FROM pg_class c JOIN pg_attribute a ON a.attrelid = c.oid JOIN pg_namespace n ON n.oid = c.relnamespace WHERE n.nspname = 'public'`)))
	if len(texts) < 10 {
		t.Fatalf("only %d texts searched", len(texts))
	}
	for i, s := range texts {
		if strings.Contains(s, password) {
			t.Errorf("text %d holds the password: %.300s", i, s)
		}
	}
	if !strings.Contains(strings.Join(texts, " "), "redacted") {
		t.Error("the spec column does not show the redacted DSN")
	}
}

// userOf is the user name of a URL connection string.
func userOf(t *testing.T, dsn string) string {
	t.Helper()
	rest, ok := strings.CutPrefix(dsn, "postgres://")
	user, _, found := strings.Cut(rest, "@")
	if !ok || !found {
		t.Skipf("COUNTERPART_PG_DSN is not a postgres:// URL with a user; this test plants a password in one")
	}
	user, _, _ = strings.Cut(user, ":")
	return user
}

// TestPostgresConcurrentRuns starts two runs of one study at once: exactly
// one publishes, the other exits 4 naming the holder, and the published
// rows equal those of a lone run in another database.
func TestPostgresConcurrentRuns(t *testing.T) {
	const n = 40000
	digest := func(dsn string) string {
		return fmt.Sprint(pgtest.Query(t, dsn, `SELECT
			(SELECT md5(string_agg(concat_ws(',', unit_id, treated, ps, logit_ps, in_support), ';' ORDER BY unit_id)) FROM conc_current_scores),
			(SELECT md5(string_agg(concat_ws(',', set_id, unit_id, treated, set_weight, match_distance), ';' ORDER BY set_id, unit_id)) FROM conc_current_matches),
			(SELECT md5(string_agg(concat_ws(',', unit_id, treated, att), ';' ORDER BY unit_id)) FROM conc_current_weights),
			(SELECT md5(string_agg(concat_ws(',', unit_id, treated, x1, x2, region, y_cont), ';' ORDER BY unit_id)) FROM conc_current_cohort),
			(SELECT count(*) FROM conc_runs WHERE status = 'succeeded')`))
	}
	lone := pgtest.NewDatabase(t)
	pgtest.Exec(t, lone, synthSQL(pgSeries(n)))
	if code := run(context.Background(), []string{"counterpart", "run", writeStudy(t, studyText("conc", "postgres", lone))}, &bytes.Buffer{}, &bytes.Buffer{}); code != exitOK {
		t.Fatalf("lone run: exit %d", code)
	}

	db := pgtest.NewDatabase(t)
	pgtest.Exec(t, db, synthSQL(pgSeries(n)))
	spec := writeStudy(t, studyText("conc", "postgres", db))
	var wg sync.WaitGroup
	codes := make([]int, 2)
	stderrs := make([]bytes.Buffer, 2)
	start := make(chan struct{})
	for k := range 2 {
		wg.Go(func() {
			<-start
			codes[k] = run(context.Background(), []string{"counterpart", "run", spec}, &bytes.Buffer{}, &stderrs[k])
		})
	}
	close(start)
	wg.Wait()
	won, lost := 0, 0
	for k, c := range codes {
		switch c {
		case exitOK:
			won++
		case exitLocked:
			lost++
			if msg := stderrs[k].String(); !strings.Contains(msg, "locked by pid") || !strings.Contains(msg, "counterpart conc") {
				t.Errorf("refused run's message does not name the holder: %s", msg)
			}
		default:
			t.Errorf("run %d: exit %d: %s", k, c, stderrs[k].String())
		}
	}
	if won != 1 || lost != 1 {
		t.Fatalf("exit codes %v, want one 0 and one 4", codes)
	}
	if got, want := digest(db), digest(lone); got != want {
		t.Errorf("published rows differ from a lone run's:\n got %s\nwant %s", got, want)
	}
}
