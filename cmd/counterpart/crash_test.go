package main

import (
	"bytes"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"math/rand/v2"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// crashUnits sizes the cohort so that publishing takes a good part of a
// second on a small machine: the kills need a window to land in.
const crashUnits = 60000

// crashKills is how many kills must land after the run's StartRun (its
// runs row says running) — that is, inside the publish stage.
const crashKills = 20

// crashEngine is one engine under the crash test: how to make its
// warehouse and how to query it between runs.
type crashEngine struct {
	name  string
	setup func(t *testing.T) (dsn string)
	query func(t *testing.T, dsn, q string) [][]any
	// settle waits until the killed process's session is gone (the
	// server has finished or aborted what it had received).
	settle func(t *testing.T, dsn string)
}

func crashEngines() []crashEngine {
	return []crashEngine{
		{
			name: "duckdb",
			setup: func(t *testing.T) string {
				path := filepath.Join(t.TempDir(), "crash.duckdb")
				db, err := sql.Open("duckdb", path)
				if err != nil {
					t.Fatal(err)
				}
				defer db.Close()
				if _, err := db.Exec(synthSQL(fmt.Sprintf("range(1, %d) t(i)", crashUnits+1))); err != nil {
					t.Fatal(err)
				}
				return path
			},
			query: func(t *testing.T, dsn, q string) [][]any {
				// Read-write, as the next run opens the file: that open
				// replays the write-ahead log of the killed process (its
				// committed runs row), which a read-only open does not.
				db, err := sql.Open("duckdb", dsn)
				if err != nil {
					t.Fatal(err)
				}
				defer db.Close()
				return warehousetest.SQLRows(t, db, q)
			},
			// The process is gone once Wait returns; DuckDB recovers on
			// the next open.
			settle: func(*testing.T, string) {},
		},
		{
			name: "postgres",
			setup: func(t *testing.T) string {
				dsn := pgtest.NewDatabase(t)
				pgtest.Exec(t, dsn, synthSQL(pgSeries(crashUnits)))
				return dsn
			},
			query: func(t *testing.T, dsn, q string) [][]any { return pgtest.Query(t, dsn, q) },
			settle: func(t *testing.T, dsn string) {
				for range 100 {
					n := pgtest.Query(t, dsn, "SELECT count(*) FROM pg_stat_activity WHERE application_name = 'counterpart crash'")
					if fmt.Sprint(n) == "[[0]]" {
						return
					}
					time.Sleep(20 * time.Millisecond)
				}
				t.Fatal("the killed run's session is still open after 2 s")
			},
		},
	}
}

// TestCrashSafety SIGKILLs the CLI at seeded random moments of its publish
// stage, on each engine, and checks after every kill that the current
// views show one complete succeeded run — never a row of the killed run —
// and at the end that a new run succeeds and becomes current.
func TestCrashSafety(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs it ~50 times; skipped with -short")
	}
	bin := filepath.Join(t.TempDir(), "counterpart")
	build := exec.Command("go", "build", "-o", bin, ".")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	for _, e := range crashEngines() {
		t.Run(e.name, func(t *testing.T) {
			if e.name == "postgres" {
				pgtest.Admin(t) // skip or fail before building the data
			}
			dsn := e.setup(t)
			spec := writeStudy(t, studyText("crash", e.name, dsn))
			r := rand.New(rand.NewPCG(20260101, uint64(len(e.name))))

			// A complete first run gives the previous run and the timing
			// of the publish window.
			wall, publish := runToEnd(t, bin, spec)
			t.Logf("%s: run %.2fs, publish %.2fs", e.name, wall.Seconds(), publish.Seconds())

			// The kill moment is drawn uniformly between the latest delay
			// that came too early (before StartRun) and the earliest that
			// came too late (after the commit): a bracket that closes in on
			// the running window from both sides, however narrow it is
			// next to the process's start-up jitter. A contradiction
			// (jitter put an early kill after a late one) reopens it.
			lo, hi := time.Duration(0), wall+publish
			landed, early, late := 0, 0, 0
			prev, _, _ := currentRun(t, e, dsn)
			for attempt := 0; landed < crashKills; attempt++ {
				// The running window is shorter than the publish stage:
				// on DuckDB the stage also opens the file and checkpoints
				// it on close, after the commit. Allow more misses.
				if attempt == 6*crashKills {
					t.Fatalf("only %d of %d attempts killed a run inside publish (%d early, %d late)", landed, attempt, early, late)
				}
				if lo >= hi {
					lo, hi = max(0, hi-publish), lo+publish
				}
				delay := lo + time.Duration(r.Float64()*float64(hi-lo))
				cmd := exec.Command(bin, "run", spec)
				if err := cmd.Start(); err != nil {
					t.Fatal(err)
				}
				time.Sleep(delay)
				_ = cmd.Process.Signal(syscall.SIGKILL)
				_ = cmd.Wait()
				e.settle(t, dsn)
				now, latest, status := currentRun(t, e, dsn)
				switch {
				case status == "running": // killed inside publish: the previous run stays current
					landed++
					if now != prev {
						t.Fatalf("kill %d at %v: current views show run %s, want the previous %s", attempt, delay, now, prev)
					}
				case status == "succeeded" && latest != prev: // the kill came after the commit: the run is whole
					late++
					hi = delay
					if now != latest {
						t.Fatalf("a committed run %s is not current (%s)", latest, now)
					}
				case latest == prev: // killed before StartRun
					early++
					lo = delay
				default:
					t.Fatalf("latest run %s has status %s", latest, status)
				}
				prev = now
			}
			runToEnd(t, bin, spec)
			if now, _, _ := currentRun(t, e, dsn); now == prev {
				t.Fatalf("the run after the kills did not become current")
			}
			t.Logf("%s: %d kills inside publish, %d before it, %d after the commit", e.name, landed, early, late)
		})
	}
}

// runToEnd runs the study to completion and returns its wall time and the
// publish stage's time from the JSON summary. A run refused because the
// killed run's session has not yet been reaped (exit 4) is retried.
func runToEnd(t *testing.T, bin, spec string) (wall, publish time.Duration) {
	t.Helper()
	for try := 0; ; try++ {
		var stdout, stderr bytes.Buffer
		cmd := exec.Command(bin, "run", "--json", spec)
		cmd.Stdout, cmd.Stderr = &stdout, &stderr
		start := time.Now()
		err := cmd.Run()
		wall = time.Since(start)
		var ee *exec.ExitError
		if errors.As(err, &ee) && ee.ExitCode() == exitLocked && try < 20 {
			time.Sleep(100 * time.Millisecond)
			continue
		}
		if err != nil {
			t.Fatalf("run: %v: %s", err, stderr.String())
		}
		var sum struct {
			Status  string             `json:"status"`
			Timings map[string]float64 `json:"stage_seconds"`
		}
		if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil || sum.Status != "succeeded" {
			t.Fatalf("run summary %v: %.200s", err, stdout.String())
		}
		return wall, time.Duration(sum.Timings["publish"] * float64(time.Second))
	}
}

// currentRun checks, in one snapshot, that the four current views show
// exactly one run, the latest succeeded one, with all its rows (so no row
// of any other run), and returns its id and the latest run's id and
// status.
func currentRun(t *testing.T, e crashEngine, dsn string) (current, latest, latestStatus string) {
	t.Helper()
	got := e.query(t, dsn, `SELECT
		(SELECT run_id || ' ' || status FROM crash_runs ORDER BY started_at DESC, run_id DESC LIMIT 1),
		(SELECT run_id FROM crash_runs WHERE status = 'succeeded' ORDER BY finished_at DESC, run_id DESC LIMIT 1),
		(SELECT count(DISTINCT run_id) FROM crash_current_cohort), (SELECT min(run_id) FROM crash_current_cohort), (SELECT count(*) FROM crash_current_cohort),
		(SELECT count(DISTINCT run_id) FROM crash_current_scores), (SELECT min(run_id) FROM crash_current_scores), (SELECT count(*) FROM crash_current_scores),
		(SELECT count(DISTINCT run_id) FROM crash_current_weights), (SELECT min(run_id) FROM crash_current_weights), (SELECT count(*) FROM crash_current_weights),
		(SELECT count(DISTINCT run_id) FROM crash_current_matches), (SELECT min(run_id) FROM crash_current_matches)`)
	latest, latestStatus, _ = strings.Cut(fmt.Sprint(got[0][0]), " ")
	r := got[0][1:]
	id := fmt.Sprint(r[0])
	for k, v := range []string{"cohort", "scores", "weights"} {
		if fmt.Sprint(r[1+3*k]) != "1" || fmt.Sprint(r[2+3*k]) != id || fmt.Sprint(r[3+3*k]) != fmt.Sprint(crashUnits) {
			t.Fatalf("current %s view: %v runs, run %v, %v rows; want run %s with %d rows", v, r[1+3*k], r[2+3*k], r[3+3*k], id, crashUnits)
		}
	}
	if fmt.Sprint(r[10]) != "1" || fmt.Sprint(r[11]) != id {
		t.Fatalf("current matches view: %v runs, run %v; want %s", r[10], r[11], id)
	}
	return id, latest, latestStatus
}
