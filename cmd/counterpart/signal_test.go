package main

import (
	"bufio"
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"counterpart/warehouse/postgres/pgtest"
)

// The signal tests run the CLI as a child process: this test binary,
// re-executed to run only TestFaultChild with faultChildEnv set, which
// runs main with the arguments in faultArgsEnv. (Not from init: DuckDB
// calls back into Go from its own threads, and such calls wait until
// package initialisation is over.) With faultPauseEnv naming a stage, the
// the child holds at that stage's start (it prints a faultPauseMsg record
// first) until its context ends, so that a signal lands inside the stage
// however short the stage is at test sizes.
const (
	faultChildEnv = "COUNTERPART_FAULT_CHILD"
	faultArgsEnv  = "COUNTERPART_FAULT_ARGS"
	faultPauseEnv = "COUNTERPART_FAULT_PAUSE"
	faultPauseMsg = "fault pause"
)

// TestFaultChild is the child process of the signal tests; run directly
// it does nothing.
func TestFaultChild(t *testing.T) {
	if os.Getenv(faultChildEnv) != "1" {
		t.Skip("the signal tests' child process")
	}
	if pause := os.Getenv(faultPauseEnv); pause != "" {
		stageHook = func(ctx context.Context, stage string) {
			if stage != pause {
				return
			}
			fmt.Fprintf(os.Stderr, "{\"msg\":%q,\"stage\":%q}\n", faultPauseMsg, stage)
			select {
			case <-ctx.Done():
			case <-time.After(time.Minute):
			}
		}
	}
	os.Args = append([]string{"counterpart"}, strings.Split(os.Getenv(faultArgsEnv), "\x1f")...)
	main()
}

// stopWithin is the bound on how long a signalled run may take to
// exit. The check is a generous deadline, not a timing assertion.
const stopWithin = 2 * time.Second

// signalUnits sizes the signal tests' cohort: small, so that the many runs
// stay quick, large enough that publishing takes a window a signal can land
// in.
const signalUnits = 8000

// sigChild is one CLI process under test with its stderr read line by line.
type sigChild struct {
	cmd   *exec.Cmd
	mu    sync.Mutex
	lines []string
	more  chan struct{} // signalled on each new line
	done  chan struct{} // closed when stderr ends
}

func startChild(t *testing.T, spec, pause string) *sigChild {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^TestFaultChild$")
	cmd.Env = append(os.Environ(), faultChildEnv+"=1", faultPauseEnv+"="+pause,
		faultArgsEnv+"="+strings.Join([]string{"--log-format", "json", "run", spec}, "\x1f"))
	pipe, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	c := &sigChild{cmd: cmd, more: make(chan struct{}, 1), done: make(chan struct{})}
	go func() {
		defer close(c.done)
		sc := bufio.NewScanner(pipe)
		for sc.Scan() {
			c.mu.Lock()
			c.lines = append(c.lines, sc.Text())
			c.mu.Unlock()
			select {
			case c.more <- struct{}{}:
			default:
			}
		}
	}()
	t.Cleanup(func() { _ = cmd.Process.Kill() })
	return c
}

// waitLine waits until a stderr line contains every one of parts.
func (c *sigChild) waitLine(t *testing.T, timeout time.Duration, parts ...string) {
	t.Helper()
	deadline := time.After(timeout)
	seen := 0
	for {
		c.mu.Lock()
		for ; seen < len(c.lines); seen++ {
			ok := true
			for _, p := range parts {
				ok = ok && strings.Contains(c.lines[seen], p)
			}
			if ok {
				c.mu.Unlock()
				return
			}
		}
		c.mu.Unlock()
		select {
		case <-c.more:
		case <-c.done:
			c.mu.Lock()
			done := seen == len(c.lines)
			c.mu.Unlock()
			if done {
				t.Fatalf("the sigChild exited without a line holding %q: %s", parts, c.stderr())
			}
		case <-deadline:
			t.Fatalf("no line holding %q within %v: %s", parts, timeout, c.stderr())
		}
	}
}

func (c *sigChild) stderr() string {
	c.mu.Lock()
	defer c.mu.Unlock()
	return strings.Join(c.lines, "\n")
}

// wait waits for the child's exit and returns its exit code (-1 when a
// signal ended it) and how long it took; a child still running after
// timeout is killed and fails the test.
func (c *sigChild) wait(t *testing.T, timeout time.Duration) (int, time.Duration) {
	t.Helper()
	start := time.Now()
	exited := make(chan error, 1)
	go func() {
		<-c.done
		exited <- c.cmd.Wait()
	}()
	select {
	case err := <-exited:
		took := time.Since(start)
		var ee *exec.ExitError
		if errors.As(err, &ee) {
			return ee.ExitCode(), took
		}
		if err != nil {
			t.Fatal(err)
		}
		return 0, took
	case <-time.After(timeout):
		_ = c.cmd.Process.Signal(syscall.SIGQUIT) // the Go runtime prints its goroutines
		time.Sleep(time.Second)
		_ = c.cmd.Process.Kill()
		t.Fatalf("the sigChild was still running %v later: %s", timeout, c.stderr())
		return 0, 0
	}
}

// faultEngine is one engine under the signal tests.
type faultEngine struct {
	name  string
	setup func(t *testing.T, units int, level string) (dsn string)
	query func(t *testing.T, dsn, q string) [][]any
	// settle waits until a killed process's sessions are gone.
	settle func(t *testing.T, dsn string)
}

// faultEngines are DuckDB and Postgres; the setup's level, when set, is
// the SQL of an extra text column "grp" of synth_src.
func faultEngines() []faultEngine {
	withLevel := func(create, level string) string {
		if level == "" {
			return create
		}
		return strings.Replace(create, "AS y_cont\n", "AS y_cont,\n       "+level+" AS grp\n", 1)
	}
	return []faultEngine{
		{
			name: "duckdb",
			setup: func(t *testing.T, units int, level string) string {
				path := filepath.Join(t.TempDir(), "fault.duckdb")
				db, err := sql.Open("duckdb", path)
				if err != nil {
					t.Fatal(err)
				}
				defer db.Close()
				if _, err := db.Exec(withLevel(synthSQL(fmt.Sprintf("range(1, %d) t(i)", units+1)), level)); err != nil {
					t.Fatal(err)
				}
				return path
			},
			query: func(t *testing.T, dsn, q string) [][]any {
				for _, e := range crashEngines() {
					if e.name == "duckdb" {
						return e.query(t, dsn, q)
					}
				}
				panic("no duckdb crash engine")
			},
			settle: func(*testing.T, string) {},
		},
		{
			name: "postgres",
			setup: func(t *testing.T, units int, level string) string {
				pgtest.Admin(t)
				dsn := pgtest.NewDatabase(t)
				pgtest.Exec(t, dsn, withLevel(synthSQL(pgSeries(units)), level))
				return dsn
			},
			query: func(t *testing.T, dsn, q string) [][]any { return pgtest.Query(t, dsn, q) },
			settle: func(t *testing.T, dsn string) {
				for range 200 {
					n := pgtest.Query(t, dsn, "SELECT count(*) FROM pg_stat_activity WHERE application_name = 'counterpart fault'")
					if fmt.Sprint(n) == "[[0]]" {
						return
					}
					time.Sleep(10 * time.Millisecond)
				}
				t.Fatal("the killed run's session is still open after 2 s")
			},
		},
	}
}

// faultState is what the warehouse shows after a run or a fault.
type faultState struct {
	current              string // the run every current view shows
	latest, latestStatus string // the newest runs row
	running              int    // rows still running
}

// checkFaultViews checks, in one snapshot, that the current views of
// study "fault" show exactly one run, the latest succeeded one, with all
// of its units in the cohort, scores and weights views; the shared
// checkInvariants of the warehouse's fault tests says more, and the two
// are unified on merge.
func checkFaultViews(t *testing.T, e faultEngine, dsn string, units int) faultState {
	t.Helper()
	got := e.query(t, dsn, `SELECT
		(SELECT run_id || ' ' || status FROM fault_runs ORDER BY started_at DESC, run_id DESC LIMIT 1),
		(SELECT count(*) FROM fault_runs WHERE status = 'running'),
		(SELECT run_id FROM fault_runs WHERE status = 'succeeded' ORDER BY finished_at DESC, run_id DESC LIMIT 1),
		(SELECT count(DISTINCT run_id) FROM fault_current_cohort), (SELECT min(run_id) FROM fault_current_cohort), (SELECT count(*) FROM fault_current_cohort),
		(SELECT count(DISTINCT run_id) FROM fault_current_scores), (SELECT min(run_id) FROM fault_current_scores), (SELECT count(*) FROM fault_current_scores),
		(SELECT count(DISTINCT run_id) FROM fault_current_weights), (SELECT min(run_id) FROM fault_current_weights), (SELECT count(*) FROM fault_current_weights),
		(SELECT count(DISTINCT run_id) FROM fault_current_matches), (SELECT min(run_id) FROM fault_current_matches)`)
	var st faultState
	st.latest, st.latestStatus, _ = strings.Cut(fmt.Sprint(got[0][0]), " ")
	fmt.Sscan(fmt.Sprint(got[0][1]), &st.running)
	r := got[0][2:]
	st.current = fmt.Sprint(r[0])
	for k, v := range []string{"cohort", "scores", "weights"} {
		if fmt.Sprint(r[1+3*k]) != "1" || fmt.Sprint(r[2+3*k]) != st.current || fmt.Sprint(r[3+3*k]) != fmt.Sprint(units) {
			t.Fatalf("current %s view: %v runs, run %v, %v rows; want run %s with %d rows", v, r[1+3*k], r[2+3*k], r[3+3*k], st.current, units)
		}
	}
	if fmt.Sprint(r[10]) != "1" || fmt.Sprint(r[11]) != st.current {
		t.Fatalf("current matches view: %v runs, run %v; want %s", r[10], r[11], st.current)
	}
	return st
}

// runFault runs the study to completion (exit 0), retrying while a killed
// run's lock is still being released (exit 4), and checks that it became
// current with no run left running.
func runFault(t *testing.T, e faultEngine, dsn, spec string, units int) faultState {
	t.Helper()
	for try := 0; ; try++ {
		c := startChild(t, spec, "")
		code, _ := c.wait(t, 20*time.Second)
		if code == exitLocked && try < 20 {
			time.Sleep(100 * time.Millisecond)
			continue
		}
		if code != 0 {
			t.Fatalf("run: exit %d: %s", code, c.stderr())
		}
		st := checkFaultViews(t, e, dsn, units)
		if st.current != st.latest || st.latestStatus != "succeeded" || st.running != 0 {
			t.Fatalf("after a good run: current %s, latest %s %s, %d running", st.current, st.latest, st.latestStatus, st.running)
		}
		return st
	}
}

// TestSignalAtEachStage sends SIGTERM and SIGKILL to the CLI held at the
// start of each stage, on each engine. After SIGTERM the process exits 6
// within stopWithin with one WARN record; after either signal the current
// views still show the previous run with every row, a runs row of the
// signalled run (if it got one) is cancelled (SIGTERM) or left for the
// next run to settle (SIGKILL), and the next run succeeds and becomes
// current. A last case SIGTERMs a run inside its publish transaction, after
// StartRun, so that its row must read cancelled.
func TestSignalAtEachStage(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the CLI about 60 times; skipped with -short")
	}
	for _, e := range faultEngines() {
		t.Run(e.name, func(t *testing.T) {
			dsn := e.setup(t, signalUnits, "")
			spec := writeStudy(t, studyText("fault", e.name, dsn))
			prev := runFault(t, e, dsn, spec, signalUnits)
			for _, sig := range []syscall.Signal{syscall.SIGTERM, syscall.SIGKILL} {
				for _, stage := range runStages {
					c := startChild(t, spec, stage)
					c.waitLine(t, time.Minute, faultPauseMsg, `"stage":"`+stage+`"`)
					_ = c.cmd.Process.Signal(sig)
					code, took := c.wait(t, 10*time.Second)
					e.settle(t, dsn)
					st := checkFaultViews(t, e, dsn, signalUnits)
					if st.current != prev.current {
						t.Fatalf("%v at %s: current views show run %s, want the previous %s", sig, stage, st.current, prev.current)
					}
					if sig == syscall.SIGTERM {
						if code != exitCancelled || took > stopWithin {
							t.Fatalf("SIGTERM at %s: exit %d after %v, want %d within %v: %s", stage, code, took, exitCancelled, stopWithin, c.stderr())
						}
						checkCancelLine(t, c.stderr(), stage)
						if st.latest != prev.latest && st.latestStatus != "cancelled" {
							t.Fatalf("SIGTERM at %s: the run's row is %s, want cancelled", stage, st.latestStatus)
						}
						t.Logf("SIGTERM at %s: exit %d after %v", stage, code, took.Round(time.Millisecond))
					} else if code != -1 {
						t.Fatalf("SIGKILL at %s: exit %d, want death by the signal", stage, code)
					}
					prev = runFault(t, e, dsn, spec, signalUnits)
				}
			}
			sigtermInPublish(t, e, dsn, spec, prev)
		})
	}
}

// sigtermInPublish SIGTERMs runs at moments drawn over their publish stage
// until one lands after StartRun and before the commit: that run's row
// must read cancelled and the previous run stay current.
func sigtermInPublish(t *testing.T, e faultEngine, dsn, spec string, prev faultState) {
	t.Helper()
	for attempt := range 12 {
		c := startChild(t, spec, "")
		c.waitLine(t, time.Minute, `"msg":"stage done"`, `"stage":"estimate"`)
		time.Sleep(time.Duration(attempt%4) * 15 * time.Millisecond)
		_ = c.cmd.Process.Signal(syscall.SIGTERM)
		code, took := c.wait(t, 10*time.Second)
		st := checkFaultViews(t, e, dsn, signalUnits)
		switch {
		case code == 0: // too late: the run committed and is current
			if st.current != st.latest {
				t.Fatalf("a committed run %s is not current (%s)", st.latest, st.current)
			}
		case code != exitCancelled || took > stopWithin:
			t.Fatalf("SIGTERM in publish: exit %d after %v, want %d within %v: %s", code, took, exitCancelled, stopWithin, c.stderr())
		case st.current != prev.current:
			t.Fatalf("SIGTERM in publish: current views show %s, want the previous %s", st.current, prev.current)
		case st.latest != prev.latest:
			if st.latestStatus != "cancelled" {
				t.Fatalf("SIGTERM in publish: the run's row is %s, want cancelled: %s", st.latestStatus, c.stderr())
			}
			checkCancelLine(t, c.stderr(), "publish")
			t.Logf("SIGTERM inside publish (attempt %d): row cancelled, exit 6 after %v", attempt+1, took.Round(time.Millisecond))
			runFault(t, e, dsn, spec, signalUnits)
			return
		}
		prev = runFault(t, e, dsn, spec, signalUnits)
	}
	t.Fatal("no SIGTERM landed inside the publish transaction in 12 attempts")
}

// checkCancelLine checks that stderr holds exactly one record of the
// cancellation, at WARN, naming the stage and exit code 6.
func checkCancelLine(t *testing.T, stderr, stage string) {
	t.Helper()
	var got []string
	for _, l := range strings.Split(stderr, "\n") {
		if strings.Contains(l, "cancelled") {
			got = append(got, l)
		}
	}
	if len(got) != 1 || !strings.Contains(got[0], `"level":"WARN"`) || !strings.Contains(got[0], `"stage":"`+stage+`"`) || !strings.Contains(got[0], `"exit_code":6`) {
		t.Fatalf("want one WARN record of the cancellation during %s, got %q", stage, got)
	}
}

// TestSignalDuringLongFit SIGTERMs a run whose fit takes many seconds (a
// 400-level covariate, allowed by raised limits, in 40,000 units) while it
// fits: the process must end within stopWithin, reporting the fit stage.
func TestSignalDuringLongFit(t *testing.T) {
	if testing.Short() {
		t.Skip("a long fit; skipped with -short")
	}
	const units = 40000
	e := faultEngines()[0]
	dsn := e.setup(t, units, "'g' || ((i // 3) % 400)")
	text := strings.Replace(studyText("fault", "duckdb", dsn), "x1, x2, region, y_cont", "x1, x2, region, grp, y_cont", 1)
	text = strings.Replace(text, "covariates: [x1, x2, region]", "covariates: [x1, x2, region, grp]\n  max_levels: 1000\nscore:\n  max_terms: 1000", 1)
	spec := writeStudy(t, text)
	c := startChild(t, spec, "")
	c.waitLine(t, time.Minute, `"msg":"stage done"`, `"stage":"read"`)
	time.Sleep(time.Second) // well inside the fit, which takes far longer
	_ = c.cmd.Process.Signal(syscall.SIGTERM)
	code, took := c.wait(t, 30*time.Second)
	if code != exitCancelled || took > stopWithin {
		t.Fatalf("SIGTERM during the fit: exit %d after %v, want %d within %v: %s", code, took, exitCancelled, stopWithin, c.stderr())
	}
	checkCancelLine(t, c.stderr(), "fit")
	t.Logf("SIGTERM during a long fit: exit 6 after %v", took.Round(time.Millisecond))
}
