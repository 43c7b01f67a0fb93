package duckdb

import (
	"bufio"
	"context"
	"database/sql"
	"database/sql/driver"
	"errors"
	"fmt"
	"math"
	"math/big"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
	"counterpart/warehouse/warehousetest"
)

func read(t *testing.T, w *Warehouse, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	t.Helper()
	return w.ReadCohort(context.Background(), q)
}

// TestReadDuckDBTypes covers the DuckDB types beyond the standard ones the
// conformance suite uses.
func TestReadDuckDBTypes(t *testing.T) {
	w := openTemp(t)
	execSQL(t, w, `CREATE TYPE mood AS ENUM ('sad', 'ok', 'happy');
	CREATE TABLE d AS SELECT * FROM (VALUES
	    (1, 'happy'::mood, DATE '2020-01-01', 1.25::DECIMAL(30,2), 2::HUGEINT, 0.5::FLOAT, 1::UTINYINT, 1.00::DECIMAL(3,2)),
	    (2, 'sad'::mood,   DATE '1970-01-02', -3.5::DECIMAL(30,2), 3::HUGEINT, 1.5::FLOAT, 0::UTINYINT, 0.00::DECIMAL(3,2)),
	    (3, 'ok'::mood,    DATE '1969-12-31', 12345678901234567890.12::DECIMAL(30,2), 4::HUGEINT, 2.5::FLOAT, 1::UTINYINT, 1.00::DECIMAL(3,2))
	) AS v(id, m, day, big_dec, huge, f, tu, td)`)

	t.Run("id types", func(t *testing.T) {
		for _, typ := range []string{"TINYINT", "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "HUGEINT", "UHUGEINT", "INTEGER"} {
			c, err := read(t, w, warehouse.CohortQuery{SQL: "SELECT CAST(id AS " + typ + ") AS id, tu FROM d ORDER BY id", Unit: "id", Treatment: "tu"})
			if err != nil {
				t.Fatalf("%s: %v", typ, err)
			}
			if c.IDKind != warehouse.IDInt || !slices.Equal(c.IntIDs, []int64{1, 2, 3}) {
				t.Errorf("%s ids: %v %v", typ, c.IDKind, c.IntIDs)
			}
		}
	})

	t.Run("covariates", func(t *testing.T) {
		c, err := read(t, w, warehouse.CohortQuery{SQL: "SELECT * FROM d ORDER BY id", Unit: "id", Treatment: "td",
			Covariates: []string{"m", "day", "big_dec", "huge", "f"}, Outcomes: []string{"tu"}})
		if err != nil {
			t.Fatal(err)
		}
		if !slices.Equal(c.Treated, []bool{true, false, true}) {
			t.Errorf("DECIMAL treatment %v", c.Treated)
		}
		m := c.Covariates[0]
		// ENUM levels sort as text (bytewise), not in the ENUM's declared order.
		if m.Kind != warehouse.Categorical || !slices.Equal(m.Levels, []string{"happy", "ok", "sad"}) || !slices.Equal(m.Codes, []int32{0, 2, 1}) {
			t.Errorf("ENUM covariate %+v", m)
		}
		// DATE: days since 1970-01-01, computed here with Go's calendar.
		epochDays := func(y int, mo time.Month, d int) float64 {
			return float64(time.Date(y, mo, d, 0, 0, 0, 0, time.UTC).Unix() / 86400)
		}
		wantDays := []float64{epochDays(2020, 1, 1), 1, -1}
		if got := c.Covariates[1].Values; !slices.Equal(got, wantDays) || wantDays[0] != 18262 {
			t.Errorf("DATE covariate %v, want %v", got, wantDays)
		}
		// DECIMAL(30,2) is wider than int64: the nearest double, as Go's
		// correctly rounded parser gives it.
		want3, _ := strconv.ParseFloat("12345678901234567890.12", 64)
		if got := c.Covariates[2].Values; !slices.Equal(got, []float64{1.25, -3.5, want3}) {
			t.Errorf("DECIMAL(30,2) covariate %v", got)
		}
		if got := c.Covariates[3].Values; !slices.Equal(got, []float64{2, 3, 4}) {
			t.Errorf("HUGEINT covariate %v", got)
		}
		if got := c.Covariates[4].Values; !slices.Equal(got, []float64{0.5, 1.5, 2.5}) {
			t.Errorf("FLOAT covariate %v", got)
		}
		if o := c.Outcomes[0]; !slices.Equal(o.Values, []float64{1, 0, 1}) || o.Kind != warehouse.OutcomeBinary {
			t.Errorf("UTINYINT outcome %+v", o)
		}
	})

	t.Run("date as categorical", func(t *testing.T) {
		c, err := read(t, w, warehouse.CohortQuery{SQL: "SELECT * FROM d ORDER BY id", Unit: "id", Treatment: "tu",
			Covariates: []string{"day"}, Categorical: []string{"day"}})
		if err != nil {
			t.Fatal(err)
		}
		if got := c.Covariates[0]; !slices.Equal(got.Levels, []string{"1969-12-31", "1970-01-02", "2020-01-01"}) || !slices.Equal(got.Codes, []int32{2, 1, 0}) {
			t.Errorf("DATE categorical %+v", got)
		}
	})

	t.Run("refused types", func(t *testing.T) {
		tests := []readCase{
			{"uuid unit", warehouse.CohortQuery{SQL: "SELECT uuid() AS id, tu FROM d", Unit: "id", Treatment: "tu"},
				[]string{"unit column id has type UUID", "cast it"}},
			{"blob covariate", warehouse.CohortQuery{SQL: "SELECT id, tu, 'x'::BLOB AS b FROM d", Unit: "id", Treatment: "tu", Covariates: []string{"b"}},
				[]string{"covariate column b has type BLOB"}},
			{"timestamp covariate", warehouse.CohortQuery{SQL: "SELECT id, tu, now() AS ts FROM d", Unit: "id", Treatment: "tu", Covariates: []string{"ts"}},
				[]string{"covariate column ts has type TIMESTAMP"}},
			{"list outcome", warehouse.CohortQuery{SQL: "SELECT id, tu, [1, 2] AS y FROM d", Unit: "id", Treatment: "tu", Outcomes: []string{"y"}},
				[]string{"outcome column y has type INTEGER[]"}},
			{"ubigint beyond int64", warehouse.CohortQuery{SQL: "SELECT CAST(id AS UBIGINT) + 9223372036854775806 AS id, tu FROM d ORDER BY id", Unit: "id", Treatment: "tu"},
				[]string{"unit column id has 2 values outside the 64-bit integer range (for example 9223372036854775808)", "VARCHAR"}},
			{"hugeint beyond int64", warehouse.CohortQuery{SQL: "SELECT CAST(id AS HUGEINT) * 10000000000000000000 AS id, tu FROM d", Unit: "id", Treatment: "tu"},
				[]string{"3 values outside the 64-bit integer range (for example 10000000000000000000)"}},
			{"infinite outcome", warehouse.CohortQuery{SQL: "SELECT id, tu, CASE WHEN id = 3 THEN 'inf'::DOUBLE ELSE 1 END AS y FROM d", Unit: "id", Treatment: "tu", Outcomes: []string{"y"}},
				[]string{"column y has 1 NaN or infinite value (for example at unit 3)"}},
			{"duplicate names", warehouse.CohortQuery{SQL: `SELECT id, tu, f AS a, huge AS a FROM d`, Unit: "id", Treatment: "tu", Covariates: []string{"a"}},
				[]string{"returns 2 columns named a (covariate)", "alias them"}},
			{"case clash", warehouse.CohortQuery{SQL: `SELECT id, tu, f AS "Age", f AS "AGE" FROM d`, Unit: "id", Treatment: "tu", Covariates: []string{"age"}},
				[]string{"Age, AGE", "differ from age (covariate) only in case"}},
		}
		for _, tt := range tests {
			t.Run(tt.name, func(t *testing.T) {
				_, err := read(t, w, tt.q)
				checkBadInput(t, err, tt.want...)
			})
		}
	})
}

type readCase struct {
	name string
	q    warehouse.CohortQuery
	want []string
}

var checkBadInput = warehousetest.CheckBadInput

// TestRefuseDuckDBStatements: DuckDB statements that write files, attach
// databases, change settings or split into several statements are refused
// before they run: no file appears and the data stay as they were.
func TestRefuseDuckDBStatements(t *testing.T) {
	w := openTemp(t)
	dir := t.TempDir()
	execSQL(t, w, "CREATE TABLE src AS SELECT range AS id, range % 2 = 0 AS tr, 'g' || (range % 3) AS grp FROM range(10); CREATE SEQUENCE seq")
	tests := []struct {
		sql, want string
		file      string // must not exist afterwards
	}{
		{"COPY src TO '" + dir + "/out.csv'", "the query writes (COPY)", "out.csv"},
		{"COPY (SELECT * FROM src) TO '" + dir + "/out2.parquet' (FORMAT parquet)", "the query writes (COPY)", "out2.parquet"},
		{"ATTACH '" + dir + "/other.duckdb' AS other", "the query writes (ATTACH)", "other.duckdb"},
		{"EXPORT DATABASE '" + dir + "/export'", "the query writes (EXPORT)", "export"},
		{"CREATE TABLE t2 AS SELECT * FROM src", "the query writes (CREATE)", ""},
		{"INSERT INTO src SELECT * FROM src", "the query writes (INSERT)", ""},
		{"UPDATE src SET grp = 'x'", "the query writes (UPDATE)", ""},
		{"DELETE FROM src", "the query writes (DELETE)", ""},
		{"SET threads = 1", "the query writes (SET)", ""},
		{"COMMIT", "the query writes (COMMIT)", ""},
		{"/* note */ -- line\n  insert into src select * from src", "the query writes (INSERT)", ""},
		{"WITH a AS (SELECT 1) DELETE FROM src", "statement other than a SELECT", ""},
		{"SELECT 1; DROP TABLE src", "statement other than a SELECT", ""},
		{"CREATE MACRO m(x) AS x + 1", "the query writes (CREATE", ""},
		{"PIVOT src ON grp USING count(*)", "is a PIVOT statement", ""},
		{"SELECT * FROM src; SELECT 1", "holds 2 statements", ""},
		{"EXPLAIN SELECT * FROM src", "is a EXPLAIN statement", ""},
		{"CALL pragma_version()", "is a CALL statement", ""},
		{"-- only a comment", "cohort.sql is empty", ""},
		// A SELECT that would write: the read-only transaction stops it.
		{"SELECT id, tr, nextval('seq') AS n FROM src", "read-only", ""},
	}
	before := fmt.Sprint(queryRows(t, w, "SELECT count(*), string_agg(grp, ',' ORDER BY id) FROM src"))
	for _, tt := range tests {
		_, err := read(t, w, warehouse.CohortQuery{SQL: tt.sql, Unit: "id", Treatment: "tr"})
		checkBadInput(t, err, tt.want)
		if tt.file != "" {
			if _, err := os.Stat(filepath.Join(dir, tt.file)); err == nil {
				t.Errorf("%q created %s", tt.sql, tt.file)
			}
		}
	}
	if after := fmt.Sprint(queryRows(t, w, "SELECT count(*), string_agg(grp, ',' ORDER BY id) FROM src")); after != before {
		t.Errorf("src changed: %s, was %s", after, before)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM duckdb_tables() WHERE table_name = 't2'")); got != "[[0]]" {
		t.Errorf("t2 exists: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT nextval('seq')")); got != "[[1]]" {
		t.Errorf("the sequence advanced during the read: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM duckdb_databases() WHERE database_name = 'other'")); got != "[[0]]" {
		t.Errorf("other is attached: %s", got)
	}
}

// TestAppenderInTransaction checks what Publish relies on: rows appended
// through DuckDB's appender inside an explicit transaction are part of it,
// so ROLLBACK removes them and COMMIT keeps them.
func TestAppenderInTransaction(t *testing.T) {
	w := openTemp(t)
	ctx := context.Background()
	execSQL(t, w, "CREATE TABLE app (i BIGINT, x DOUBLE)")
	appendN := func(n int) {
		t.Helper()
		err := w.testConn(t).Raw(func(dc any) error {
			a, err := duckdb.NewAppenderFromConn(dc.(driver.Conn), "main", "app")
			if err != nil {
				return err
			}
			for i := range n {
				if err := a.AppendRow(int64(i), float64(i)/2); err != nil {
					return err
				}
			}
			return a.Close()
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	count := func() string { return fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM app")) }
	// More than one chunk (2048 rows) so that flushes happen mid-append.
	const n = 5000
	execSQL(t, w, "BEGIN TRANSACTION")
	appendN(n)
	if got := count(); got != "[[5000]]" {
		t.Fatalf("inside the transaction: %s", got)
	}
	execSQL(t, w, "ROLLBACK")
	if got := count(); got != "[[0]]" {
		t.Fatalf("after ROLLBACK: %s rows remain; the appender is not transactional", got)
	}
	execSQL(t, w, "BEGIN TRANSACTION")
	appendN(n)
	execSQL(t, w, "COMMIT")
	if got := count(); got != "[[5000]]" {
		t.Fatalf("after COMMIT: %s", got)
	}
	_ = ctx
}

func TestOpen(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	missing := filepath.Join(dir, "no", "such")
	_, err := Open(ctx, filepath.Join(missing, "w.duckdb"))
	checkBadInput(t, err, "directory "+missing+" of warehouse.dsn does not exist")
	_, err = Open(ctx, ":memory:")
	checkBadInput(t, err, "not a file path")
	_, err = OpenReadOnly(ctx, filepath.Join(dir, "absent.duckdb"))
	checkBadInput(t, err, "absent.duckdb is not an existing DuckDB file")
	if _, err := os.Stat(filepath.Join(dir, "absent.duckdb")); err == nil {
		t.Error("OpenReadOnly created the file")
	}

	// Open creates the file; settings after ? reach DuckDB.
	path := filepath.Join(dir, "w.duckdb")
	w, err := Open(ctx, path+"?threads=1")
	if err != nil {
		t.Fatal(err)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT current_setting('threads')")); got != "[[1]]" {
		t.Errorf("threads setting %s", got)
	}
	execSQL(t, w, "CREATE TABLE src AS SELECT range AS id, range < 2 AS tr FROM range(4)")
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}

	// A read-only handle reads but cannot write, even outside ReadCohort.
	ro, err := OpenReadOnly(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer ro.Close()
	c, err := ro.ReadCohort(ctx, warehouse.CohortQuery{SQL: "SELECT * FROM src", Unit: "id", Treatment: "tr"})
	if err != nil || c.N() != 4 {
		t.Fatalf("read-only read: %v", err)
	}
	if _, err := ro.testConn(t).ExecContext(ctx, "CREATE TABLE x (i INTEGER)"); err == nil {
		t.Error("a read-only handle created a table")
	}
	out := warehouse.Output{Schema: "main", Prefix: "st_", Study: "st", Unit: "id", Treatment: "tr"}
	if err := ro.StartRun(ctx, out, warehouse.RunRecord{RunID: "r1"}); err == nil || !strings.Contains(err.Error(), "read-only") {
		t.Errorf("StartRun on a read-only handle: %v", err)
	}
}

// TestHelperHoldFile is not a test: TestDuckDBFileBusy runs the test binary
// again with COUNTERPART_HOLD set, so that another process holds the file
// (read-only when COUNTERPART_HOLD_MODE=ro), as a dashboard would.
func TestHelperHoldFile(t *testing.T) {
	path := os.Getenv("COUNTERPART_HOLD")
	if path == "" {
		t.Skip("helper process only")
	}
	dsn := path
	if os.Getenv("COUNTERPART_HOLD_MODE") == "ro" {
		dsn += "?access_mode=READ_ONLY"
	}
	db, err := sql.Open("duckdb", dsn)
	if err == nil {
		err = db.Ping()
	}
	if err != nil {
		fmt.Println("error", err)
		os.Exit(1)
	}
	fmt.Println("ready")
	bufio.NewReader(os.Stdin).ReadString('\n') // until the parent closes stdin
	db.Close()
	os.Exit(0)
}

// holdFile makes another process hold path open (mode "rw" or "ro")
// until the test ends.
func holdFile(t *testing.T, path, mode string) {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperHoldFile$")
	cmd.Env = append(os.Environ(), "COUNTERPART_HOLD="+path, "COUNTERPART_HOLD_MODE="+mode)
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		stdin.Close()
		cmd.Wait()
	})
	line, err := bufio.NewReader(stdout).ReadString('\n')
	if err != nil || strings.TrimSpace(line) != "ready" {
		t.Fatalf("helper: %q %v", line, err)
	}
}

// TestDuckDBFileBusy: a file another process holds gives ErrBusy (not the
// study lock's ErrLocked) where this process needs what the other holds:
// any open while it writes, a write while it reads. --wait retries and
// says so once.
func TestDuckDBFileBusy(t *testing.T) {
	ctx := context.Background()
	out := warehouse.Output{Schema: "main", Prefix: "st_", Study: "st", Unit: "id", Treatment: "tr"}
	tests := []struct {
		name, mode string
		wait       time.Duration
		// openBusy: Open fails; otherwise reading works and StartRun fails.
		openBusy bool
	}{
		{"held read-write", "rw", 0, true},
		{"held read-write, waited", "rw", 600 * time.Millisecond, true},
		{"held read-only", "ro", 0, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "held.duckdb")
			w, err := Open(ctx, path)
			if err != nil {
				t.Fatal(err)
			}
			execSQL(t, w, "CREATE TABLE src AS SELECT i AS id, i % 2 = 0 AS tr FROM range(10) t(i)")
			w.Close()
			holdFile(t, path, tt.mode)
			busy := 0
			w, err = OpenWith(ctx, path, warehouse.OpenOptions{Wait: tt.wait, OnBusy: func(error, time.Duration) { busy++ }})
			if tt.openBusy {
				if !errors.Is(err, warehouse.ErrBusy) || errors.Is(err, warehouse.ErrLocked) || !strings.Contains(err.Error(), "open in another process") {
					t.Fatalf("open of a held file: %v, want ErrBusy", err)
				}
				if want := min(1, int(tt.wait)); busy != want || (tt.wait > 0) != strings.Contains(err.Error(), "waited") {
					t.Errorf("busy told %d times, error %v; want %d", busy, err, want)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			defer w.Close()
			if c, err := w.ReadCohort(ctx, warehouse.CohortQuery{SQL: "SELECT * FROM src", Unit: "id", Treatment: "tr"}); err != nil || c.N() != 10 {
				t.Fatalf("read beside a reader: %v", err)
			}
			if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r1", Study: "st"}); !errors.Is(err, warehouse.ErrBusy) {
				t.Fatalf("StartRun beside a reader: %v, want ErrBusy", err)
			}
		})
	}
}

func TestLockNamesHolder(t *testing.T) {
	w := openTemp(t)
	ctx := context.Background()
	out := warehouse.Output{Schema: "main", Study: "hf"}
	unlock, err := w.Lock(ctx, out)
	if err != nil {
		t.Fatal(err)
	}
	_, err = w.Lock(ctx, out)
	if !errors.Is(err, warehouse.ErrLocked) || !strings.Contains(err.Error(), fmt.Sprintf("pid %d on ", os.Getpid())) ||
		!strings.Contains(err.Error(), "w.duckdb.main.hf.lock") {
		t.Fatalf("second lock: %v", err)
	}
	if err := unlock(); err != nil {
		t.Fatal(err)
	}
	if err := unlock(); err != nil {
		t.Errorf("second unlock: %v", err)
	}
	if _, err := w.Lock(ctx, warehouse.Output{Schema: "main", Study: "../x"}); !errors.Is(err, warehouse.ErrBadInput) {
		t.Errorf("lock with a path in the study name: %v", err)
	}
}

// TestCommentsAndTypes: every table, view and table column of the contract
// carries a comment, and the runs table's JSON columns are DuckDB JSON.
func TestCommentsAndTypes(t *testing.T) {
	w := openTemp(t)
	ctx := context.Background()
	out := warehouse.Output{Schema: "main", Prefix: "st_", Study: "st", Unit: "id", IDKind: warehouse.IDText, Treatment: "coached",
		Covariates: []warehouse.CovariateMeta{{Name: "age", Kind: warehouse.Numeric}, {Name: "sex", Kind: warehouse.Categorical}},
		Outcomes:   []string{"y"}, Schemes: []string{"att"}}
	rec := warehouse.RunRecord{RunID: "r1", Study: "st", StartedAt: time.Now(), SpecJSON: `{"study": "st", "k": [1, 2]}`}
	if err := w.StartRun(ctx, out, rec); err != nil {
		t.Fatal(err)
	}
	if err := w.CreateObjects(ctx, out); err != nil {
		t.Fatal(err)
	}
	if got := queryRows(t, w, "SELECT table_name, column_name FROM duckdb_columns() WHERE table_name LIKE 'st_%' AND (comment IS NULL OR comment = '') AND table_name NOT LIKE 'st_current_%'"); len(got) > 0 {
		t.Errorf("columns without a comment: %v", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM duckdb_tables() WHERE table_name LIKE 'st_%' AND comment <> ''")); got != "[[6]]" {
		t.Errorf("commented tables: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM duckdb_views() WHERE view_name LIKE 'st_%' AND comment <> ''")); got != "[[8]]" {
		t.Errorf("commented views: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT data_type FROM duckdb_columns() WHERE table_name = 'st_cohort' ORDER BY column_index")); got != "[[VARCHAR] [VARCHAR] [BOOLEAN] [DOUBLE] [VARCHAR] [DOUBLE]]" {
		t.Errorf("cohort column types: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT spec->>'$.study', json_array_length(spec->'$.k') FROM st_runs")); got != "[[st 2]]" {
		t.Errorf("spec as JSON: %s", got)
	}
	rec.RunID, rec.SpecJSON = "r2", "not json"
	if err := w.StartRun(ctx, out, rec); err == nil {
		t.Error("StartRun stored invalid JSON")
	}
}

// TestQuoteInDuckDB: DuckDB's own parser reads Quote's output back as the
// original name (external check of the quoting rule).
func TestQuoteInDuckDB(t *testing.T) {
	w := openTemp(t)
	for i, name := range []string{`a"b`, `""`, "select", "x y", "Ünï", "a.b", `"; DROP TABLE t; --`} {
		table := fmt.Sprintf("t%d", i)
		execSQL(t, w, "CREATE TABLE "+table+" ("+warehouse.Quote(name)+" INTEGER)")
		got := queryRows(t, w, "SELECT column_name FROM duckdb_columns() WHERE table_name = '"+table+"'")
		if len(got) != 1 || got[0][0] != name {
			t.Errorf("Quote(%q) created column %v", name, got)
		}
	}
}

// TestBalanceViewShapes: studies without covariates, or with categorical
// covariates only, still get balance views of the documented shape.
func TestBalanceViewShapes(t *testing.T) {
	for _, covs := range [][]warehouse.CovariateMeta{nil, {{Name: "sex", Kind: warehouse.Categorical}}} {
		w := openTemp(t)
		out := warehouse.Output{Schema: "main", Prefix: "st_", Study: "st", Unit: "id", Treatment: "tr", Covariates: covs}
		if err := w.StartRun(context.Background(), out, warehouse.RunRecord{RunID: "r1", Study: "st"}); err != nil {
			t.Fatal(err)
		}
		if err := w.CreateObjects(context.Background(), out); err != nil {
			t.Fatal(err)
		}
		got := queryRows(t, w, "SELECT column_name FROM duckdb_columns() WHERE table_name = 'st_balance_history' ORDER BY column_index")
		if fmt.Sprint(got) != "[[run_id] [covariate] [level] [adjustment] [mean_treated] [mean_control] [sd_treated] [sd_control] [smd] [variance_ratio]]" {
			t.Errorf("covariates %v: balance columns %v", covs, got)
		}
		if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM st_balance_history")); got != "[[0]]" {
			t.Errorf("covariates %v: %s balance rows before any publish", covs, got)
		}
	}
}

func TestSortLevels(t *testing.T) {
	tests := []struct{ in, want []string }{
		{[]string{"10", "2", "-1.5"}, []string{"-1.5", "2", "10"}},
		{[]string{"b", "B", "a"}, []string{"B", "a", "b"}},
		{[]string{"true", "false"}, []string{"false", "true"}},
		{[]string{"1.0", "1", "0"}, []string{"0", "1", "1.0"}}, // equal numbers: bytewise
		{[]string{"10", "x", "2"}, []string{"10", "2", "x"}},   // not all numbers: bytewise
		{[]string{"NaN", "1"}, []string{"1", "NaN"}},
	}
	for _, tt := range tests {
		got, remap := warehouse.LevelOrder(tt.in)
		if !slices.Equal(got, tt.want) {
			t.Errorf("warehouse.LevelOrder(%q) = %q, want %q", tt.in, got, tt.want)
		}
		for old, nw := range remap {
			if got[nw] != tt.in[old] {
				t.Errorf("warehouse.LevelOrder(%q): remap %d→%d names %q", tt.in, old, nw, got[nw])
			}
		}
	}
}

// TestDecimalFloat: the fast path gives exactly the double Go's correctly
// rounded parser gives for the decimal's text.
func TestDecimalFloat(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 11))
	for range 20000 {
		scale := uint8(r.IntN(19))
		v := r.Int64N(1<<53) - 1<<52
		d := duckdb.Decimal{Width: 38, Scale: scale, Value: big.NewInt(v)}
		want, err := strconv.ParseFloat(d.String(), 64)
		if err != nil {
			t.Fatal(err)
		}
		if got := decimalFloat(d); got != want {
			t.Fatalf("decimalFloat(%s) = %v, want %v", d.String(), got, want)
		}
	}
	if got := decimalFloat(duckdb.Decimal{Scale: 2, Value: new(big.Int).Lsh(big.NewInt(1), 80)}); math.Abs(got-math.Ldexp(1, 80)/100) > 1e-3*math.Ldexp(1, 80)/100 {
		t.Errorf("wide decimal %v", got)
	}
}
