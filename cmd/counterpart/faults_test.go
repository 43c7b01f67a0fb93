package main

import (
	"bufio"
	"bytes"
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"counterpart/match/study"
	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// The fault tests run the CLI as a child process (this test binary again,
// TestHelperCLI) so that a fault can be injected from outside it: a file
// size limit, a kill, a second process holding the DuckDB file. After
// each fault checkInvariants looks at what a reader sees.

// faultUnits is small: the faults need a publish, not a long one.
const faultUnits = 3000

// TestHelperCLI is not a test: with COUNTERPART_CLI set it runs the CLI on
// the arguments in COUNTERPART_CLI (tab-separated) and exits with its code.
// COUNTERPART_FSIZE limits the size of any file the process writes
// (RLIMIT_FSIZE: a full disk, per file); COUNTERPART_HOLD=path holds a
// DuckDB file open read-write until stdin closes (a dashboard), and
// COUNTERPART_READ=path opens it read-only, reads and exits.
func TestHelperCLI(t *testing.T) {
	switch {
	case os.Getenv("COUNTERPART_HOLD") != "":
		db, err := sql.Open("duckdb", os.Getenv("COUNTERPART_HOLD"))
		if err == nil {
			err = db.Ping()
		}
		if err != nil {
			fmt.Println("error", err)
			os.Exit(1)
		}
		fmt.Println("ready")
		_, _ = io.ReadAll(os.Stdin)
		db.Close()
		os.Exit(0)
	case os.Getenv("COUNTERPART_READ") != "":
		db, err := sql.Open("duckdb", os.Getenv("COUNTERPART_READ")+"?access_mode=READ_ONLY")
		var n int64
		if err == nil {
			err = db.QueryRow("SELECT count(*) FROM synth_src").Scan(&n)
		}
		if err != nil {
			fmt.Println("error", err)
			os.Exit(1)
		}
		fmt.Println(n)
		os.Exit(0)
	case os.Getenv("COUNTERPART_CLI") == "":
		t.Skip("helper process only")
	}
	if v := os.Getenv("COUNTERPART_FSIZE"); v != "" {
		n, _ := strconv.ParseUint(v, 10, 64)
		// Past the limit a write fails with EFBIG, as on a full disk,
		// instead of the default SIGXFSZ ending the process.
		signal.Ignore(syscall.SIGXFSZ)
		if err := syscall.Setrlimit(syscall.RLIMIT_FSIZE, &syscall.Rlimit{Cur: n, Max: n}); err != nil {
			fmt.Fprintln(os.Stderr, "setrlimit:", err)
			os.Exit(99)
		}
	}
	args := append([]string{"counterpart"}, strings.Split(os.Getenv("COUNTERPART_CLI"), "\t")...)
	os.Exit(run(context.Background(), args, os.Stdout, os.Stderr))
}

// child is the CLI in another process; env adds COUNTERPART_* settings.
func child(env []string, args ...string) *exec.Cmd {
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperCLI$")
	cmd.Env = append(os.Environ(), append(env, "COUNTERPART_CLI="+strings.Join(args, "\t"))...)
	return cmd
}

// runChild runs the CLI to its end and returns its exit code and output.
func runChild(t *testing.T, env []string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var o, e bytes.Buffer
	cmd := child(env, args...)
	cmd.Stdout, cmd.Stderr = &o, &e
	err := cmd.Run()
	var ee *exec.ExitError
	switch {
	case errors.As(err, &ee):
		code = ee.ExitCode()
	case err != nil:
		t.Fatal(err)
	}
	return code, o.String(), e.String()
}

// holdDuckDB has another process hold path read-write until the test ends.
func holdDuckDB(t *testing.T, path string) {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperCLI$")
	cmd.Env = append(os.Environ(), "COUNTERPART_HOLD="+path)
	stdin, _ := cmd.StdinPipe()
	stdout, _ := cmd.StdoutPipe()
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { stdin.Close(); cmd.Wait() })
	if line, err := bufio.NewReader(stdout).ReadString('\n'); err != nil || strings.TrimSpace(line) != "ready" {
		t.Fatalf("holder: %q %v", line, err)
	}
}

// faultDB is one engine's warehouse for the fault tests.
type faultDB struct {
	engine, dsn string
}

func newFaultDB(t *testing.T, engine string, units int) faultDB {
	t.Helper()
	if engine == "postgres" {
		dsn := pgtest.NewDatabase(t)
		pgtest.Exec(t, dsn, synthSQL(pgSeries(units)))
		return faultDB{engine, dsn}
	}
	path := filepath.Join(t.TempDir(), "faults.duckdb")
	db, err := sql.Open("duckdb", path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.Exec(synthSQL(fmt.Sprintf("range(1, %d) t(i)", units+1))); err != nil {
		t.Fatal(err)
	}
	return faultDB{engine, path}
}

// query reads the warehouse as a dashboard would: a DuckDB file opened
// read-only for the one query, a new Postgres session. A busy DuckDB file
// gives errBusyRead.
func (f faultDB) query(q string) ([][]any, error) {
	if f.engine == "postgres" {
		return pgQuery(f.dsn, q)
	}
	db, err := sql.Open("duckdb", f.dsn+"?access_mode=READ_ONLY")
	if err != nil {
		return nil, busyRead(err)
	}
	defer db.Close()
	rows, err := db.Query(q)
	if err != nil {
		return nil, busyRead(err)
	}
	return warehousetest.ScanAll(rows)
}

// pgQuery reads on a session of its own, as a dashboard does.
func pgQuery(dsn, q string) ([][]any, error) {
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		return nil, err
	}
	defer conn.Close(ctx)
	rows, err := conn.Query(ctx, q)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var out [][]any
	for rows.Next() {
		v, err := rows.Values()
		if err != nil {
			return nil, err
		}
		out = append(out, v)
	}
	return out, rows.Err()
}

var errBusyRead = errors.New("the file is held for writing")

// busyRead classes DuckDB's refusal of a file another process writes.
func busyRead(err error) error {
	if strings.Contains(err.Error(), "Could not set lock") {
		return errBusyRead
	}
	return err
}

func (f faultDB) mustQuery(t *testing.T, q string) [][]any {
	t.Helper()
	r, err := f.query(q)
	if err != nil {
		t.Fatalf("%s: %v", q, err)
	}
	return r
}

// latestRun is the newest runs row.
type latestRun struct {
	ID, Status, Message string
	// Current is the run the current views show ("" when none).
	Current string
}

// viewCheck is one consistent read of every current view: the run ids it
// shows and its row counts.
func viewCheck(f faultDB, prefix string, units int) (current string, err error) {
	var parts []string
	for _, v := range []string{"cohort", "scores", "weights", "matches", "effects"} {
		parts = append(parts, fmt.Sprintf("(SELECT count(DISTINCT run_id) FROM %[1]scurrent_%[2]s), (SELECT min(run_id) FROM %[1]scurrent_%[2]s), (SELECT count(*) FROM %[1]scurrent_%[2]s)", prefix, v))
	}
	rows, err := f.query("SELECT " + strings.Join(parts, ", ") +
		fmt.Sprintf(", (SELECT run_id FROM %sruns WHERE status = 'succeeded' ORDER BY finished_at DESC, run_id DESC LIMIT 1)", prefix))
	if err != nil {
		return "", err
	}
	r := rows[0]
	want := fmt.Sprint(r[15])
	for i, v := range []string{"cohort", "scores", "weights", "matches", "effects"} {
		n, id, count := fmt.Sprint(r[3*i]), fmt.Sprint(r[3*i+1]), fmt.Sprint(r[3*i+2])
		if n != "1" || id != want {
			return "", fmt.Errorf("current %s view shows %s runs (%s), want the one latest succeeded run %s", v, n, id, want)
		}
		if i < 3 && count != strconv.Itoa(units) {
			return "", fmt.Errorf("current %s view has %s rows, want %d", v, count, units)
		}
	}
	return want, nil
}

// checkInvariants checks what must hold after any fault, once no run is
// in progress: every current view shows exactly the latest succeeded run
// with all its rows, no staging or probe table is left in the output
// schema, and no run is still marked running. It returns the newest runs
// row, whose status and message the caller checks against the fault.
func checkInvariants(t *testing.T, f faultDB, prefix string, units int) latestRun {
	t.Helper()
	cur, err := viewCheck(f, prefix, units)
	if err != nil {
		t.Fatal(err)
	}
	tables := "SELECT table_name FROM information_schema.tables WHERE table_name LIKE '" + prefix + "%'"
	for _, r := range f.mustQuery(t, tables) {
		name := fmt.Sprint(r[0])
		if strings.HasSuffix(name, "_migrating") || strings.HasSuffix(name, "_probe") || strings.Contains(name, "staging") {
			t.Errorf("staging table %s left behind", name)
		}
	}
	if n := f.mustQuery(t, "SELECT count(*) FROM "+prefix+"runs WHERE status = 'running'"); fmt.Sprint(n[0][0]) != "0" {
		t.Errorf("%v runs still marked running", n[0][0])
	}
	r := f.mustQuery(t, "SELECT run_id, status, COALESCE(message, '') FROM "+prefix+"runs ORDER BY started_at DESC, run_id DESC LIMIT 1")
	return latestRun{ID: fmt.Sprint(r[0][0]), Status: fmt.Sprint(r[0][1]), Message: fmt.Sprint(r[0][2]), Current: cur}
}

func faultStudy(t *testing.T, f faultDB, extra string) string {
	t.Helper()
	return writeStudy(t, studyText("flt", f.engine, f.dsn)+extra)
}

// TestFaultBusyFile: a DuckDB file another process holds read-write is
// exit 7 (warehouse busy), not 4 (this study is running), and --wait
// retries with one line on stderr; nothing is written.
func TestFaultBusyFile(t *testing.T) {
	f := newFaultDB(t, "duckdb", 200)
	spec := faultStudy(t, f, "")
	holdDuckDB(t, f.dsn)
	for _, tt := range []struct {
		args     []string
		waitLine bool
	}{
		{[]string{"run", spec}, false},
		{[]string{"run", "--wait", "600ms", spec}, true},
	} {
		var stdout, stderr bytes.Buffer
		code := run(context.Background(), append([]string{"counterpart"}, tt.args...), &stdout, &stderr)
		lines := strings.Split(strings.TrimSpace(stderr.String()), "\n")
		if code != exitBusy || !strings.Contains(lines[len(lines)-1], "open in another process") {
			t.Errorf("%v: exit %d, stderr %q; want exit %d naming the other process", tt.args, code, stderr.String(), exitBusy)
		}
		if got := strings.Contains(stderr.String(), "warehouse busy, waiting up to 600ms"); got != tt.waitLine || len(lines) != 1+b2i(tt.waitLine) {
			t.Errorf("%v: stderr %q; want the wait line: %v", tt.args, stderr.String(), tt.waitLine)
		}
	}
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// TestFaultReadableDuringFitAndMatch: while a DuckDB run fits and matches,
// another process opens the file read-only and reads it.
func TestFaultReadableDuringFitAndMatch(t *testing.T) {
	f := newFaultDB(t, "duckdb", faultUnits)
	spec, err := study.Load(faultStudy(t, f, ""))
	if err != nil {
		t.Fatal(err)
	}
	wh, err := study.Open(context.Background(), spec, false)
	if err != nil {
		t.Fatal(err)
	}
	defer wh.Close()
	reads := map[string]string{}
	stage := func(name string) {
		if name != "fit" && name != "match" {
			return
		}
		cmd := exec.Command(os.Args[0], "-test.run=^TestHelperCLI$")
		cmd.Env = append(os.Environ(), "COUNTERPART_READ="+f.dsn)
		out, _ := cmd.Output()
		reads[name] = strings.TrimSpace(string(out))
	}
	if _, err := study.Run(context.Background(), spec, wh, study.Options{Stage: stage}); err != nil {
		t.Fatal(err)
	}
	for _, s := range []string{"fit", "match"} {
		if reads[s] != strconv.Itoa(faultUnits) {
			t.Errorf("read-only open from another process during %s: %q, want %d rows", s, reads[s], faultUnits)
		}
	}
}

// TestFaultFullDisk: a DuckDB file that cannot grow mid-publish (the
// process's file size limit) ends the run failed with the cause in its
// runs row; the current views still show the previous run.
func TestFaultFullDisk(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the CLI in child processes")
	}
	const units = 20000
	f := newFaultDB(t, "duckdb", units)
	spec := faultStudy(t, f, "")
	if code, _, stderr := runChild(t, nil, "run", spec); code != exitOK {
		t.Fatalf("first run: exit %d: %s", code, stderr)
	}
	first := checkInvariants(t, f, "flt_", units)
	st, err := os.Stat(f.dsn)
	if err != nil {
		t.Fatal(err)
	}
	// Room for the runs row, not for another run's tables.
	limit := strconv.FormatInt(256<<10, 10)
	t.Logf("file %d bytes, limit %s", st.Size(), limit)
	code, _, stderr := runChild(t, []string{"COUNTERPART_FSIZE=" + limit}, "run", spec)
	if code != exitRuntime || strings.Count(strings.TrimSpace(stderr), "\n") != 0 || !strings.Contains(stderr, "publish") {
		t.Fatalf("run on a full disk: exit %d, stderr %q; want exit 1, one line naming publish", code, stderr)
	}
	got := checkInvariants(t, f, "flt_", units)
	if got.Current != first.Current || got.Status != "failed" || got.ID == first.ID ||
		!(strings.Contains(strings.ToLower(got.Message), "file too large") || strings.Contains(strings.ToLower(got.Message), "space")) {
		t.Errorf("after the full disk: %+v; want a failed run with the cause, %s still current", got, first.Current)
	}
	// The disk has room again: the next run publishes.
	if code, _, stderr := runChild(t, nil, "run", spec); code != exitOK {
		t.Fatalf("run after the full disk: exit %d: %s", code, stderr)
	}
	if got := checkInvariants(t, f, "flt_", units); got.Current == first.Current || got.Status != "succeeded" {
		t.Errorf("after the next run: %+v", got)
	}
}

// TestFaultConcurrentRuns: four runs of one study started together. On
// Postgres one holds the study lock and the others exit 4; on DuckDB a run
// can also meet another's open file and exit 7. At least one publishes,
// and what a reader sees afterwards holds.
func TestFaultConcurrentRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the CLI in child processes")
	}
	for _, engine := range []string{"duckdb", "postgres"} {
		t.Run(engine, func(t *testing.T) {
			if engine == "postgres" {
				pgtest.Admin(t)
			}
			f := newFaultDB(t, engine, faultUnits)
			spec := faultStudy(t, f, "")
			codes := make([]int, 4)
			stderrs := make([]string, 4)
			var wg sync.WaitGroup
			for i := range codes {
				wg.Add(1)
				go func() {
					defer wg.Done()
					codes[i], _, stderrs[i] = runChild(t, nil, "run", spec)
				}()
			}
			wg.Wait()
			ok := 0
			for i, c := range codes {
				switch {
				case c == exitOK:
					ok++
				case c == exitLocked, c == exitBusy && engine == "duckdb":
				default:
					t.Errorf("run %d: exit %d: %s", i, c, stderrs[i])
				}
			}
			if ok == 0 {
				t.Fatalf("no run published: exits %v", codes)
			}
			got := checkInvariants(t, f, "flt_", faultUnits)
			if n := f.mustQuery(t, "SELECT count(*) FROM flt_runs WHERE status = 'succeeded'"); fmt.Sprint(n[0][0]) != strconv.Itoa(ok) || got.Status != "succeeded" {
				t.Errorf("%v succeeded runs rows for %d exits 0; newest %+v", n[0][0], ok, got)
			}
			t.Logf("%s: exits %v", engine, codes)
		})
	}
}

// TestFaultReadersDuringRepublish: readers poll the current views while a
// study publishes five times. Every read sees exactly one run with all its
// rows. (On DuckDB a read is refused while a run writes the file, and a
// run waits (--wait) while a reader has it open.)
func TestFaultReadersDuringRepublish(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the CLI in child processes")
	}
	for _, engine := range []string{"duckdb", "postgres"} {
		t.Run(engine, func(t *testing.T) {
			if engine == "postgres" {
				pgtest.Admin(t)
			}
			f := newFaultDB(t, engine, faultUnits)
			spec := faultStudy(t, f, "")
			if code, _, stderr := runChild(t, nil, "run", spec); code != exitOK {
				t.Fatalf("first run: exit %d: %s", code, stderr)
			}
			stop := make(chan struct{})
			var reads, busy int
			var bad []string
			done := make(chan struct{})
			go func() {
				defer close(done)
				for {
					select {
					case <-stop:
						return
					default:
					}
					_, err := viewCheck(f, "flt_", faultUnits)
					switch {
					case errors.Is(err, errBusyRead) && engine == "duckdb":
						busy++
						// Leave the writer gaps to open the file in.
						time.Sleep(20 * time.Millisecond)
					case err != nil:
						bad = append(bad, err.Error())
					default:
						reads++
						if engine == "duckdb" {
							time.Sleep(20 * time.Millisecond)
						}
					}
				}
			}()
			// A DuckDB reader keeps the writer out while it reads: the
			// runs wait for the file as a nightly run beside a dashboard
			// would.
			for i := range 5 {
				if code, _, stderr := runChild(t, nil, "run", "--wait", "60s", spec); code != exitOK {
					t.Errorf("republish %d: exit %d: %s", i, code, stderr)
				}
			}
			close(stop)
			<-done
			if len(bad) > 0 {
				t.Errorf("%d of %d reads saw a wrong state, first: %s", len(bad), reads+len(bad), bad[0])
			}
			if reads == 0 {
				t.Error("no read completed during the republishes")
			}
			checkInvariants(t, f, "flt_", faultUnits)
			t.Logf("%s: %d reads, %d refused while a publish held the file", engine, reads, busy)
		})
	}
}

// TestFaultExternalAccess: with warehouse.external_access false a DuckDB
// cohort query cannot read a host file: exit 2, one line, nothing written.
func TestFaultExternalAccess(t *testing.T) {
	f := newFaultDB(t, "duckdb", 200)
	for _, tt := range []struct {
		access, read string
		code         int
	}{{"true", "read_text", exitOK}, {"false", "read_csv", exitBadInput}, {"false", "read_text", exitBadInput}} {
		text := strings.Replace(studyText("flt", f.engine, f.dsn), "from synth_src",
			"from synth_src where (select count(*) from "+tt.read+"('/etc/passwd')) > 0", 1)
		spec := writeStudy(t, strings.Replace(text, "warehouse:\n", "warehouse:\n  external_access: "+tt.access+"\n", 1))
		var stdout, stderr bytes.Buffer
		code := run(context.Background(), []string{"counterpart", "run", spec}, &stdout, &stderr)
		if code != tt.code || (tt.code != exitOK && (strings.Count(strings.TrimSpace(stderr.String()), "\n") != 0 || !strings.Contains(stderr.String(), "disabled"))) {
			t.Errorf("external_access %s: exit %d, stderr %q; want %d", tt.access, code, stderr.String(), tt.code)
		}
		if tt.code != exitOK {
			if n := f.mustQuery(t, "SELECT count(*) FROM flt_runs"); fmt.Sprint(n[0][0]) != "1" {
				t.Errorf("the refused run wrote a runs row: %v rows", n[0][0])
			}
		}
	}
}

// TestFaultLeastPrivilege: a Postgres role that may read the cohort but
// not create tables in the output schema is refused before the read: exit
// 2, one line naming the right and the GRANT; nothing written.
func TestFaultLeastPrivilege(t *testing.T) {
	pgtest.Admin(t)
	f := newFaultDB(t, "postgres", 200)
	role := fmt.Sprintf("cp_reader_%d", os.Getpid())
	pgtest.Exec(t, f.dsn, "DROP ROLE IF EXISTS "+role+"; CREATE ROLE "+role+" LOGIN; CREATE SCHEMA results; GRANT USAGE ON SCHEMA results TO "+role+"; GRANT SELECT ON synth_src TO "+role)
	t.Cleanup(func() {
		pgtest.Exec(t, f.dsn, "DROP SCHEMA results CASCADE; REVOKE ALL ON synth_src FROM "+role+"; DROP OWNED BY "+role+"; DROP ROLE "+role)
	})
	dsn := f.dsn + map[bool]string{true: "&", false: "?"}[strings.Contains(f.dsn, "?")] + "user=" + role
	spec := writeStudy(t, studyText("flt", "postgres", dsn)+"output:\n  schema: results\n")
	var stdout, stderr bytes.Buffer
	code := run(context.Background(), []string{"counterpart", "run", spec}, &stdout, &stderr)
	line := strings.TrimSpace(stderr.String())
	if code != exitBadInput || strings.Contains(line, "\n") || !strings.Contains(line, "lacks CREATE on output.schema results") || !strings.Contains(line, "GRANT CREATE ON SCHEMA") {
		t.Errorf("least-privilege run: exit %d, stderr %q", code, line)
	}
	if n := f.mustQuery(t, "SELECT count(*) FROM information_schema.tables WHERE table_schema = 'results'"); fmt.Sprint(n[0][0]) != "0" {
		t.Errorf("%v tables written", n[0][0])
	}
}

// TestFaultFirstRunKilled: a first run SIGKILLed while it publishes
// leaves no table or view but the runs table, holding its running row
// when StartRun had committed; the next run marks it abandoned (with no
// finish time) and publishes.
func TestFaultFirstRunKilled(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the CLI in child processes")
	}
	for _, engine := range []string{"duckdb", "postgres"} {
		t.Run(engine, func(t *testing.T) {
			if engine == "postgres" {
				pgtest.Admin(t)
			}
			f := newFaultDB(t, engine, 20000)
			spec := faultStudy(t, f, "")
			cmd := child(nil, "--log-format", "text", "run", spec)
			stderr, _ := cmd.StderrPipe()
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			// The estimate stage's end is the start of publish.
			sc := bufio.NewScanner(stderr)
			for sc.Scan() && !strings.Contains(sc.Text(), "stage=estimate") {
			}
			time.Sleep(20 * time.Millisecond)
			_ = cmd.Process.Signal(syscall.SIGKILL)
			_ = cmd.Wait()
			if engine == "postgres" {
				for range 100 {
					if n := f.mustQuery(t, "SELECT count(*) FROM pg_stat_activity WHERE application_name = 'counterpart flt'"); fmt.Sprint(n[0][0]) == "0" {
						break
					}
					time.Sleep(20 * time.Millisecond)
				}
			}
			objs := f.mustQuery(t, "SELECT table_name FROM information_schema.tables WHERE table_name LIKE 'flt\\_%' ESCAPE '\\' ORDER BY table_name")
			if len(objs) > 1 || (len(objs) == 1 && fmt.Sprint(objs[0][0]) != "flt_runs") {
				t.Fatalf("a first run killed in publish left %v", objs)
			}
			if len(objs) == 1 {
				if r := f.mustQuery(t, "SELECT status, finished_at IS NULL FROM flt_runs"); fmt.Sprint(r) != "[[running true]]" {
					t.Errorf("the killed run's row: %v", r)
				}
			}
			if code, _, stderr := runChild(t, nil, "run", spec); code != exitOK {
				t.Fatalf("run after the kill: exit %d: %s", code, stderr)
			}
			checkInvariants(t, f, "flt_", 20000)
			if len(objs) == 1 {
				if r := f.mustQuery(t, "SELECT count(*) FROM flt_runs WHERE status = 'abandoned' AND finished_at IS NULL"); fmt.Sprint(r) != "[[1]]" {
					t.Errorf("the killed run is not abandoned without a finish time: %v", r)
				}
			}
		})
	}
}

// TestFaultRunsDurations: the runs table's duration of a run (finished_at
// − started_at) equals the wall time of its summary within 0.1 s: the
// finish is stamped at the end of the publish transaction.
func TestFaultRunsDurations(t *testing.T) {
	for _, engine := range []string{"duckdb", "postgres"} {
		t.Run(engine, func(t *testing.T) {
			if engine == "postgres" {
				pgtest.Admin(t)
			}
			f := newFaultDB(t, engine, faultUnits)
			spec := faultStudy(t, f, "")
			var stdout, stderr bytes.Buffer
			if code := run(context.Background(), []string{"counterpart", "run", "--json", spec}, &stdout, &stderr); code != exitOK {
				t.Fatalf("exit %d: %s", code, stderr.String())
			}
			var sum struct {
				RunID      string    `json:"run_id"`
				StartedAt  time.Time `json:"started_at"`
				FinishedAt time.Time `json:"finished_at"`
			}
			if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil {
				t.Fatal(err)
			}
			r := f.mustQuery(t, "SELECT started_at, finished_at FROM flt_runs WHERE run_id = '"+sum.RunID+"'")
			start, end := r[0][0].(time.Time), r[0][1].(time.Time)
			got, want := end.Sub(start).Seconds(), sum.FinishedAt.Sub(sum.StartedAt).Seconds()
			if d := got - want; d > 0.1 || d < -0.1 {
				t.Errorf("runs duration %.3fs, summary wall time %.3fs", got, want)
			}
		})
	}
}
