package postgres

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
	"counterpart/warehouse/sqlcore"
	"counterpart/warehouse/warehousetest"
)

// partStudy makes a small cohort table and a publication of it in
// study st (keep_runs keep).
func partStudy(t *testing.T, w *Warehouse, keep int) (warehouse.Output, *warehouse.Publication) {
	t.Helper()
	execSQL(t, w, `CREATE TABLE src AS SELECT CAST(i AS BIGINT) AS id, i % 3 = 0 AS treated, i * 0.5 AS x1, i * 0.25 AS y1
		FROM generate_series(0, 199) AS g(i)`)
	c, err := w.ReadCohort(context.Background(), warehouse.CohortQuery{SQL: "SELECT * FROM src", Unit: "id", Treatment: "treated",
		Covariates: []string{"x1"}, Outcomes: []string{"y1"}})
	if err != nil {
		t.Fatal(err)
	}
	out, p := warehousetest.BenchPublication(c, "public")
	out.Prefix, out.Study, out.Outcomes, out.KeepRuns = "st_", "st", []string{"y1"}, keep
	return out, p
}

// publish publishes p as run id (succeeded).
func publish(t *testing.T, w *Warehouse, out warehouse.Output, p *warehouse.Publication, id string) {
	t.Helper()
	ctx := context.Background()
	p.Run = warehouse.RunRecord{RunID: id, Study: out.Study, StartedAt: time.Now()}
	if err := w.StartRun(ctx, out, p.Run); err != nil {
		t.Fatal(err)
	}
	p.Run.Status = warehouse.StatusSucceeded
	if err := w.Publish(ctx, out, p); err != nil {
		t.Fatal(err)
	}
}

// partitionsOf lists the partitions of table with their row counts.
func partitionsOf(t *testing.T, w *Warehouse, table string) map[string]int64 {
	t.Helper()
	got := map[string]int64{}
	for _, r := range queryRows(t, w, `SELECT c.relname FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid
		WHERE i.inhparent = '`+table+`'::regclass`) {
		name := r[0].(string)
		got[name] = queryRows(t, w, "SELECT count(*) FROM "+warehouse.Quote(name))[0][0].(int64)
	}
	return got
}

// partName is sqlcore.PartitionName, failing the test on error.
func partName(t *testing.T, table, run string) string {
	t.Helper()
	n, err := sqlcore.PartitionName(table, run)
	if err != nil {
		t.Fatal(err)
	}
	return n
}

// TestRetentionDropsPartitions: the run tables are partitioned by run,
// and retention drops the expired runs' partitions without deleting a
// row from them (pg_stat_xact_user_tables, read inside the publishing
// transaction at its retention step), while effects and runs rows are
// deleted as before.
func TestRetentionDropsPartitions(t *testing.T) {
	w := openScratch(t)
	out, p := partStudy(t, w, 2)
	publish(t, w, out, p, "r1")
	publish(t, w, out, p, "r2")
	run := []string{"st_cohort", "st_scores", "st_matches", "st_weights"}
	for _, table := range run {
		if k := queryRows(t, w, "SELECT CAST(relkind AS text) FROM pg_class WHERE relname = '"+table+"'"); fmt.Sprint(k) != "[[p]]" {
			t.Fatalf("%s: relkind %v, want p (partitioned)", table, k)
		}
	}
	var deleted, deletedOther int64 = -1, -1
	w.Core.Fault = func(step string) error {
		if step != "retention" {
			return nil
		}
		r := queryRows(t, w, `SELECT COALESCE(sum(n_tup_del) FILTER (WHERE relname NOT IN ('st_runs', 'st_effects')), 0),
			COALESCE(sum(n_tup_del) FILTER (WHERE relname IN ('st_runs', 'st_effects')), 0)
			FROM pg_stat_xact_user_tables WHERE relname LIKE 'st\_%'`)
		deleted, deletedOther = int64(r[0][0].(float64)), int64(r[0][1].(float64))
		return nil
	}
	publish(t, w, out, p, "r3")
	w.Core.Fault = nil
	if deleted != 0 || deletedOther <= 0 {
		t.Errorf("rows deleted by retention: %d from the run tables (want 0), %d from runs and effects (want some)", deleted, deletedOther)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT run_id FROM st_runs ORDER BY run_id")); got != "[[r2] [r3]]" {
		t.Errorf("runs kept: %s", got)
	}
	for _, table := range run {
		got := partitionsOf(t, w, table)
		if len(got) != 2 || got[partName(t, table, "r2")] == 0 || got[partName(t, table, "r3")] == 0 {
			t.Errorf("%s: partitions %v, want those of r2 and r3", table, got)
		}
		if r := queryRows(t, w, "SELECT count(*) FROM pg_class WHERE relname = '"+partName(t, table, "r1")+"'"); fmt.Sprint(r) != "[[0]]" {
			t.Errorf("%s: the partition of r1 still exists (detached, not dropped)", table)
		}
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT DISTINCT run_id, count(*) FROM st_current_scores GROUP BY run_id")); got != "[[r3 200]]" {
		t.Errorf("current scores: %s", got)
	}
	// A partition is an ordinary reader's table: comments from the parent.
	part := partName(t, "st_scores", "r3")
	if r := queryRows(t, w, "SELECT obj_description('"+part+"'::regclass, 'pg_class') IS NOT NULL, col_description('"+part+"'::regclass, 4)"); !strings.Contains(fmt.Sprint(r), "true estimated probability") {
		t.Errorf("comments of %s: %v", part, r)
	}
}

// TestRetentionLockBusy: a reader holding a current view in an open
// transaction keeps the run tables from being locked; the publish does
// not fail or wait for it beyond the lock wait but deletes the expired
// run's rows (r1), and the next publish drops the emptied partition with
// the newly expired one (r2).
func TestRetentionLockBusy(t *testing.T) {
	ctx := context.Background()
	w := openScratch(t)
	out, p := partStudy(t, w, 2)
	publish(t, w, out, p, "r1")
	publish(t, w, out, p, "r2")
	reader, err := pgx.Connect(ctx, w.cfg.ConnString())
	if err != nil {
		t.Fatal(err)
	}
	defer reader.Close(ctx)
	// Repeatable read: a read-committed transaction that spans a publish
	// keeps the partition list it first locked, so it would see the new
	// current run without its rows (partition.go).
	tx, err := reader.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead})
	if err != nil {
		t.Fatal(err)
	}
	var n int64
	if err := tx.QueryRow(ctx, "SELECT count(*) FROM st_current_matches").Scan(&n); err != nil {
		t.Fatal(err)
	}
	publish(t, w, out, p, "r3")
	r1 := partName(t, "st_matches", "r1")
	if got := partitionsOf(t, w, "st_matches"); len(got) != 3 || got[r1] != 0 {
		t.Errorf("partitions while the reader held the table: %v, want r1's kept empty", got)
	}
	// The reader still sees its snapshot's run.
	if err := tx.QueryRow(ctx, "SELECT count(*) FROM st_current_matches").Scan(&n); err != nil || n != 134 {
		t.Errorf("reader: %d rows, %v; want 134", n, err)
	}
	if err := tx.Commit(ctx); err != nil {
		t.Fatal(err)
	}
	publish(t, w, out, p, "r4")
	for _, table := range []string{"st_cohort", "st_scores", "st_matches", "st_weights"} {
		if got := partitionsOf(t, w, table); len(got) != 2 || got[partName(t, table, "r3")] == 0 || got[partName(t, table, "r4")] == 0 {
			t.Errorf("%s after the reader left: %v, want r3's and r4's only", table, got)
		}
	}
}

// TestCurrentViewScansOnePartition: with several runs kept, a current
// view reads one partition only: EXPLAIN ANALYZE shows every other
// partition's scan never executed (the executor prunes on the value of
// the view's run_id subquery).
func TestCurrentViewScansOnePartition(t *testing.T) {
	w := openScratch(t)
	out, p := partStudy(t, w, 0)
	for _, id := range []string{"r1", "r2", "r3"} {
		publish(t, w, out, p, id)
	}
	for _, v := range []struct{ view, table string }{
		{"st_current_scores", "st_scores"}, {"st_current_matches", "st_matches"},
		{"st_current_weights", "st_weights"}, {"st_current_cohort", "st_cohort"},
	} {
		var scans, executed []string
		for _, r := range queryRows(t, w, "EXPLAIN (ANALYZE, COSTS OFF, TIMING OFF, SUMMARY OFF) SELECT * FROM "+v.view) {
			line := r[0].(string)
			if strings.Contains(line, " on "+v.table+"_r") {
				scans = append(scans, line)
				if !strings.Contains(line, "never executed") {
					executed = append(executed, line)
				}
			}
		}
		if len(executed) != 1 || !strings.Contains(executed[0], partName(t, v.table, "r3")) {
			t.Errorf("%s: partition scans executed %q (of %d planned), want the current run's only", v.view, executed, len(scans))
		}
	}
}

// TestUpgradeUnpartitioned: run tables an earlier version created plain
// keep their layout (relkind r, the run_id index) and their rows;
// retention deletes from them, and the views show the latest run. A
// table the study gains later (survival) would be created partitioned.
func TestUpgradeUnpartitioned(t *testing.T) {
	w := openScratch(t)
	out, p := partStudy(t, w, 2)
	w.Core.D.RunPartitions = false // the earlier version
	publish(t, w, out, p, "r1")
	publish(t, w, out, p, "r2")
	w.Core.D.RunPartitions = true
	publish(t, w, out, p, "r3")
	publish(t, w, out, p, "r4")
	for _, table := range []string{"st_cohort", "st_scores", "st_matches", "st_weights"} {
		if k := queryRows(t, w, "SELECT CAST(relkind AS text) FROM pg_class WHERE relname = '"+table+"'"); fmt.Sprint(k) != "[[r]]" {
			t.Errorf("%s: relkind %v, want r (kept plain)", table, k)
		}
		if got := fmt.Sprint(queryRows(t, w, "SELECT run_id, count(*) FROM "+table+" GROUP BY run_id ORDER BY run_id")); !strings.HasPrefix(got, "[[r3 ") || !strings.Contains(got, "[r4 ") || strings.Count(got, "[r") != 2 {
			t.Errorf("%s rows by run: %s, want r3 and r4", table, got)
		}
		if r := queryRows(t, w, "SELECT count(*) FROM pg_indexes WHERE indexname = '"+table+"_run_id'"); fmt.Sprint(r) != "[[1]]" {
			t.Errorf("%s: run_id index %v", table, r)
		}
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT DISTINCT run_id FROM st_current_weights")); got != "[[r4]]" {
		t.Errorf("current weights: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM st_analysis")); got != "[[200]]" {
		t.Errorf("analysis view: %s rows", got)
	}
}

// TestPartitionOwnerPreflight: a role that may insert into and delete
// from a study's partitioned run tables but does not own them is refused
// at the lock, before the read, with the ALTER TABLE … OWNER TO that
// fixes it: attaching and dropping a run's partition needs the owner.
func TestPartitionOwnerPreflight(t *testing.T) {
	ctx := context.Background()
	w := openScratch(t)
	out, p := partStudy(t, w, 2)
	publish(t, w, out, p, "r1")
	role := fmt.Sprintf("cp_publisher_%d", os.Getpid())
	execSQL(t, w, "DROP ROLE IF EXISTS "+role+"; CREATE ROLE "+role+" LOGIN; GRANT USAGE, CREATE ON SCHEMA public TO "+role+
		"; GRANT SELECT, INSERT, DELETE, UPDATE ON ALL TABLES IN SCHEMA public TO "+role)
	t.Cleanup(func() { execSQL(t, w, "DROP OWNED BY "+role+"; DROP ROLE "+role) })
	dsn := w.cfg.ConnString()
	dsn += map[bool]string{true: "&", false: "?"}[strings.Contains(dsn, "?")] + "user=" + role
	o, err := Open(ctx, dsn)
	if err != nil {
		t.Fatal(err)
	}
	defer o.Close()
	_, err = o.Lock(ctx, out)
	if !errors.Is(err, warehouse.ErrBadInput) || !strings.Contains(err.Error(), "does not own the partitioned table public.st_") || !strings.Contains(err.Error(), "OWNER TO "+role) {
		t.Errorf("lock by a role that does not own the run tables: %v", err)
	}
}

// TestPartitionsAttachedAtStart: a run's partitions are attached by
// StartRun (committed before the publish makes the run current, so that
// no reader sees the run without its partition); a run that fails leaves
// them empty, and the next publish drops them even without retention.
func TestPartitionsAttachedAtStart(t *testing.T) {
	ctx := context.Background()
	w := openScratch(t)
	out, p := partStudy(t, w, 0)
	publish(t, w, out, p, "r1")
	if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r2", Study: "st", StartedAt: time.Now()}); err != nil {
		t.Fatal(err)
	}
	if got := partitionsOf(t, w, "st_scores"); len(got) != 2 || got[partName(t, "st_scores", "r2")] != 0 {
		t.Fatalf("partitions after StartRun r2: %v", got)
	}
	if err := w.FailRun(ctx, out, "r2", "boom"); err != nil {
		t.Fatal(err)
	}
	publish(t, w, out, p, "r3")
	for _, table := range []string{"st_cohort", "st_scores", "st_matches", "st_weights"} {
		got := partitionsOf(t, w, table)
		if len(got) != 2 || got[partName(t, table, "r1")] == 0 || got[partName(t, table, "r3")] == 0 {
			t.Errorf("%s after r3: %v, want r1's and r3's", table, got)
		}
	}
}
