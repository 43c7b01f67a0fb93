package warehousetest

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

// UpgradeRunsTable: a runs table of the previous contract gains the
// summary column and accepts the abandoned status; its rows survive. It
// returns the warehouse for an engine's own checks of the upgraded table.
func UpgradeRunsTable(t *testing.T, e Engine) warehouse.Warehouse {
	w := e.Open(t)
	ctx := context.Background()
	out := warehouse.Output{Schema: e.Schema, Prefix: "st_", Study: "st", Unit: "id", Treatment: "tr"}
	e.Exec(t, w, oldRunsDDL(t, out, core(t, w).D.Types))
	e.Exec(t, w, "INSERT INTO st_runs (run_id, study, status, started_at) VALUES ('r0', 'st', 'running', TIMESTAMPTZ '2025-12-31 00:00:00+00')")
	if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r1", Study: "st", StartedAt: time.Now()}); err != nil {
		t.Fatal(err)
	}
	if got := fmt.Sprint(e.Query(t, w, "SELECT run_id, status, summary IS NULL FROM st_runs ORDER BY run_id")); got != "[[r0 abandoned true] [r1 running true]]" {
		t.Errorf("upgraded runs table: %s", got)
	}
	// The rebuilt check accepts the newest status.
	if _, err := core(t, w).A.Exec(ctx, "UPDATE st_runs SET status = 'cancelled' WHERE run_id = 'r0'"); err != nil {
		t.Errorf("the upgraded runs table refused status cancelled: %v", err)
	}
	// The status check still refuses an unknown status.
	if _, err := core(t, w).A.Exec(ctx, "UPDATE st_runs SET status = 'bogus' WHERE run_id = 'r1'"); err == nil {
		t.Error("the upgraded runs table accepted status bogus")
	}
	return w
}
