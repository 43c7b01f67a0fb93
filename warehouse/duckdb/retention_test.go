package duckdb

import (
	"context"
	"fmt"
	"testing"

	"counterpart/warehouse"
)

// retentionRuns creates a runs table with four runs, the fourth running
// (the one being published), and an empty child table.
func retentionRuns(t *testing.T, w *Warehouse) {
	t.Helper()
	execSQL(t, w, `CREATE TABLE runs (run_id VARCHAR PRIMARY KEY, status VARCHAR, started_at TIMESTAMPTZ, finished_at TIMESTAMPTZ);
	CREATE TABLE child (run_id VARCHAR NOT NULL, unit BIGINT, x DOUBLE);
	INSERT INTO runs VALUES
	    ('01a20000-0000-7000-8000-000000000001', 'succeeded', TIMESTAMPTZ '2026-11-01 02:30:00+00', TIMESTAMPTZ '2026-11-01 02:31:00+00'),
	    ('01a20000-0000-7000-8000-000000000002', 'failed',    TIMESTAMPTZ '2026-11-02 02:30:00+00', TIMESTAMPTZ '2026-11-02 02:31:00+00'),
	    ('01a20000-0000-7000-8000-000000000003', 'rejected',  TIMESTAMPTZ '2026-11-03 02:30:00+00', TIMESTAMPTZ '2026-11-03 02:31:00+00'),
	    ('01a20000-0000-7000-8000-000000000004', 'running',   TIMESTAMPTZ '2026-11-04 02:30:00+00', NULL)`)
}

const currentRun = "01a20000-0000-7000-8000-000000000004"

// retain lists the expired runs of the current run (keep 2 succeeded
// runs, the others keepDays days) and deletes their rows from child,
// inside the caller's transaction.
func retain(t *testing.T, w *Warehouse, status string, keepDays int) ([]any, error) {
	t.Helper()
	ctx := context.Background()
	execSQL(t, w, fmt.Sprintf("UPDATE runs SET status = '%s', finished_at = TIMESTAMPTZ '2026-11-04 02:31:00+00' WHERE run_id = '%s'", status, currentRun))
	ids, err := w.ExpiredRuns(ctx, &warehouse.Objects{Runs: `"main"."runs"`}, currentRun, 2, keepDays)
	if err != nil || len(ids) == 0 {
		return ids, err
	}
	q := w.Render("retention.sql", map[string]string{"Table": `"main"."child"`, "Params": warehouse.Placeholders(len(ids))})
	_, err = w.testConn(t).ExecContext(ctx, q, ids...)
	return ids, err
}

// TestRetentionUnderMemoryCap: retention runs late in the publish
// transaction, after the run's own rows were inserted. DuckDB does not
// count the rows a transaction has inserted but not committed in its
// estimates, so on an output table with no committed rows yet (the first
// nights, after failed runs) a DELETE … WHERE run_id IN (subquery over
// the runs table) was planned as a hash join built over the rows just
// inserted: at 2 million units it ran out of memory under
// warehouse-scale mode's memory cap (and here, under 24 MB, at 1.5
// million). Listing the expired runs first (expired_runs.sql) and
// deleting by that list (retention.sql) filters the scan instead. The
// other cases check the rule itself (README, output.keep_runs and
// keep_failed_days): the newest keep_runs succeeded runs and the latest
// succeeded run are kept, the others by age. Common
// practice: a regression test of the failure seen.
func TestRetentionUnderMemoryCap(t *testing.T) {
	t.Run("first nights, 1.5 million new rows, 24 MB", func(t *testing.T) {
		w := openTemp(t)
		retentionRuns(t, w)
		execSQL(t, w, `SET memory_limit = '24MB'; BEGIN TRANSACTION;
		INSERT INTO child SELECT '`+currentRun+`', i, i FROM range(1500000) AS b(i)`)
		if _, err := retain(t, w, "succeeded", 0); err != nil {
			t.Fatalf("retention: %v", err)
		}
		execSQL(t, w, "COMMIT")
		if r := queryRows(t, w, "SELECT count(*) FROM child WHERE run_id = '"+currentRun+"'"); r[0][0] != int64(1500000) {
			t.Errorf("the run's rows after retention: %v", r)
		}
	})
	for _, tc := range []struct {
		status   string
		keepDays int
		kept     []string // runs whose child rows survive, in order
	}{
		// The current run succeeds: runs 1 and 4 are the two newest
		// succeeded; the failed and rejected runs 2 and 3 are kept, not
		// counted, with no age limit, and expire with one (they are a
		// month old).
		{"succeeded", 0, []string{"1", "2", "3", "4"}},
		{"succeeded", 1, []string{"1", "4"}},
		// It is rejected: run 1 stays as the latest succeeded run, which
		// the current views show.
		{"rejected", 1, []string{"1", "4"}},
	} {
		t.Run(fmt.Sprintf("rule, current run %s, keep_failed_days %d", tc.status, tc.keepDays), func(t *testing.T) {
			w := openTemp(t)
			retentionRuns(t, w)
			execSQL(t, w, `INSERT INTO child SELECT '01a20000-0000-7000-8000-00000000000' || r, i, i FROM range(1, 4) AS a(r), range(10) AS b(i);
			BEGIN TRANSACTION; INSERT INTO child SELECT '`+currentRun+`', i, i FROM range(10) AS b(i)`)
			if _, err := retain(t, w, tc.status, tc.keepDays); err != nil {
				t.Fatalf("retention: %v", err)
			}
			execSQL(t, w, "COMMIT")
			rows := queryRows(t, w, "SELECT right(run_id, 1), count(*) FROM child GROUP BY run_id ORDER BY run_id")
			var got []string
			for _, r := range rows {
				got = append(got, fmt.Sprint(r[0]))
				if r[1] != int64(10) {
					t.Errorf("run %v kept %v rows, want 10", r[0], r[1])
				}
			}
			if fmt.Sprint(got) != fmt.Sprint(tc.kept) {
				t.Errorf("runs kept %v, want %v", got, tc.kept)
			}
		})
	}
}
