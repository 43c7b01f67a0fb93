package duckdb

import (
	"context"
	"database/sql"
	"fmt"
	"path/filepath"
	"testing"

	"counterpart/warehouse"
	"counterpart/warehouse/warehousetest"
)

// openTemp opens a new DuckDB file in the test's temporary directory.
func openTemp(t testing.TB) *Warehouse {
	t.Helper()
	w, err := Open(context.Background(), filepath.Join(t.TempDir(), "w.duckdb"))
	return warehousetest.Keep(t, w, err)
}

// queryRows runs a query on w's dedicated connection and returns all rows.
func queryRows(t testing.TB, w warehouse.Warehouse, query string) [][]any {
	t.Helper()
	return warehousetest.SQLRows(t, w.(*Warehouse).testConn(t), query)
}

var execSQL = warehousetest.Exec

// engine adapts this package to the conformance suite. flock conflicts
// between two open files even in one process, so the same handle stands
// for another session.
var engine = warehousetest.Engine{
	Schema: "main", Query: queryRows,
	Open:  func(t *testing.T) warehouse.Warehouse { return openTemp(t) },
	Other: func(t *testing.T, w warehouse.Warehouse) warehouse.Warehouse { return w },
}

func TestConformance(t *testing.T) {
	warehousetest.RunConformance(t, engine)
}

// TestUpgradeRunsTable: the suite's upgrade check; the rebuilt runs table
// keeps its comment.
func TestUpgradeRunsTable(t *testing.T) {
	w := warehousetest.UpgradeRunsTable(t, engine)
	if got := fmt.Sprint(queryRows(t, w, "SELECT count(*) FROM duckdb_tables() WHERE table_name LIKE 'st_runs%' AND comment <> ''")); got != "[[1]]" {
		t.Errorf("runs tables with a comment after the upgrade: %s", got)
	}
}

// testConn is w's open session, opened (read-write unless w is read-only)
// when none is: tests' own statements, between w's operations.
func (w *Warehouse) testConn(tb testing.TB) *sql.Conn {
	tb.Helper()
	c, err := w.session(context.Background())
	if err != nil {
		tb.Fatal(err)
	}
	return c
}
