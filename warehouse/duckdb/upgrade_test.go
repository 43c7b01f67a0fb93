package duckdb

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"counterpart/warehouse"
)

// oldRunsDDL is the runs table as engines created it before the summary
// column and the abandoned status existed.
func oldRunsDDL(t *testing.T, out warehouse.Output, typ map[warehouse.ColType]string) string {
	t.Helper()
	c, err := warehouse.NewContract(out)
	if err != nil {
		t.Fatal(err)
	}
	var cols []string
	for _, col := range c.Runs.Columns {
		if col.Name == "summary" {
			continue
		}
		def := col.Name + " " + typ[col.Type]
		if col.Name == "run_id" {
			def += " PRIMARY KEY"
		}
		cols = append(cols, def)
	}
	cols = append(cols, "CHECK (status IN ('running', 'succeeded', 'rejected', 'failed', 'skipped'))")
	return "CREATE TABLE " + c.Runs.Name + " (" + strings.Join(cols, ", ") + ")"
}

// TestUpgradeRunsTable: a runs table of the previous contract gains the
// summary column and accepts the abandoned status; its rows survive.
func TestUpgradeRunsTable(t *testing.T) {
	w := openTemp(t)
	ctx := context.Background()
	out := warehouse.Output{Schema: "main", Prefix: "st_", Study: "st", Unit: "id", Treatment: "tr"}
	execSQL(t, w, oldRunsDDL(t, out, dialect.Types))
	execSQL(t, w, "INSERT INTO st_runs (run_id, study, status, started_at) VALUES ('r0', 'st', 'running', TIMESTAMPTZ '2025-12-31 00:00:00+00')")
	if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r1", Study: "st", StartedAt: time.Now()}); err != nil {
		t.Fatal(err)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT run_id, status, summary IS NULL FROM st_runs ORDER BY run_id")); got != "[[r0 abandoned true] [r1 running true]]" {
		t.Errorf("upgraded runs table: %s", got)
	}
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM duckdb_tables() WHERE table_name LIKE 'st_runs%' AND comment <> ''")); got != "[[1]]" {
		t.Errorf("runs tables with a comment after the upgrade: %s", got)
	}
	// The status check still refuses an unknown status.
	if _, err := w.conn.ExecContext(ctx, "UPDATE st_runs SET status = 'bogus' WHERE run_id = 'r1'"); err == nil {
		t.Error("the upgraded runs table accepted status bogus")
	}
}
