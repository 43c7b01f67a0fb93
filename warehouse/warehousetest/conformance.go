package warehousetest

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"counterpart/warehouse"
	"counterpart/warehouse/sqlcore"
)

// Engine adapts one engine to the suite.
type Engine struct {
	// Schema is an output schema that exists in a new database ("main"
	// for DuckDB, "public" for Postgres).
	Schema string
	// Open returns a warehouse on a new, empty database, built on
	// sqlcore (fixtures and faults go through its Core); the engine's
	// adapter closes it when the test ends.
	Open func(t *testing.T) warehouse.Warehouse
	// Query runs a read query on w's database and returns every row;
	// NULL is nil, numbers are Go numbers.
	Query func(t testing.TB, w warehouse.Warehouse, query string) [][]any
	// Other returns a handle on the same database in another session, for
	// the lock test. It may return w itself when the engine's lock does not
	// depend on the session.
	Other func(t *testing.T, w warehouse.Warehouse) warehouse.Warehouse
}

// core is the sqlcore.Core behind a warehouse of the suite.
func core(t testing.TB, w warehouse.Warehouse) *sqlcore.Core {
	t.Helper()
	c, ok := w.(interface{ SQLCore() *sqlcore.Core })
	if !ok {
		t.Fatalf("%T is not built on sqlcore.Core", w)
	}
	return c.SQLCore()
}

// Exec runs fixture statements (CREATE TABLE, INSERT; several may be
// given) on w's session outside any run.
func Exec(t testing.TB, w warehouse.Warehouse, query string) {
	t.Helper()
	if _, err := core(t, w).A.Exec(context.Background(), query); err != nil {
		t.Fatalf("%s: %v", query, err)
	}
}

// Exec is the package's Exec, for the suite's checks.
func (e Engine) Exec(t testing.TB, w warehouse.Warehouse, query string) {
	t.Helper()
	Exec(t, w, query)
}

// faultSteps are the steps of Publish the rollback check fails at, most
// of them after rows were written.
var faultSteps = []string{"runs", "cohort", "scores", "matches", "weights", "effects", "retention", "views", "commit"}

// RunConformance runs every check of the suite against e.
func RunConformance(t *testing.T, e Engine) {
	t.Run("ReadTypes", func(t *testing.T) { testReadTypes(t, e) })
	t.Run("ReadErrors", func(t *testing.T) { testReadErrors(t, e) })
	t.Run("RefuseWrites", func(t *testing.T) { testRefuseWrites(t, e) })
	t.Run("Publish", func(t *testing.T) { testPublish(t, e) })
	t.Run("PublishChecks", func(t *testing.T) { testPublishChecks(t, e) })
	t.Run("Rollback", func(t *testing.T) { testRollback(t, e) })
	t.Run("Retention", func(t *testing.T) { testRetention(t, e) })
	t.Run("Evolve", func(t *testing.T) { testEvolve(t, e) })
	t.Run("Lock", func(t *testing.T) { testLock(t, e) })
	t.Run("Balance", func(t *testing.T) { testBalance(t, e) })
	t.Run("BadOutput", func(t *testing.T) { testBadOutput(t, e) })
	t.Run("Abandon", func(t *testing.T) { testAbandon(t, e) })
	t.Run("Effects", func(t *testing.T) { testEffects(t, e) })
	t.Run("RunQueries", func(t *testing.T) { testRunQueries(t, e) })
	t.Run("Analysis", func(t *testing.T) { testAnalysis(t, e) })
	t.Run("PriorSets", func(t *testing.T) { testPriorSets(t, e) })
	t.Run("DiffRuns", func(t *testing.T) { testDiffRuns(t, e) })
	t.Run("DiffRunsRandom", func(t *testing.T) { testDiffRunsRandom(t, e) })
	t.Run("RowCounts", func(t *testing.T) { testRowCounts(t, e) })
	t.Run("SummaryColumnAdded", func(t *testing.T) { testSummaryColumnAdded(t, e) })
}

// srcTable holds one column of every kind the decoding rules name. Rows are
// inserted out of order; queries sort by id.
const srcTable = `CREATE TABLE src (
    id BIGINT, sid VARCHAR(10), small_id SMALLINT,
    t_bool BOOLEAN, t_int INTEGER, t_num NUMERIC(3,0),
    age DOUBLE PRECISION, wt REAL, dose NUMERIC(10,2),
    grp VARCHAR(10), flag BOOLEAN, stage INTEGER,
    y1 DOUBLE PRECISION, y2 BOOLEAN, y3 INTEGER, note VARCHAR(20)
);
INSERT INTO src VALUES
    (3, 'c', 3, TRUE, 1, 1, 71.5, 80.25, 1.50, 'b', TRUE, 10, 1.0, TRUE, 1, 'x'),
    (1, 'a', 1, FALSE, 0, 0, 60, 70.5, 0.25, 'a', FALSE, 2, NULL, FALSE, 0, 'y'),
    (2, 'b', 2, TRUE, 1, 1, 65.25, 90, 2.75, 'B', TRUE, 2, 3.5, NULL, 1, 'z')`

func testReadTypes(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	e.Exec(t, w, srcTable)
	base := warehouse.CohortQuery{SQL: "SELECT * FROM src ORDER BY id", Unit: "id", Treatment: "t_bool"}

	t.Run("units", func(t *testing.T) {
		tests := []struct {
			unit  string
			kind  warehouse.IDKind
			ints  []int64
			texts []string
		}{
			{"id", warehouse.IDInt, []int64{1, 2, 3}, nil},
			{"small_id", warehouse.IDInt, []int64{1, 2, 3}, nil},
			{"sid", warehouse.IDText, nil, []string{"a", "b", "c"}},
		}
		for _, tt := range tests {
			q := base
			q.Unit = tt.unit
			c, err := w.ReadCohort(ctx, q)
			if err != nil {
				t.Fatalf("unit %s: %v", tt.unit, err)
			}
			if c.IDKind != tt.kind || !slices.Equal(c.IntIDs, tt.ints) || !slices.Equal(c.TextIDs, tt.texts) {
				t.Errorf("unit %s: kind %v ints %v texts %q, want %v %v %q", tt.unit, c.IDKind, c.IntIDs, c.TextIDs, tt.kind, tt.ints, tt.texts)
			}
		}
	})

	t.Run("treatments", func(t *testing.T) {
		for _, tr := range []string{"t_bool", "t_int", "t_num"} {
			q := base
			q.Treatment = tr
			c, err := w.ReadCohort(ctx, q)
			if err != nil {
				t.Fatalf("treatment %s: %v", tr, err)
			}
			if want := []bool{false, true, true}; !slices.Equal(c.Treated, want) {
				t.Errorf("treatment %s = %v, want %v", tr, c.Treated, want)
			}
		}
	})

	t.Run("covariates and outcomes", func(t *testing.T) {
		q := base
		q.Covariates = []string{"age", "wt", "dose", "grp", "flag", "stage"}
		q.Categorical = []string{"stage"}
		q.Outcomes = []string{"y1", "y2", "y3"}
		c, err := w.ReadCohort(ctx, q)
		if err != nil {
			t.Fatal(err)
		}
		nan := math.NaN()
		num := func(name string, want []float64) {
			t.Helper()
			cv := findCov(t, c, name)
			if cv.Kind != warehouse.Numeric || !sameFloats(cv.Values, want) {
				t.Errorf("covariate %s: kind %v values %v, want numeric %v", name, cv.Kind, cv.Values, want)
			}
		}
		cat := func(name string, levels []string, codes []int32) {
			t.Helper()
			cv := findCov(t, c, name)
			if cv.Kind != warehouse.Categorical || !slices.Equal(cv.Levels, levels) || !slices.Equal(cv.Codes, codes) {
				t.Errorf("covariate %s: kind %v levels %q codes %v, want categorical %q %v", name, cv.Kind, cv.Levels, cv.Codes, levels, codes)
			}
		}
		num("age", []float64{60, 65.25, 71.5})
		num("wt", []float64{70.5, 90, 80.25}) // exact in REAL
		num("dose", []float64{0.25, 2.75, 1.5})
		cat("grp", []string{"B", "a", "b"}, []int32{1, 0, 2})                      // bytewise: upper case first
		cat("flag", []string{"false", "true"}, []int32{0, 1, 1})                   // false < true
		cat("stage", []string{"2", "10"}, []int32{0, 0, 1})                        // numerically, not "10" < "2"
		if got := c.Covariates[0].Name + c.Covariates[5].Name; got != "agestage" { // study order kept
			t.Errorf("covariate order: %s", got)
		}
		outs := map[string]warehouse.Outcome{}
		for _, o := range c.Outcomes {
			outs[o.Name] = o
		}
		for _, tt := range []struct {
			name   string
			want   []float64
			binary bool
		}{
			{"y1", []float64{nan, 3.5, 1}, false},
			{"y2", []float64{0, nan, 1}, true},
			{"y3", []float64{0, 1, 1}, true},
		} {
			o := outs[tt.name]
			if !sameFloats(o.Values, tt.want) || (o.Kind == warehouse.OutcomeBinary) != tt.binary {
				t.Errorf("outcome %s = %v binary %v, want %v %v", tt.name, o.Values, o.Kind == warehouse.OutcomeBinary, tt.want, tt.binary)
			}
		}
	})

	t.Run("name lookup", func(t *testing.T) {
		// Case-insensitive fallback, and an exact match wins over it.
		q := warehouse.CohortQuery{
			SQL:  `SELECT id AS "ID", t_bool, age AS "Age", wt AS age FROM src ORDER BY id`,
			Unit: "id", Treatment: "t_bool", Covariates: []string{"age"},
		}
		c, err := w.ReadCohort(ctx, q)
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(c.IntIDs, []int64{1, 2, 3}) || !sameFloats(c.Covariates[0].Values, []float64{70.5, 90, 80.25}) {
			t.Errorf("got ids %v age %v", c.IntIDs, c.Covariates[0].Values)
		}
	})
}

// readCase is one cohort query that must fail with ErrBadInput and a
// message naming the problem.
type readCase struct {
	name string
	q    warehouse.CohortQuery
	want []string
}

func testReadErrors(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	e.Exec(t, w, srcTable)
	vals := func(rows string) string {
		return "SELECT * FROM (VALUES " + rows + ") AS v(id, tr, x, g, y)"
	}
	q := func(sql string) warehouse.CohortQuery {
		return warehouse.CohortQuery{SQL: sql, Unit: "id", Treatment: "tr", Covariates: []string{"x", "g"}, Outcomes: []string{"y"}}
	}
	tests := []readCase{
		{"null unit", q(vals("(1, TRUE, 1.0, 'a', 1.0), (NULL, FALSE, 2.0, 'b', 1.0), (NULL, TRUE, 3.0, 'a', 1.0)")),
			[]string{"column id has 2 NULL values", "filter or impute in cohort.sql"}},
		{"null treatment", q(vals("(1, TRUE, 1.0, 'a', 1.0), (2, NULL, 2.0, 'b', 1.0)")),
			[]string{"column tr has 1 NULL value"}},
		{"null covariates", q(vals("(1, TRUE, NULL, NULL, 1.0), (2, FALSE, 2.0, NULL, 1.0)")),
			[]string{"column x has 1 NULL value and column g has 2 NULL values"}},
		{"duplicate ids", q(vals("(1, TRUE, 1.0, 'a', 1.0), (1, FALSE, 2.0, 'b', 1.0), (2, TRUE, 1.0, 'a', 1.0), (2, TRUE, 1.0, 'a', 1.0), (2, FALSE, 1.0, 'a', 1.0), (3, FALSE, 1.0, 'a', 1.0)")),
			[]string{"unit column id has 3 duplicate values (for example 1)", "one row per unit"}},
		{"duplicate text ids", q(vals("('u1', TRUE, 1.0, 'a', 1.0), ('u1', FALSE, 2.0, 'b', 1.0)")),
			[]string{`1 duplicate value (for example "u1")`}},
		{"treatment not 0/1", q(vals("(1, 1, 1.0, 'a', 1.0), (2, 0, 2.0, 'b', 1.0), (3, 2, 2.0, 'b', 1.0), (4, 5, 2.0, 'b', 1.0)")),
			[]string{"treatment column tr has 2 values other than 0 and 1 (for example 2 at unit 3)"}},
		{"treatment text", q(vals("(1, 'yes', 1.0, 'a', 1.0), (2, 'no', 2.0, 'b', 1.0)")),
			[]string{"treatment column tr has type", "boolean or 0/1"}},
		{"outcome text", q(vals("(1, TRUE, 1.0, 'a', 'high'), (2, FALSE, 2.0, 'b', 'low')")),
			[]string{"outcome column y has type", "numeric or boolean"}},
		{"missing column", warehouse.CohortQuery{SQL: vals("(1, TRUE, 1.0, 'a', 1.0)"), Unit: "id", Treatment: "tr", Covariates: []string{"zz"}},
			[]string{"returns no column zz (covariate); it returns: id, tr, x, g, y"}},
		{"empty", q(vals("(1, TRUE, 1.0, 'a', 1.0)") + " WHERE 1 = 0"),
			[]string{"cohort.sql returned no rows"}},
		{"nan covariate", q("SELECT id, t_bool AS tr, CASE WHEN id = 2 THEN CAST('NaN' AS DOUBLE PRECISION) ELSE age END AS x, grp AS g, y1 AS y FROM src"),
			[]string{"column x has 1 NaN or infinite value (for example at unit 2)"}},
		{"syntax error", q("SELEC id FROM src"), []string{"cohort.sql", "SELEC"}},
		{"unknown table", q("SELECT * FROM no_such_table"), []string{"cohort.sql", "no_such_table"}},
		{"unknown column", q("SELECT id, t_bool AS tr, no_such_col FROM src"), []string{"cohort.sql", "no_such_col"}},
		{"two roles", warehouse.CohortQuery{SQL: "SELECT * FROM src", Unit: "id", Treatment: "t_bool", Covariates: []string{"age"}, Outcomes: []string{"age"}},
			[]string{"column age is named as covariate and as outcome"}},
		{"categorical not covariate", warehouse.CohortQuery{SQL: "SELECT * FROM src", Unit: "id", Treatment: "t_bool", Categorical: []string{"grp"}},
			[]string{"cohort.categorical lists grp"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := w.ReadCohort(ctx, tt.q)
			CheckBadInput(t, err, tt.want...)
		})
	}
	// After all those failures the connection still reads.
	if _, err := w.ReadCohort(ctx, warehouse.CohortQuery{SQL: "SELECT * FROM src", Unit: "id", Treatment: "t_bool"}); err != nil {
		t.Fatalf("read after errors: %v", err)
	}
}

// CheckBadInput fails unless err wraps ErrBadInput, is one line and
// contains every want.
func CheckBadInput(t *testing.T, err error, want ...string) {
	t.Helper()
	if err == nil {
		t.Fatalf("no error, want one mentioning %q", want)
	}
	if !errors.Is(err, warehouse.ErrBadInput) {
		t.Errorf("error %q does not wrap ErrBadInput", err)
	}
	if strings.Contains(err.Error(), "\n") {
		t.Errorf("error spans lines: %q", err)
	}
	for _, s := range want {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("error %q does not mention %q", err, s)
		}
	}
}

// WriteStatements are standard SQL statements that change src; the suite
// checks that ReadCohort refuses each and that src is unchanged.
var WriteStatements = []string{
	"INSERT INTO src (id) VALUES (99)",
	"UPDATE src SET age = 0",
	"DELETE FROM src",
	"CREATE TABLE src_copy AS SELECT * FROM src",
	"DROP TABLE src",
	"SELECT * FROM src; DELETE FROM src",
	"DELETE FROM src; SELECT * FROM src",
	"INSERT INTO src (id) VALUES (98); SELECT * FROM src",
}

func testRefuseWrites(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	e.Exec(t, w, srcTable)
	const state = "SELECT count(*), sum(age), min(id) FROM src"
	before := fmt.Sprint(e.Query(t, w, state))
	for _, stmt := range WriteStatements {
		_, err := w.ReadCohort(ctx, warehouse.CohortQuery{SQL: stmt, Unit: "id", Treatment: "t_bool"})
		CheckBadInput(t, err, "cohort.sql")
		if after := fmt.Sprint(e.Query(t, w, state)); after != before {
			t.Fatalf("after %q src changed: %s, was %s", stmt, after, before)
		}
	}
	if n := e.Query(t, w, "SELECT count(*) FROM information_schema.tables WHERE table_name = 'src_copy'"); num(n[0][0]) != 0 {
		t.Errorf("CREATE TABLE AS created src_copy")
	}
}

// handData is the hand-worked cohort of the publish and balance checks:
// three treated and four control units.
//
//	id coached age sex const1 y
//	1  T       60  F   1      1
//	2  T       70  M   1      0
//	3  T       80  F   1      NULL
//	4  C       50  M   1      1
//	5  C       60  M   1      0
//	6  C       70  F   1      0
//	7  C       40  M   1      1
const handData = `SELECT CAST(id AS BIGINT) AS id, coached, CAST(age AS DOUBLE PRECISION) AS age, sex,
       CAST(const1 AS INTEGER) AS const1, CAST(y AS DOUBLE PRECISION) AS y
FROM (VALUES
    (1, TRUE, 60, 'F', 1, 1),
    (2, TRUE, 70, 'M', 1, 0),
    (3, TRUE, 80, 'F', 1, NULL),
    (4, FALSE, 50, 'M', 1, 1),
    (5, FALSE, 60, 'M', 1, 0),
    (6, FALSE, 70, 'F', 1, 0),
    (7, FALSE, 40, 'M', 1, 1)
) AS v(id, coached, age, sex, const1, y)
ORDER BY id`

// Matched sets and weights of the hand data (cohort index = id − 1):
// set 1: 1 with 5; set 2: 2 with 6 and 4 (weight ½ each); set 3: 3 with 6
// again (a reused control). Matching weights: 4 → ½, 5 → 1, 6 → 1½,
// 7 → none. Scheme att: controls 4 → ½, 5 → 2, 6 → 1, 7 → 0. Scheme solo:
// only control 5 has weight, so its variance is undefined.
var (
	handMatches = warehouse.MatchRows{
		SetID:     []int64{1, 1, 2, 2, 2, 3, 3},
		Unit:      []int{0, 4, 1, 5, 3, 2, 5},
		Treated:   []bool{true, false, true, false, false, true, false},
		SetWeight: []float64{1, 1, 1, 0.5, 0.5, 1, 1},
		Distance:  []float64{0, 0.1, 0, 0.2, 0.3, 0, 0.4},
	}
	handSchemes = []string{"att", "solo"}
	handWeights = [][]float64{
		{1, 1, 1, 0.5, 2, 1, 0},
		{1, 1, 1, 0, 1, 0, 0},
	}
)

func readHand(t *testing.T, w warehouse.Warehouse, covs ...string) *warehouse.Cohort {
	t.Helper()
	if covs == nil {
		covs = []string{"age", "sex", "const1"}
	}
	c, err := w.ReadCohort(context.Background(), warehouse.CohortQuery{
		SQL: handData, Unit: "id", Treatment: "coached", Covariates: covs, Outcomes: []string{"y"},
	})
	if err != nil {
		t.Fatalf("read hand data: %v", err)
	}
	return c
}

func output(e Engine, c *warehouse.Cohort, schemes []string, keep int) warehouse.Output {
	out := warehouse.Output{Schema: e.Schema, Prefix: "st_", Study: "st", Unit: c.Unit, IDKind: c.IDKind,
		Treatment: c.Treatment, Schemes: schemes, KeepRuns: keep}
	for _, cv := range c.Covariates {
		out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: cv.Name, Kind: cv.Kind})
	}
	for _, o := range c.Outcomes {
		out.Outcomes = append(out.Outcomes, o.Name)
	}
	return out
}

// publication fills every table for cohort c; seed varies the scores so
// that runs can be told apart.
func publication(c *warehouse.Cohort, runID, status string, seed float64, schemes []string) *warehouse.Publication {
	n := c.N()
	p := &warehouse.Publication{
		Run: warehouse.RunRecord{RunID: runID, Study: "st", Status: status, CountsJSON: `{"units": ` + strconv.Itoa(n) + `}`, Message: "note " + runID,
			SummaryJSON: `{"run_id": "` + runID + `", "effects": [{"estimate": ` + strconv.FormatFloat(seed, 'g', -1, 64) + `}]}`},
		Cohort: c, PS: make([]float64, n), LogitPS: make([]float64, n), InSupport: make([]bool, n),
		Matches: handMatches,
		Effects: handEffects(seed),
	}
	for i := range n {
		p.PS[i] = 0.1 + 0.1*float64(i) + seed/100
		p.LogitPS[i] = math.Log(p.PS[i] / (1 - p.PS[i]))
		p.InSupport[i] = i != n-1
	}
	for k := range schemes {
		p.Weights = append(p.Weights, handWeights[k%len(handWeights)])
	}
	return p
}

// run does StartRun then Publish with the given final status.
func run(t *testing.T, w warehouse.Warehouse, out warehouse.Output, p *warehouse.Publication, started time.Time) {
	t.Helper()
	ctx := context.Background()
	rec := p.Run
	rec.Status, rec.StartedAt = warehouse.StatusRunning, started
	if err := w.StartRun(ctx, out, rec); err != nil {
		t.Fatalf("start run %s: %v", rec.RunID, err)
	}
	p.Run.StartedAt = started
	p.Run.FinishedAt = started.Add(time.Minute)
	if err := w.Publish(ctx, out, p); err != nil {
		t.Fatalf("publish %s: %v", rec.RunID, err)
	}
}

var t0 = time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)

var dataTables = []string{"st_cohort", "st_scores", "st_matches", "st_weights", "st_effects"}
var currentViews = []string{"st_current_cohort", "st_current_scores", "st_current_matches", "st_current_weights", "st_current_effects"}

// runIDs lists the distinct run_id values of a table or view, sorted.
func runIDs(t *testing.T, e Engine, w warehouse.Warehouse, table string) string {
	t.Helper()
	rows := e.Query(t, w, "SELECT DISTINCT run_id FROM "+table+" ORDER BY run_id")
	var ids []string
	for _, r := range rows {
		ids = append(ids, fmt.Sprint(r[0]))
	}
	return strings.Join(ids, ",")
}

func status(t *testing.T, e Engine, w warehouse.Warehouse, runID string) string {
	t.Helper()
	rows := e.Query(t, w, "SELECT status FROM st_runs WHERE run_id = '"+runID+"'")
	if len(rows) != 1 {
		return fmt.Sprintf("%d rows", len(rows))
	}
	return fmt.Sprint(rows[0][0])
}

func testPublish(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	unlock, err := w.Lock(ctx, out)
	if err != nil {
		t.Fatal(err)
	}
	defer unlock()

	p1 := publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes)
	rec := p1.Run
	rec.Status, rec.StartedAt = warehouse.StatusRunning, t0
	if err := w.StartRun(ctx, out, rec); err != nil {
		t.Fatal(err)
	}
	if s := status(t, e, w, "r1"); s != "running" {
		t.Fatalf("after StartRun status %s", s)
	}
	p1.Run.StartedAt, p1.Run.FinishedAt = t0, t0.Add(time.Minute)
	if err := w.Publish(ctx, out, p1); err != nil {
		t.Fatal(err)
	}
	got := e.Query(t, w, "SELECT status, study, message, engine FROM st_runs WHERE run_id = 'r1'")
	if fmt.Sprint(got) != fmt.Sprintf("[[succeeded st note r1 %s]]", w.Engine()) {
		t.Errorf("runs row %v", got)
	}

	// Every table holds exactly what was published.
	wantCohort := "[[1 true 60 F 1 1] [2 true 70 M 1 0] [3 true 80 F 1 <nil>] [4 false 50 M 1 1] [5 false 60 M 1 0] [6 false 70 F 1 0] [7 false 40 M 1 1]]"
	if got := fmt.Sprint(e.Query(t, w, "SELECT id, coached, age, sex, const1, y FROM st_cohort WHERE run_id = 'r1' ORDER BY id")); got != wantCohort {
		t.Errorf("cohort snapshot\n got %s\nwant %s", got, wantCohort)
	}
	scores := e.Query(t, w, "SELECT id, treated, ps, logit_ps, in_support FROM st_scores WHERE run_id = 'r1' ORDER BY id")
	if len(scores) != c.N() {
		t.Fatalf("scores has %d rows", len(scores))
	}
	for i, r := range scores {
		if num(r[0]) != float64(i+1) || r[1] != c.Treated[i] || num(r[2]) != p1.PS[i] || num(r[3]) != p1.LogitPS[i] || r[4] != p1.InSupport[i] {
			t.Errorf("scores row %d = %v", i, r)
		}
	}
	wantMatches := "[[1 1 true 1 0] [1 5 false 1 0.1] [2 2 true 1 0] [2 4 false 0.5 0.3] [2 6 false 0.5 0.2] [3 3 true 1 0] [3 6 false 1 0.4]]"
	if got := fmt.Sprint(e.Query(t, w, "SELECT set_id, id, treated, set_weight, match_distance FROM st_matches WHERE run_id = 'r1' ORDER BY set_id, id")); got != wantMatches {
		t.Errorf("matches\n got %s\nwant %s", got, wantMatches)
	}
	wantWeights := "[[1 true 1 1] [2 true 1 1] [3 true 1 1] [4 false 0.5 0] [5 false 2 1] [6 false 1 0] [7 false 0 0]]"
	if got := fmt.Sprint(e.Query(t, w, "SELECT id, treated, att, solo FROM st_weights WHERE run_id = 'r1' ORDER BY id")); got != wantWeights {
		t.Errorf("weights\n got %s\nwant %s", got, wantWeights)
	}
	for _, v := range currentViews {
		if got := runIDs(t, e, w, v); got != "r1" {
			t.Errorf("%s shows runs %q, want r1", v, got)
		}
	}

	// A rejected run is recorded with its rows but does not become current.
	run(t, w, out, publication(c, "r2", warehouse.StatusRejected, 1, handSchemes), t0.Add(time.Hour))
	if s := status(t, e, w, "r2"); s != "rejected" {
		t.Errorf("r2 status %s", s)
	}
	for i, v := range currentViews {
		if got := runIDs(t, e, w, v); got != "r1" {
			t.Errorf("after a rejected run %s shows %q, want r1", v, got)
		}
		if got := runIDs(t, e, w, dataTables[i]); got != "r1,r2" {
			t.Errorf("%s holds runs %q, want r1,r2", dataTables[i], got)
		}
	}

	// The next succeeded run becomes current.
	p3 := publication(c, "r3", warehouse.StatusSucceeded, 2, handSchemes)
	run(t, w, out, p3, t0.Add(2*time.Hour))
	for _, v := range currentViews {
		if got := runIDs(t, e, w, v); got != "r3" {
			t.Errorf("%s shows %q, want r3", v, got)
		}
	}

	// A run is published once; a published run cannot be failed.
	if err := w.Publish(ctx, out, p3); err == nil {
		t.Error("publishing r3 twice succeeded")
	}
	if err := w.FailRun(ctx, out, "r3", "late failure"); err == nil {
		t.Error("FailRun on a published run succeeded")
	}
	if s := status(t, e, w, "r3"); s != "succeeded" {
		t.Errorf("r3 status %s after refused changes", s)
	}
	if got := runIDs(t, e, w, "st_scores"); got != "r1,r2,r3" {
		t.Errorf("scores runs %q after refused publish", got)
	}

	// A failed run.
	rec4 := warehouse.RunRecord{RunID: "r4", Study: "st", Status: warehouse.StatusRunning, StartedAt: t0.Add(3 * time.Hour)}
	if err := w.StartRun(ctx, out, rec4); err != nil {
		t.Fatal(err)
	}
	if err := w.FailRun(ctx, out, "r4", "model did not converge"); err != nil {
		t.Fatal(err)
	}
	got = e.Query(t, w, "SELECT status, message, finished_at IS NOT NULL FROM st_runs WHERE run_id = 'r4'")
	if fmt.Sprint(got) != "[[failed model did not converge true]]" {
		t.Errorf("failed run row %v", got)
	}
	// A run id is used once.
	if err := w.StartRun(ctx, out, rec4); err == nil {
		t.Error("StartRun with an existing run id succeeded")
	}

	// A skipped run (nothing changed) records its status and no rows.
	p5 := &warehouse.Publication{Run: warehouse.RunRecord{RunID: "r5", Study: "st", Status: warehouse.StatusSkipped, Message: "cohort unchanged"}}
	run(t, w, out, p5, t0.Add(4*time.Hour))
	if s := status(t, e, w, "r5"); s != "skipped" {
		t.Errorf("r5 status %s", s)
	}
	if got := runIDs(t, e, w, "st_scores"); got != "r1,r2,r3" {
		t.Errorf("a skipped run wrote scores: runs %q", got)
	}
	if got := runIDs(t, e, w, "st_current_scores"); got != "r3" {
		t.Errorf("after a skipped run current scores show %q, want r3", got)
	}
}

func testRollback(t *testing.T, e Engine) {
	injected := errors.New("injected failure")
	steps := append([]string{"cancelled context"}, faultSteps...)
	for _, step := range steps {
		t.Run(step, func(t *testing.T) {
			w := e.Open(t)
			c := readHand(t, w)
			out := output(e, c, handSchemes, 1) // retention would delete r1 if it committed
			run(t, w, out, publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes), t0)

			p2 := publication(c, "r2", warehouse.StatusSucceeded, 1, handSchemes)
			rec := p2.Run
			rec.Status, rec.StartedAt = warehouse.StatusRunning, t0.Add(time.Hour)
			if err := w.StartRun(context.Background(), out, rec); err != nil {
				t.Fatal(err)
			}
			ctx := context.Background()
			if step == "cancelled context" {
				cctx, cancel := context.WithCancel(ctx)
				cancel()
				ctx = cctx
			} else {
				core(t, w).Fault = func(s string) error {
					if s == step {
						return injected
					}
					return nil
				}
			}
			err := w.Publish(ctx, out, p2)
			core(t, w).Fault = nil
			if err == nil {
				t.Fatal("publish succeeded")
			}
			if step != "cancelled context" && !errors.Is(err, injected) {
				t.Errorf("error %v does not wrap the injected failure", err)
			}
			for i, table := range dataTables {
				if got := runIDs(t, e, w, table); got != "r1" {
					t.Errorf("%s holds runs %q after the failed publish, want r1", table, got)
				}
				if got := runIDs(t, e, w, currentViews[i]); got != "r1" {
					t.Errorf("%s shows %q after the failed publish, want r1", currentViews[i], got)
				}
			}
			if s := status(t, e, w, "r1"); s != "succeeded" {
				t.Errorf("r1 status %s", s)
			}
			if s := status(t, e, w, "r2"); s != "running" {
				t.Errorf("r2 status %s after the failed publish", s)
			}
			if err := w.FailRun(context.Background(), out, "r2", err.Error()); err != nil {
				t.Fatal(err)
			}
			if s := status(t, e, w, "r2"); s != "failed" {
				t.Errorf("r2 status %s after FailRun", s)
			}
		})
	}
}

func testRetention(t *testing.T, e Engine) {
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 2)
	for i := 1; i <= 4; i++ {
		id := "r" + strconv.Itoa(i)
		run(t, w, out, publication(c, id, warehouse.StatusSucceeded, float64(i), handSchemes), t0.Add(time.Duration(i)*time.Hour))
	}
	for _, table := range append([]string{"st_runs"}, dataTables...) {
		if got := runIDs(t, e, w, table); got != "r3,r4" {
			t.Errorf("keep_runs 2: %s holds %q, want r3,r4", table, got)
		}
	}
	// A rejected run with keep_runs 1 keeps itself and the latest succeeded
	// run, which the current views still show.
	out.KeepRuns = 1
	run(t, w, out, publication(c, "r5", warehouse.StatusRejected, 5, handSchemes), t0.Add(5*time.Hour))
	for _, table := range append([]string{"st_runs"}, dataTables...) {
		if got := runIDs(t, e, w, table); got != "r4,r5" {
			t.Errorf("keep_runs 1: %s holds %q, want r4,r5", table, got)
		}
	}
	if got := runIDs(t, e, w, "st_current_scores"); got != "r4" {
		t.Errorf("current scores show %q, want r4", got)
	}

	// keep_runs counts succeeded runs only; the others expire by age
	// (keep_failed_days). Two recent failures do not push out r4; a
	// failure older than the limit goes.
	ctx := context.Background()
	now := time.Now().UTC()
	for _, f := range []struct {
		id  string
		age time.Duration
	}{{"f1", 40 * 24 * time.Hour}, {"f2", time.Hour}, {"f3", time.Minute}} {
		if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: f.id, Study: "st", StartedAt: now.Add(-f.age)}); err != nil {
			t.Fatal(err)
		}
		if err := w.FailRun(ctx, out, f.id, "disk full"); err != nil {
			t.Fatal(err)
		}
	}
	out.KeepRuns, out.KeepFailedDays = 2, 30
	run(t, w, out, publication(c, "r6", warehouse.StatusSucceeded, 6, handSchemes), now)
	if got := runIDs(t, e, w, "st_runs"); got != "f2,f3,r4,r6" {
		t.Errorf("keep_runs 2, keep_failed_days 30: runs %q, want f2,f3,r4,r6", got)
	}
	if got := runIDs(t, e, w, "st_scores"); got != "r4,r6" {
		t.Errorf("keep_runs 2, keep_failed_days 30: scores of %q, want r4,r6", got)
	}
}

func testEvolve(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c1 := readHand(t, w, "age")
	run(t, w, output(e, c1, handSchemes[:1], 0), publication(c1, "r1", warehouse.StatusSucceeded, 0, handSchemes[:1]), t0)

	// The study gains a covariate and a scheme: the tables gain columns,
	// older rows hold NULL there, and the views show the new columns.
	c2 := readHand(t, w, "age", "sex")
	run(t, w, output(e, c2, handSchemes, 0), publication(c2, "r2", warehouse.StatusSucceeded, 1, handSchemes), t0.Add(time.Hour))
	if got := fmt.Sprint(e.Query(t, w, "SELECT run_id, count(sex), count(*) FROM st_cohort GROUP BY run_id ORDER BY run_id")); got != "[[r1 0 7] [r2 7 7]]" {
		t.Errorf("cohort sex counts per run %s", got)
	}
	if got := fmt.Sprint(e.Query(t, w, "SELECT count(solo) FROM st_current_weights")); got != "[[7]]" {
		t.Errorf("current weights solo count %s", got)
	}
	// Balance history: r1 has rows for age only, unadjusted/matched/att.
	got := fmt.Sprint(e.Query(t, w, "SELECT run_id, covariate, count(*) FROM st_balance_history GROUP BY run_id, covariate ORDER BY run_id, covariate"))
	if want := "[[r1 age 3] [r2 age 4] [r2 sex 8]]"; got != want {
		t.Errorf("balance history rows %s, want %s", got, want)
	}

	// A covariate that changes kind conflicts with its column's type.
	out3 := output(e, c2, handSchemes, 0)
	out3.Covariates[0].Kind = warehouse.Categorical // age: DOUBLE → text
	// The publishing transaction creates and evolves the tables.
	err := core(t, w).CreateObjects(ctx, out3)
	CheckBadInput(t, err, "age", "st_cohort")
}

func testLock(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	out := warehouse.Output{Schema: e.Schema, Prefix: "st_", Study: "st"}
	unlock, err := w.Lock(ctx, out)
	if err != nil {
		t.Fatal(err)
	}
	other := e.Other(t, w)
	if _, err := other.Lock(ctx, out); !errors.Is(err, warehouse.ErrLocked) || !strings.Contains(err.Error(), "st") {
		t.Fatalf("second lock: %v, want ErrLocked naming the study", err)
	}
	// Another study is independent.
	u2, err := other.Lock(ctx, warehouse.Output{Schema: e.Schema, Prefix: "st2_", Study: "st2"})
	if err != nil {
		t.Fatalf("lock of another study: %v", err)
	}
	if err := u2(); err != nil {
		t.Fatal(err)
	}
	if err := unlock(); err != nil {
		t.Fatal(err)
	}
	u3, err := other.Lock(ctx, out)
	if err != nil {
		t.Fatalf("lock after release: %v", err)
	}
	if err := u3(); err != nil {
		t.Fatal(err)
	}
}

func testBadOutput(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	rec := warehouse.RunRecord{RunID: "r1", Study: "st", StartedAt: t0}
	tests := []struct {
		name string
		edit func(*warehouse.Output)
		want []string
	}{
		{"missing schema", func(o *warehouse.Output) { o.Schema = "no_such_schema" }, []string{"no_such_schema", "does not exist"}},
		{"bad prefix", func(o *warehouse.Output) { o.Prefix = "St-" }, []string{"output.prefix"}},
		{"bad scheme", func(o *warehouse.Output) { o.Schemes = []string{"ATT"} }, []string{"ATT", "upper-case"}},
		{"scheme clashes", func(o *warehouse.Output) { o.Schemes = []string{"treated"} }, []string{"st_weights", "two columns named treated"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			out := output(e, c, handSchemes, 0)
			tt.edit(&out)
			CheckBadInput(t, w.StartRun(ctx, out, rec), tt.want...)
		})
	}
}

// Helpers.

func findCov(t *testing.T, c *warehouse.Cohort, name string) *warehouse.Covariate {
	t.Helper()
	for i := range c.Covariates {
		if c.Covariates[i].Name == name {
			return &c.Covariates[i]
		}
	}
	t.Fatalf("no covariate %s", name)
	return nil
}

// sameFloats compares exactly, NaN equal to NaN.
func sameFloats(a, b []float64) bool {
	return slices.EqualFunc(a, b, func(x, y float64) bool { return x == y || math.IsNaN(x) && math.IsNaN(y) })
}

// num reads a numeric query value; NULL is NaN.
func num(v any) float64 {
	switch x := v.(type) {
	case float64:
		return x
	case float32:
		return float64(x)
	case int64:
		return float64(x)
	case int32:
		return float64(x)
	case int16:
		return float64(x)
	case int8:
		return float64(x)
	case uint64:
		return float64(x)
	case uint32:
		return float64(x)
	case nil:
		return math.NaN()
	case string:
		f, err := strconv.ParseFloat(x, 64)
		if err == nil {
			return f
		}
	}
	panic(fmt.Sprintf("warehousetest: %T is not a number", v))
}
